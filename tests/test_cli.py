"""``python -m nbeda``: the standalone report and the runnable analysis script from a data file.

Outside reference: Fisher's iris as shipped by scikit-learn, written to CSV — the script the
command line writes must reproduce the report's tables, and its Spread table must carry the
minima and maxima of the summary table in the dataset's own description (DESCR; min/max only,
the description's means/SDs come from a slightly different copy of the data).
"""

from __future__ import annotations

import os
import pickle
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from helpers import SCRIPT, assert_same_table

from nbeda.__main__ import main, read_data, reader_for
from nbeda.report import Report
from nbeda.sections import TITLES

ROOT = Path(__file__).resolve().parent.parent

AWKWARD_CSV = (
    'bed,site,note,yield_kg,pest_score\n'
    'B1,"Northgate, east wing","<script>alert(1)</script>",3.5,2\n'
    'B2,Łódź Glasshouse,"said ""fine"", then left",4.25,3\n'
    'B3,Crème Brûlée Farm,"multi\nline note",,1\n'
    'B4,温室,"plain",5.0,5\n'
    'B5,"Northgate, east wing","<b>bold</b> & co",2.75,4\n'
    'B6,Hilltop,"",6.5,2\n'
    'B7,Hilltop,"tab\tinside",1.25,3\n'
    'B8,温室,"emoji 🌱",4.0,1\n'
)


def run_script(script: Path, tmp_path: Path, names: tuple[str, ...]) -> dict[str, pd.DataFrame]:
    """Run the written script in a fresh interpreter (elsewhere) and pickle the named tables out."""
    out = tmp_path / "tables.pkl"
    runner = tmp_path / "runner.py"
    runner.write_text(
        script.read_text(encoding="utf-8")
        + f"\nimport pickle\nwith open({str(out)!r}, 'wb') as fh:\n"
        + f"    pickle.dump({{n: globals()[n] for n in {names!r}}}, fh)\n",
        encoding="utf-8",
    )
    env = {k: v for k, v in os.environ.items() if k != "PYTHONPATH"}
    proc = subprocess.run(
        [sys.executable, str(runner)], cwd=str(tmp_path.parent), env=env, capture_output=True, text=True, timeout=600
    )
    assert proc.returncode == 0, proc.stderr[-3000:]
    with open(out, "rb") as fh:
        return pickle.load(fh)


@pytest.fixture(scope="module")
def demo_csv(demo_frame, tmp_path_factory):
    path = tmp_path_factory.mktemp("demo") / "greenhouse beds.csv"
    demo_frame.to_csv(path, index=False)
    return path


def test_demo_csv_report_and_script_reproduce(demo_csv, tmp_path, capsys):
    out, code = tmp_path / "report.html", tmp_path / "analysis.py"
    rc = main([str(demo_csv), "-o", str(out), "--by", "site", "--roles", "pest_score=discrete", "--code", str(code)])
    err = capsys.readouterr().err
    assert rc == 0, err
    assert "7/7" in err and "computing Roles" in err  # progress on stderr
    page = out.read_text(encoding="utf-8")
    assert "http://" not in page and "https://" not in page
    for title in TITLES.values():
        assert f">{title}</label>" in page
    script = code.read_text(encoding="utf-8")
    assert "import nbeda" not in script and "from nbeda" not in script
    assert f"df = pd.read_csv({str(demo_csv.resolve())!r})" in script
    assert "'pest_score': 'discrete'" in script  # the override is visible in the code
    # the report the CLI built, rebuilt here from the same file with the same options
    report = Report(pd.read_csv(demo_csv), by="site", roles={"pest_score": "discrete"})
    got = run_script(code, tmp_path, ("roles", "spread"))
    assert_same_table(got["roles"], report.roles().table)
    assert_same_table(got["spread"], report.spread().table)
    assert got["roles"].loc["pest_score", "role"] == "discrete"
    assert got["roles"].loc["plot_id", "role"] == "identifier"


def test_awkward_csv(tmp_path, capsys):
    data = tmp_path / "awkward.csv"
    data.write_text(AWKWARD_CSV, encoding="utf-8")
    frame = pd.read_csv(data)
    assert frame.loc[0, "note"] == SCRIPT and frame.loc[1, "note"] == 'said "fine", then left'
    assert frame.loc[0, "site"] == "Northgate, east wing" and frame.loc[7, "note"] == "emoji 🌱"
    out, code = tmp_path / "awkward.html", tmp_path / "awkward.py"
    assert main([str(data), "-o", str(out), "--code", str(code), "--target", "yield_kg"]) == 0
    page = out.read_text(encoding="utf-8")
    assert "<script" not in page and "<b>bold" not in page
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in page
    for word in ("Łódź Glasshouse", "温室", "Crème Brûlée Farm", "Northgate, east wing"):
        assert word in page  # UTF-8 kept as text
    assert "http://" not in page and "https://" not in page
    got = run_script(code, tmp_path, ("roles", "spread"))
    report = Report(frame, target="yield_kg")
    assert_same_table(got["roles"], report.roles().table)
    assert_same_table(got["spread"], report.spread().table)
    assert got["spread"].loc["yield_kg", "count"] == 7  # one blank yield


def test_iris_script_matches_description(tmp_path):
    """Fisher's iris (scikit-learn copy): the script's spread min/max equal DESCR's summary table."""
    from sklearn.datasets import load_iris

    data = tmp_path / "iris.csv"
    load_iris(as_frame=True).frame.to_csv(data, index=False)
    code = tmp_path / "iris.py"
    assert main([str(data), "-o", str(tmp_path / "iris.html"), "--code", str(code), "-q"]) == 0
    spread = run_script(code, tmp_path, ("spread",))["spread"]
    described = {
        "sepal length (cm)": (4.3, 7.9),
        "sepal width (cm)": (2.0, 4.4),
        "petal length (cm)": (1.0, 6.9),
        "petal width (cm)": (0.1, 2.5),
    }
    for col, (lo, hi) in described.items():
        assert spread.loc[col, "min"] == pytest.approx(lo) and spread.loc[col, "max"] == pytest.approx(hi)
        assert spread.loc[col, "count"] == 150


def test_tsv_and_json_lines(tmp_path):
    frame = pd.DataFrame({"site": ["Northgate", "Hilltop", "Riverside", "Hilltop"], "yield_kg": [1.5, 2.0, np.nan, 4.5]})
    tsv, jsonl = tmp_path / "beds.tsv", tmp_path / "beds.jsonl"
    frame.to_csv(tsv, sep="\t", index=False)
    frame.to_json(jsonl, orient="records", lines=True)
    for path in (tsv, jsonl):
        pd.testing.assert_frame_equal(read_data(path), frame, check_dtype=False)
        assert main([str(path), "-o", str(tmp_path / f"{path.suffix[1:]}.html"), "-q"]) == 0
    assert reader_for("a.csv.gz") == ("read_csv", {})
    assert reader_for("a.TSV") == ("read_csv", {"sep": "\t"})
    assert reader_for("a.ndjson") == ("read_json", {"lines": True})
    assert reader_for("a.parquet") == ("read_parquet", {})


def test_parquet(tmp_path, capsys):
    frame = pd.DataFrame({"a": [1.0, 2.0, 3.0]})
    path = tmp_path / "beds.parquet"
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        path.write_bytes(b"PAR1 not really")
        assert main([str(path), "-o", str(tmp_path / "p.html")]) == 2
        assert "pyarrow" in capsys.readouterr().err
        assert not (tmp_path / "p.html").exists()
    else:
        frame.to_parquet(path)
        assert main([str(path), "-o", str(tmp_path / "p.html"), "-q"]) == 0


@pytest.mark.parametrize(
    ("extra", "message"),
    [
        (["--by", "nowhere"], "--by: unknown column 'nowhere'"),
        (["--target", "nowhere"], "--target: unknown column 'nowhere'"),
        (["--roles", "pest_score=wizard"], "unknown role 'wizard'"),
        (["--roles", "nowhere=nominal"], "--roles: unknown column 'nowhere'"),
        (["--roles", "pest_score"], "column=role pairs"),
        (["--sample", "0"], "sample must be a positive row count"),
        (["--confidence", "1.5"], "confidence must be in"),
    ],
)
def test_bad_options_exit_2_and_write_nothing(tmp_path, capsys, extra, message):
    data = tmp_path / "beds.csv"
    pd.DataFrame({"site": ["a", "b", "c"], "pest_score": [1, 2, 3]}).to_csv(data, index=False)
    out, code = tmp_path / "r.html", tmp_path / "r.py"
    out.write_text("previous report", encoding="utf-8")
    assert main([str(data), "-o", str(out), "--code", str(code), *extra]) == 2
    err = capsys.readouterr().err
    errors = [line for line in err.splitlines() if line.startswith("nbeda: error:")]
    assert len(errors) == 1 and message in errors[0], err
    assert out.read_text(encoding="utf-8") == "previous report" and not code.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["beds.csv", "r.html"]


def test_unreadable_inputs_exit_2(tmp_path, capsys):
    bad_json = tmp_path / "bad.jsonl"
    bad_json.write_text('{"a": 1}\n{"a": \n', encoding="utf-8")
    cases = [
        (tmp_path / "missing.csv", "no such file"),
        (bad_json, "could not read"),
        (tmp_path, "holds no Parquet files"),  # a folder is read by the engine
        (tmp_path / "sheet.xlsx", "cannot tell the format"),
    ]
    for path, message in cases:
        assert main([str(path), "-o", str(tmp_path / "r.html")]) == 2, path
        assert message in capsys.readouterr().err, path
    ragged = tmp_path / "ragged.csv"
    ragged.write_text("a,b\n1,2\n3,4,5,6\n", encoding="utf-8")
    assert main([str(ragged), "-o", str(tmp_path / "r.html")]) == 2
    assert "could not read" in capsys.readouterr().err
    assert not (tmp_path / "r.html").exists()


def test_all_or_nothing_when_a_target_cannot_be_written(tmp_path, capsys):
    data = tmp_path / "beds.csv"
    pd.DataFrame({"a": [1.0, 2.0, 3.5]}).to_csv(data, index=False)
    out = tmp_path / "r.html"
    rc = main([str(data), "-o", str(out), "--code", str(tmp_path / "no_such_dir" / "a.py"), "-q"])
    assert rc == 2 and "cannot write" in capsys.readouterr().err
    assert not out.exists()
    assert [p.name for p in tmp_path.iterdir()] == ["beds.csv"]  # no temporary file left behind
    assert main([str(data), "-o", str(tmp_path)]) == 2  # -o names a directory


def test_module_entry_point(tmp_path):
    """``python -m nbeda`` itself: help, usage error and a run."""
    env = {k: v for k, v in os.environ.items() if k != "PYTHONPATH"}
    helped = subprocess.run([sys.executable, "-m", "nbeda", "--help"], capture_output=True, text=True, env=env)
    assert helped.returncode == 0 and "--code" in helped.stdout and "--roles" in helped.stdout
    usage = subprocess.run([sys.executable, "-m", "nbeda", "x.csv"], capture_output=True, text=True, env=env)
    assert usage.returncode == 2 and "-o" in usage.stderr
    data = tmp_path / "beds.csv"
    pd.DataFrame({"a": [1.0, 2.0, 3.5], "b": ["x", "y", "x"]}).to_csv(data, index=False)
    run = subprocess.run(
        [sys.executable, "-m", "nbeda", str(data), "-o", str(tmp_path / "r.html")],
        capture_output=True,
        text=True,
        env=env,
        cwd=str(ROOT),
    )
    assert run.returncode == 0, run.stderr
    assert "wrote" in run.stderr and (tmp_path / "r.html").stat().st_size > 1000
