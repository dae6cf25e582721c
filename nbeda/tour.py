"""Run the guided tour: ``python -m nbeda.tour`` (JupyterLab) or ``--headless`` (execute it).

The tour notebook walks every tab on the invented greenhouse demo data.
"""

from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

__all__ = ["main", "notebook_path"]


def notebook_path() -> Path:
    """The tour notebook in the source checkout (installed with ``pip install -e``)."""
    path = Path(__file__).resolve().parents[1] / "example_notebooks" / "greenhouse_tour.ipynb"
    if not path.exists():
        raise FileNotFoundError(f"tour notebook not found at {path}; run from a source checkout")
    return path


def run_headless(out: Path) -> int:
    """Execute the tour with a kernel and write the executed notebook to ``out``."""
    import nbformat
    from nbclient import NotebookClient

    nb = nbformat.read(notebook_path(), as_version=4)
    client = NotebookClient(nb, timeout=600, kernel_name="python3", resources={"metadata": {"path": str(out.parent)}})
    client.execute()
    nbformat.write(nb, out)
    n_code = sum(c.cell_type == "code" for c in nb.cells)
    errors = [
        o for c in nb.cells if c.cell_type == "code" for o in c.get("outputs", []) if o.get("output_type") == "error"
    ]
    print(f"executed {n_code} code cells, {len(errors)} errors; executed notebook: {out}")
    return 1 if errors else 0


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m nbeda.tour", description=__doc__)
    parser.add_argument("--headless", action="store_true", help="execute the tour instead of opening JupyterLab")
    parser.add_argument("--out", default=None, help="where --headless writes the executed notebook")
    args = parser.parse_args(argv)
    if args.headless:
        out = Path(args.out) if args.out else Path(tempfile.mkdtemp(prefix="nbeda-tour-")) / "greenhouse_tour.ipynb"
        out.parent.mkdir(parents=True, exist_ok=True)
        return run_headless(out)
    work = Path(tempfile.mkdtemp(prefix="nbeda-tour-"))
    shutil.copy(notebook_path(), work / "greenhouse_tour.ipynb")
    print(f"Opening JupyterLab on a copy of the tour in {work}", file=sys.stderr)
    cmd = [sys.executable, "-m", "jupyterlab", "--notebook-dir", str(work), "greenhouse_tour.ipynb"]
    return subprocess.call(cmd)


if __name__ == "__main__":
    raise SystemExit(main())
