"""The engine path on Spark (local mode through ibis' pyspark backend), and the aggregate layer's
handling of column types an engine cannot aggregate (on DuckDB).

References named beside each check:

* data: Fisher's iris (``sklearn.datasets.load_iris``), with holes, NaN, ±inf and a text
  column with missing values added so every convention is exercised;
* exact numbers: the pandas path on the same frame (``df.eda.spread()``) and numpy/scipy
  (``scipy.stats.skew``/``kurtosis`` for the moments), to 1e-9 relative;
* approximate quantiles: the rank-error guarantee of Spark's ``percentile_approx``
  (Spark SQL reference, "percentile_approx": relative error 1/accuracy, default accuracy
  10000), checked against the ranks of the exact sorted values;
* approximate distinct counts: Spark's ``approx_count_distinct`` (HyperLogLog++, Heule,
  Nunkesser & Hall 2013) with its documented default relative standard deviation 0.05; the
  check allows three standard deviations;
* random sample: Spark's ``DataFrame.sample(withReplacement=False, fraction, seed)`` (Bernoulli
  per row, seeded); ``TABLESAMPLE (n ROWS)`` would return the first rows.

The Spark tests are marked ``slow`` (CI runs them); the DuckDB test at the end is not.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from scipy import stats
from sklearn.datasets import load_iris

import nbeda
from nbeda.engine import aggregates
from tests.helpers import assert_same_table, run_code

MEASURES = ["sepal length (cm)", "sepal width (cm)"]


def _iris_with_holes() -> pd.DataFrame:
    """Fisher's iris plus the awkward cases: NaN, ±inf, a nullable integer and missing text."""
    iris = load_iris(as_frame=True)
    df = iris.frame.drop(columns="target").copy()
    df["species"] = pd.Series(iris.target_names[iris.target], dtype="str")
    df.loc[[3, 40, 77], "species"] = None
    df.loc[[5, 17, 99, 140], "sepal width (cm)"] = np.nan
    df["petal ratio"] = df["petal length (cm)"] / df["petal width (cm)"]
    df.loc[[8, 60], "petal ratio"] = np.inf
    df.loc[[9], "petal ratio"] = -np.inf
    df.loc[[11], "petal ratio"] = np.nan
    df["plot"] = pd.array(np.arange(150) % 13, dtype="Int64")
    df.loc[[0, 1, 2], "plot"] = pd.NA
    # few columns keep the Spark queries (pairs in Links grow with their square) quick
    return df.drop(columns=["petal length (cm)", "petal width (cm)"])


@pytest.fixture(scope="module")
def iris_spark(spark):
    df = _iris_with_holes()
    sdf = spark.createDataFrame(df)
    report = nbeda.source(sdf)
    return df, sdf, report


def _finite(df: pd.DataFrame, c: str) -> np.ndarray:
    x = df[c].astype("float64").to_numpy()
    return x[np.isfinite(x)]


@pytest.mark.slow
def test_spark_frame_is_read_with_its_missing_values_and_infinities(iris_spark):
    """Reference: counts made by numpy on the frame the Spark DataFrame was built from."""
    df, sdf, report = iris_spark
    run = report.engine
    assert run.source.backend == "pyspark"
    assert not run.exact  # approximate quantiles and distinct counts by default on Spark
    assert run.n_rows == 150 and run.sample_is_all
    st = run.stats()
    ratio = df["petal ratio"].to_numpy()
    assert st.loc["petal ratio", "n_pinf"] == 2 and st.loc["petal ratio", "n_ninf"] == 1
    assert st.loc["petal ratio", "missing"] == 1
    assert st.loc["petal ratio", "count"] == int(np.isfinite(ratio).sum()) == 146
    assert st.loc["sepal width (cm)", "missing"] == 4
    assert st.loc["plot", "missing"] == 3 and st.loc["species", "missing"] == 3
    assert st.loc["species", "kind"] == "other" and set(st["note"]) == {""}


@pytest.mark.slow
def test_every_tab_renders_from_a_spark_frame(iris_spark):
    """Every tab of the engine report on Spark builds, renders to HTML and labels its numbers."""
    df, sdf, report = iris_spark
    for name in nbeda.SECTIONS:
        result = report.section(name)
        html = result.to_html()
        assert isinstance(result.table, pd.DataFrame) and len(html) > 200, name
        assert len(result.exactness) == result.table.shape[1], name
    page = report.to_html()
    assert "Spark DataFrame" in page and "pyspark" in page


@pytest.mark.slow
def test_spark_exact_statistics_equal_the_pandas_path(iris_spark):
    """Reference: the pandas path (``df.eda.spread()``) and numpy/scipy two-pass moments, 1e-9."""
    df, sdf, report = iris_spark
    eng = report.spread().table
    mem = df.eda.spread().table
    assert list(eng.index) == list(mem.index)
    for col in ["count", "mean", "std", "var", "sem", "mean_ci_low", "mean_ci_high", "min", "max",
                "range", "sum", "n_inf", "cv"]:
        np.testing.assert_allclose(eng[col].astype(float), mem[col].astype(float), rtol=1e-9,
                                   atol=0, err_msg=col)
    st = report.engine.stats()
    for c in MEASURES + ["petal ratio", "plot"]:
        x = _finite(df, c)
        n = len(x)
        d = x - st.loc[c, "mean0"]  # the same first-pass centre the engine used
        assert st.loc[c, "count"] == n
        for k, name in [(1, "s1"), (2, "m2"), (3, "m3"), (4, "m4")]:
            want = float(np.sum(d**k))
            assert math.isclose(st.loc[c, name], want, rel_tol=1e-9, abs_tol=1e-9 * np.sum(np.abs(d) ** k))
        # skewness and excess kurtosis from the engine's sums (shifted to the refined mean)
        # equal scipy's bias-corrected G1 and G2
        s1, m2, m3, m4 = (st.loc[c, k] for k in ("s1", "m2", "m3", "m4"))
        delta = s1 / n
        M2 = m2 - n * delta**2
        M3 = m3 - 3 * delta * m2 + 3 * delta**2 * s1 - n * delta**3
        M4 = m4 - 4 * delta * m3 + 6 * delta**2 * m2 - 4 * delta**3 * s1 + n * delta**4
        g1 = (M3 / n) / (M2 / n) ** 1.5
        g2 = (M4 / n) / (M2 / n) ** 2 - 3
        G1 = math.sqrt(n * (n - 1)) / (n - 2) * g1
        G2 = (n - 1) / ((n - 2) * (n - 3)) * ((n + 1) * g2 + 6)
        assert math.isclose(G1, stats.skew(x, bias=False), rel_tol=1e-9), c
        assert math.isclose(G2, stats.kurtosis(x, bias=False), rel_tol=1e-9), c
        assert math.isclose(st.loc[c, "mean"], float(np.mean(x)), rel_tol=1e-12), c


@pytest.mark.slow
def test_spark_approximate_quantiles_are_within_their_rank_error(spark):
    """Reference: percentile_approx's guarantee (Spark SQL reference: rank error ≤ n/accuracy,
    accuracy 10000) measured against the exact ranks of the same seeded values; HyperLogLog++
    distinct counts within 3 × the documented 5% relative standard deviation."""
    rng = np.random.default_rng(2024)
    n = 60_000
    x = rng.lognormal(2.0, 0.8, n)
    k = rng.integers(0, 20_000, n)
    sdf = spark.createDataFrame(pd.DataFrame({"x": x, "k": k}))
    src = nbeda.engine.open_source(sdf)
    probs = (0.01, 0.25, 0.5, 0.75, 0.99)
    q = aggregates.column_quantiles(src.table, ["x"], probs, exact=False)
    srt = np.sort(x)
    for p in probs:
        v = q.loc["x", p]
        below = np.searchsorted(srt, v, side="left") / n
        upto = np.searchsorted(srt, v, side="right") / n
        assert below - 1e-4 <= p <= upto + 1e-4, (p, v, below, upto)
    st = aggregates.column_stats(src.table, ["k"], exact=False)
    true = len(np.unique(k))
    assert abs(st.loc["k", "distinct"] - true) / true <= 0.15, (st.loc["k", "distinct"], true)


@pytest.mark.slow
def test_spark_exact_mode_gives_pandas_quantiles_and_distinct_counts(iris_spark):
    """Reference: ``pandas.Series.quantile`` (linear interpolation) and ``nunique`` on finite values."""
    df, sdf, report = iris_spark
    t = report.engine.t
    names = MEASURES + ["petal ratio", "plot"]
    probs = (0.1, 0.25, 0.5, 0.75, 0.9)
    q = aggregates.column_quantiles(t, names, probs, exact=True)
    st = aggregates.column_stats(t, names, exact=True)
    for c in names:
        s = pd.Series(_finite(df, c))
        for p in probs:
            assert math.isclose(q.loc[c, p], s.quantile(p), rel_tol=1e-12), (c, p)
        assert st.loc[c, "distinct"] == s.nunique()


@pytest.mark.slow
def test_spark_sample_is_seeded_bernoulli_not_the_first_rows(spark):
    """Reference: Spark's seeded ``DataFrame.sample`` — the same seed draws the same rows, another
    seed other rows, rows come from the whole table, and the size is Binomial(n, f) (±4 SD)."""
    n_rows, n = 4000, 200
    sdf = spark.createDataFrame(pd.DataFrame({"row": np.arange(n_rows), "v": np.arange(n_rows) * 0.5}))
    t = nbeda.engine.open_source(sdf).table
    a = aggregates.sample_rows(t, n_rows, n, seed=7)
    b = aggregates.sample_rows(t, n_rows, n, seed=7)
    c = aggregates.sample_rows(t, n_rows, n, seed=8)
    pd.testing.assert_frame_equal(a, b)
    assert set(a["row"]) != set(c["row"])
    f = n / n_rows
    sd = math.sqrt(n_rows * f * (1 - f))
    for s in (a, c):
        assert abs(len(s) - n) <= 4 * sd, len(s)
        rows = s["row"].to_numpy()
        assert rows.max() > 0.9 * n_rows and rows.min() < 0.1 * n_rows  # not a prefix
        assert np.all(np.diff(np.sort(rows)) >= 1) and len(set(rows)) == len(rows)
        assert (s["v"] == s["row"] * 0.5).all()
    assert set(a["row"]) != set(range(len(a)))


@pytest.mark.slow
def test_spark_spread_code_rebuilds_the_table_from_the_spark_frame(iris_spark):
    """The code contract on Spark: the emitted ibis + pandas code, run in a fresh namespace that
    holds only the Spark DataFrame under the frame name, equals ``.table``."""
    df, sdf, report = iris_spark
    result = report.spread()
    code = result.code("beds")
    assert "beds.createOrReplaceTempView(" in code and "ibis.pyspark.connect(session=beds.sparkSession)" in code
    ns = run_code(code, sdf, frame_name="beds")
    assert_same_table(ns["spread"], result.table, rtol=1e-9)


@pytest.mark.slow
def test_spark_unaggregatable_and_other_types_never_crash(spark):
    """Arrays, maps, structs and binary on Spark are counted only (with the note); booleans,
    dates, timestamps and decimals are aggregated. Reference: counts made in Python on the rows."""
    import datetime as dt
    from decimal import Decimal

    from pyspark.sql import types as T

    schema = T.StructType([
        T.StructField("tags", T.ArrayType(T.LongType())),
        T.StructField("readings", T.MapType(T.StringType(), T.DoubleType())),
        T.StructField("sensor", T.StructType([T.StructField("id", T.LongType())])),
        T.StructField("photo", T.BinaryType()),
        T.StructField("irrigated", T.BooleanType()),
        T.StructField("planted_on", T.DateType()),
        T.StructField("read_at", T.TimestampType()),
        T.StructField("dose", T.DecimalType(10, 3)),
    ])
    rows = [
        ([1, 2], {"ph": 6.5}, (1,), b"a", True, dt.date(2025, 3, 1), dt.datetime(2025, 3, 1, 8), Decimal("1.250")),
        (None, None, None, None, None, None, None, None),
        ([3], {"ec": 1.1, "ph": 6.0}, (2,), b"bc", False, dt.date(2025, 4, 2), dt.datetime(2025, 4, 2, 9),
         Decimal("2.500")),
        ([], {}, (3,), b"", True, dt.date(2025, 2, 9), dt.datetime(2025, 2, 9, 7), Decimal("0.125")),
    ]
    t = nbeda.engine.open_source(spark.createDataFrame(rows, schema)).table
    st = aggregates.column_stats(t, list(t.columns), exact=False)
    for c in ["tags", "readings", "sensor", "photo"]:
        assert st.loc[c, "kind"] == "unsupported" and st.loc[c, "note"].endswith("counted only"), c
        assert (st.loc[c, "count"], st.loc[c, "missing"]) == (3, 1), c
    assert st.loc["irrigated", "kind"] == "boolean" and st.loc["irrigated", "distinct"] == 2
    assert pd.Timestamp(st.loc["planted_on", "min"]) == pd.Timestamp("2025-02-09") and st.loc["planted_on", "count"] == 3
    assert pd.Timestamp(st.loc["read_at", "max"]) == pd.Timestamp("2025-04-02 09:00")
    assert math.isclose(st.loc["dose", "mean"], (1.25 + 2.5 + 0.125) / 3, rel_tol=1e-12)
    q = aggregates.column_quantiles(t, ["dose"], (0.5,), exact=True)
    assert math.isclose(q.loc["dose", 0.5], 1.25, rel_tol=1e-12)


# ----------------------------------------------------------------- DuckDB (not slow)
def _nested_parquet(path) -> pd.DataFrame:
    """A small greenhouse-like table with list, struct, map and binary columns next to plain ones."""
    n = 60
    rng = np.random.default_rng(11)
    yield_kg = rng.gamma(3.0, 10.0, n)
    tags = [[1, 2], [3], None, [4, 5, 6]] * (n // 4)
    sensor = [{"id": 1, "model": "a"}, None, {"id": 2, "model": "b"}, {"id": 3, "model": None}] * (n // 4)
    readings = [[("ph", 6.5)], [("ph", 6.1), ("ec", 1.2)], None, []] * (n // 4)
    photo = [b"PNG", None, b"", b"raw-2"] * (n // 4)  # printable UTF-8 (see the report to the lead)
    table = pa.table({
        "bed": pa.array([f"B{i:03d}" for i in range(n)]),
        "yield_kg": pa.array(yield_kg),
        "tags": pa.array(tags, pa.list_(pa.int64())),
        "sensor": pa.array(sensor, pa.struct([("id", pa.int64()), ("model", pa.string())])),
        "readings": pa.array(readings, pa.map_(pa.string(), pa.float64())),
        "photo": pa.array(photo, pa.binary()),
    })
    pq.write_table(table, path)
    return pd.DataFrame({"yield_kg": yield_kg, "tags": tags, "sensor": sensor, "readings": readings,
                         "photo": photo})


def test_unaggregatable_columns_are_counted_only_and_every_tab_renders(tmp_path):
    """Reference: counts of missing cells made in Python on the data written; the numeric column's
    statistics equal numpy's. Arrays, structs, maps and binary get kind 'unsupported' and a note."""
    path = tmp_path / "nested.parquet"
    ref = _nested_parquet(path)
    report = nbeda.source(str(path))
    t = report.engine.t
    st = aggregates.column_stats(t, list(t.columns), exact=True)
    for c in ["tags", "sensor", "readings", "photo"]:
        assert st.loc[c, "kind"] == "unsupported", c
        assert st.loc[c, "note"] == f"type {t.schema()[c]} cannot be aggregated by the engine: counted only"
        missing = sum(v is None for v in ref[c])
        assert st.loc[c, "missing"] == missing == 15 and st.loc[c, "count"] == 60 - missing
        assert math.isnan(st.loc[c, "distinct"])
    assert st.loc["yield_kg", "kind"] == "number" and st.loc["yield_kg", "note"] == ""
    assert math.isclose(st.loc["yield_kg", "mean"], float(np.mean(ref["yield_kg"])), rel_tol=1e-12)
    assert st.loc["bed", "distinct"] == 60
    assert "counted only" in " ".join(report.engine.stats()["note"])
    for name in nbeda.SECTIONS:
        assert len(report.section(name).to_html()) > 200, name
    page = report.to_html()
    assert "yield_kg" in page and "cannot be aggregated by the engine: counted only" in page


def test_infinities_are_set_aside_by_comparison_on_duckdb(tmp_path):
    """Reference: numpy on the finite values (±inf counted apart, NaN missing), two-pass moments."""
    rng = np.random.default_rng(5)
    x = rng.normal(50.0, 4.0, 500)
    x[[3, 9]] = np.inf
    x[[4]] = -np.inf
    x[[5, 6, 7]] = np.nan
    path = tmp_path / "inf.parquet"
    pd.DataFrame({"temperature_c": x}).to_parquet(path)
    t = nbeda.engine.open_source(str(path)).table
    st = aggregates.column_stats(t, ["temperature_c"]).loc["temperature_c"]
    f = x[np.isfinite(x)]
    assert (st["n_pinf"], st["n_ninf"], st["missing"], st["count"]) == (2, 1, 3, 494)
    assert math.isclose(st["mean"], float(np.mean(f)), rel_tol=1e-12)
    assert math.isclose(st["max"], float(f.max())) and math.isclose(st["min"], float(f.min()))
    var = (st["m2"] - st["s1"] ** 2 / st["count"]) / (st["count"] - 1)
    assert math.isclose(var, float(np.var(f, ddof=1)), rel_tol=1e-10)
    q = aggregates.column_quantiles(t, ["temperature_c"], (0.1, 0.5, 0.9), exact=True)
    np.testing.assert_allclose(q.loc["temperature_c"].to_numpy(), np.quantile(f, [0.1, 0.5, 0.9]), rtol=1e-12)
