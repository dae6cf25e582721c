"""Engine sources: paths, globs, folders, CSV, ibis tables; bad input; the magic and the CLI.

Real DuckDB through ibis (no mocks).  Reference for every number: the pandas path
on the same data (``df.eda``), itself checked against NIST/scipy elsewhere.
"""

from __future__ import annotations

import os

import ibis
import numpy as np
import pandas as pd
import pytest

import nbeda
from nbeda.engine._source import EngineError, open_source, require_extra
from nbeda.sections import SECTIONS
from tests.helpers import assert_same_table, run_code


def _frame(n: int = 400, seed: int = 3) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    df = pd.DataFrame(
        {
            "bed": [f"B{i:04d}" for i in range(n)],
            "crop": rng.choice(["basil", "kale", "leek"], n),
            "yield_kg": rng.gamma(3.0, 10.0, n),
            "ph": rng.normal(6.5, 0.4, n),
            "pests": rng.integers(0, 6, n).astype("float64"),
        }
    )
    df.loc[rng.choice(n, 25, replace=False), "ph"] = np.nan
    return df


@pytest.fixture()
def parquet(tmp_path):
    df = _frame()
    path = tmp_path / "beds.parquet"
    df.to_parquet(path)
    return df, path


def test_every_tab_agrees_with_the_pandas_path_when_the_sample_is_the_table(parquet):
    """Reference: the pandas path on the same rows (the sample is the whole table here)."""
    df, path = parquet
    eng = nbeda.source(str(path))
    mem = nbeda.Report(df)
    assert eng.engine.sample_is_all
    for name in SECTIONS:
        a, b = eng.section(name).table, mem.section(name).table
        assert_same_table(a, b, rtol=1e-9)
        how = list(eng.section(name).exactness["how"])
        assert not [h for h in how if "sample (" in h], how  # nothing rests on a part of the rows


@pytest.mark.parametrize("name", SECTIONS)
def test_engine_code_reopens_the_file_and_rebuilds_the_table(parquet, name):
    """The code contract on the engine path: ibis + pandas code, run fresh, equals .table."""
    _, path = parquet
    r = nbeda.source(str(path), sample=150, by="crop")
    result = r.section(name)
    code = result.code()
    assert "import ibis" in code and "read_parquet" in code
    ns = run_code(code, None, "unused")
    assert_same_table(ns[name], result.table, rtol=1e-9)


def test_glob_folder_and_csv_read_the_same_rows(tmp_path):
    df = _frame(300)
    (tmp_path / "parts").mkdir()
    df.iloc[:100].to_parquet(tmp_path / "parts" / "a.parquet")
    df.iloc[100:].to_parquet(tmp_path / "parts" / "b.parquet")
    df.to_csv(tmp_path / "beds.csv", index=False)
    by_glob = nbeda.source(str(tmp_path / "parts" / "*.parquet"))
    by_folder = nbeda.source(str(tmp_path / "parts"))
    by_csv = nbeda.source(str(tmp_path / "beds.csv"))
    ref = df.eda.spread().table
    for r in (by_glob, by_folder, by_csv):
        assert r.engine.n_rows == 300
        assert_same_table(r.spread().table, ref, rtol=1e-9)


def test_bad_inputs_give_clear_errors(tmp_path):
    with pytest.raises(EngineError, match="no file matches"):
        open_source(str(tmp_path / "none-*.parquet"))
    with pytest.raises(EngineError, match="no such file"):
        open_source(str(tmp_path / "missing.parquet"))
    empty = tmp_path / "empty.parquet"
    empty.write_bytes(b"")
    with pytest.raises(EngineError, match="empty"):
        open_source(str(empty))
    junk = tmp_path / "junk.parquet"
    junk.write_bytes(b"this is not parquet at all" * 10)
    with pytest.raises(EngineError, match="cannot read"):
        open_source(str(junk))
    (tmp_path / "mixed").mkdir()
    pd.DataFrame({"a": [1.0, 2.0], "b": ["x", "y"]}).to_parquet(tmp_path / "mixed" / "1.parquet")
    pd.DataFrame({"a": ["1", "2"], "c": [1, 2]}).to_parquet(tmp_path / "mixed" / "2.parquet")
    with pytest.raises(EngineError, match="do not share one schema"):
        open_source(str(tmp_path / "mixed" / "*.parquet"))
    (tmp_path / "mixed" / "x.txt").write_text("a\n1\n")
    with pytest.raises(EngineError, match="must all be Parquet"):
        open_source([str(tmp_path / "mixed" / "1.parquet")][0].replace("1.parquet", "*"))
    with pytest.raises(TypeError, match="file path or glob"):
        open_source(12345)


def test_an_empty_table_reports_without_crashing(tmp_path):
    path = tmp_path / "no_rows.parquet"
    _frame(40).iloc[:0].to_parquet(path)
    r = nbeda.source(str(path))
    assert r.engine.n_rows == 0
    roles = r.roles().table
    assert set(roles["role"]) == {"empty"}
    assert "0 rows" in r.header_text()
    r.to_html()  # every tab renders (failures stay inside their tab)


def test_missing_extra_names_the_extra():
    with pytest.raises(ModuleNotFoundError, match=r"nbeda\[duckdb\]"):
        require_extra("nbeda_no_such_module_here", "duckdb")


def test_ibis_table_source_and_header(parquet):
    df, path = parquet
    t = ibis.duckdb.connect().read_parquet(str(path))
    r = nbeda.source(t, sample=100)
    assert r.engine.n_rows == len(df)
    assert "seeded sample" in r.header_text()
    # Exact columns equal the pandas path on all rows; sample columns are labelled.
    sp, ref = r.spread().table, df.eda.spread().table
    for col in ("count", "mean", "std", "min", "max", "median", "q1", "q3"):
        np.testing.assert_allclose(sp[col].astype(float), ref[col].astype(float), rtol=1e-9)
    how = r.spread().exactness["how"]
    assert how["mean"].startswith("exact") and how["mode"].startswith("sample")
    ns = run_code(r.spread().code("tbl"), t, "tbl")
    assert_same_table(ns["spread"], sp, rtol=1e-9)


def test_same_seed_same_sample_other_seed_other_sample(parquet):
    _, path = parquet
    a = nbeda.source(str(path), sample=100, seed=1).frame
    b = nbeda.source(str(path), sample=100, seed=1).frame
    c = nbeda.source(str(path), sample=100, seed=2).frame
    pd.testing.assert_frame_equal(a, b)
    assert set(a["bed"]) != set(c["bed"])
    assert 50 <= len(a) <= 150  # Bernoulli around 100 (sd ≈ 9.5)


def test_user_file_untouched(parquet):
    df, path = parquet
    before = os.stat(path).st_mtime_ns, path.read_bytes()
    nbeda.source(str(path)).to_html()
    assert (os.stat(path).st_mtime_ns, path.read_bytes()) == before


def test_magic_opens_paths_and_tables(parquet):
    from IPython.testing.globalipapp import get_ipython

    import nbeda.magics as magics

    df, path = parquet
    ip = get_ipython()
    ip.run_line_magic("load_ext", "nbeda")
    shown = []
    orig = magics.display
    magics.display = shown.append
    try:
        ip.run_line_magic("eda", f"{path} --sample 100 --tab spread")
        w = shown[-1]
        assert w.report.engine is not None and w.selected == "spread"
        assert w.state["spread"] == "done"
        ip.user_ns["beds_tbl"] = ibis.duckdb.connect().read_parquet(str(path))
        ip.run_line_magic("eda", "beds_tbl --memory-limit 512MB")
        assert shown[-1].report.frame_name == "beds_tbl"
        ip.user_ns["beds_path"] = str(path)
        ip.run_line_magic("eda", "beds_path --approximate")
        assert shown[-1].report.engine.exact is False
        from IPython.core.error import UsageError

        with pytest.raises(UsageError, match="no file matches"):
            ip.run_line_magic("eda", f"{path.parent}/nothing-*.parquet")
        ip.user_ns["beds_df"] = df
        with pytest.raises(UsageError, match="apply to engine sources"):
            ip.run_line_magic("eda", "beds_df --memory-limit 1GB")
        with pytest.raises(UsageError, match="unknown column"):
            ip.run_line_magic("eda", f"{path} --by nope")
    finally:
        magics.display = orig


def test_cli_engine_writes_report_and_a_script_that_runs(parquet, tmp_path):
    from nbeda.__main__ import main

    df, path = parquet
    out, script = tmp_path / "r.html", tmp_path / "r.py"
    assert main([str(path), "--engine", "duckdb", "--sample", "150", "-o", str(out), "--code", str(script), "-q"]) == 0
    page = out.read_text()
    assert "How each number was computed" in page and "engine duckdb" in page
    ns = run_code(script.read_text(), None, "unused")
    ref = nbeda.source(str(path), sample=150)
    assert_same_table(ns["spread"], ref.spread().table, rtol=1e-9)
    assert main([str(path), "--memory-limit", "1GB", "-o", str(out), "-q"]) == 2


def test_widget_and_cli_show_engine_progress(parquet, tmp_path, capsys):
    from nbeda.__main__ import main
    from nbeda.widget import ReportWidget

    _, path = parquet
    w = ReportWidget(nbeda.source(str(path), sample=100))
    seen: list[str] = []
    w.contents["spread"].observe(lambda ch: seen.extend(getattr(c, "value", "") for c in ch["new"]), names="children")
    assert w.compute("spread") == "done"
    assert any("Spread: quantiles of" in v for v in seen), seen  # the running query is named
    assert main([str(path), "--engine", "duckdb", "-o", str(tmp_path / "r.html")]) == 0
    assert "engine: quantiles of" in capsys.readouterr().err


@pytest.mark.parametrize("name", SECTIONS)
def test_hostile_labels_and_values_on_the_engine_path(tmp_path, name):
    """Labels reach emitted ibis code through repr() and HTML through escaping (sample < table)."""
    from tests.helpers import HOSTILE_NAME, SCRIPT

    rng = np.random.default_rng(9)
    n = 600
    df = pd.DataFrame(
        {
            HOSTILE_NAME: rng.gamma(2.0, 4.0, n),
            SCRIPT: rng.choice([SCRIPT, "a'b", 'q"'], n),
            "ok": rng.normal(size=n),
        }
    )
    path = tmp_path / "hostile.parquet"
    df.to_parquet(path)
    r = nbeda.source(str(path), sample=200, by=SCRIPT)
    result = r.section(name)
    html = result.to_html()
    assert SCRIPT not in html and "<script>alert" not in html
    ns = run_code(result.code(), None, "unused")
    assert_same_table(ns[name], result.table, rtol=1e-9)
