"""The engine path on Spark: nbeda's aggregate layer against hand-written Spark SQL, same session.

    python benchmarks/bench_spark.py [--rows 10000000] [--repeat 2] [--data benchmarks/data]
                                     [--driver-memory 3g]

Reads (writing it once if absent, git-ignored under ``benchmarks/data/``) the greenhouse
demo at ``--rows`` rows as one Parquet file: chunks of 1,000,000 rows, chunk k being
``nbeda.demo.greenhouse(1_000_000, seed=k)``, 12 of the 15 columns kept (``plot_id``,
``network`` and ``organic`` dropped, ``soil_grade`` stored as text) — the same file
``bench_engine.py`` writes, so either benchmark reuses the other's.

One local Spark session (``local[2]``, bound to 127.0.0.1, UI off) times, side by side:

* ``raw``    — hand-written Spark SQL computing the summary list in the fewest scans: a first
  query with, per column, count, missing (null or NaN), ±inf, approximate distinct
  (``approx_count_distinct``), min, max, sum and approximate quartiles
  (``percentile_approx``, default accuracy); a second query with the sums of powers of the
  deviations from the first-pass mean (two-pass std, skewness and kurtosis);
* ``engine`` — the same list through nbeda: the Spark DataFrame opened as ``nbeda.source``
  opens it, then ``run.stats()`` (``column_stats``) and ``run.quantiles(<numeric columns>)``
  (``column_quantiles``), approximate mode (Spark's default).

A warm-up query runs first; the two sides alternate ``--repeat`` times and the fastest time of
each is kept (the machine is shared). Prints seconds, the ratio engine / raw (target ≤ 1.2) and
checks that both sides' numbers agree (exact ones to 1e-9 relative, approximate ones equal:
both use the same sketches).
"""

from __future__ import annotations

import argparse
import math
import os
import sys
import time

HERE = os.path.dirname(os.path.abspath(__file__))
PROBS = (0.25, 0.5, 0.75)


# ----------------------------------------------------------------------------- data
# The same cached greenhouse file as bench_engine.py (same rows, same 12 columns).
sys.path.insert(0, HERE)
from bench_engine import data_path, write_data  # noqa: E402


# ---------------------------------------------------------------------------- spark
def session(driver_memory: str):
    os.environ["SPARK_LOCAL_IP"] = "127.0.0.1"
    os.environ.setdefault("PYSPARK_PYTHON", sys.executable)
    from pyspark.sql import SparkSession

    spark = (
        SparkSession.builder.master("local[2]")
        .appName("nbeda-bench-spark")
        .config("spark.driver.host", "127.0.0.1")
        .config("spark.driver.bindAddress", "127.0.0.1")
        .config("spark.ui.enabled", "false")
        .config("spark.ui.showConsoleProgress", "false")
        .config("spark.sql.shuffle.partitions", "4")
        .config("spark.driver.memory", driver_memory)
        .getOrCreate()
    )
    spark.sparkContext.setLogLevel("ERROR")
    return spark


def q(name: str) -> str:
    return "`" + name.replace("`", "``") + "`"


def raw(spark, view: str, schema) -> dict[str, dict[str, float]]:
    """The summary list by hand-written Spark SQL: two scans."""
    from pyspark.sql import types as T

    numeric = (T.ByteType, T.ShortType, T.IntegerType, T.LongType, T.FloatType, T.DoubleType, T.DecimalType)
    parts = ["COUNT(*) AS rows"]
    kinds = {}
    for i, f in enumerate(schema.fields):
        c = q(f.name)
        if isinstance(f.dataType, numeric):
            kinds[f.name] = "number"
            if isinstance(f.dataType, (T.FloatType, T.DoubleType)):
                x = (f"CASE WHEN isnan({c}) OR {c} = double('inf') OR {c} = double('-inf') "
                     f"THEN NULL ELSE CAST({c} AS DOUBLE) END")
                parts += [f"SUM(CASE WHEN {c} IS NULL OR isnan({c}) THEN 1 ELSE 0 END) AS miss_{i}",
                          f"SUM(CASE WHEN {c} = double('inf') OR {c} = double('-inf') THEN 1 ELSE 0 END) AS inf_{i}"]
            else:
                x = f"CAST({c} AS DOUBLE)"
                parts += [f"SUM(CASE WHEN {c} IS NULL THEN 1 ELSE 0 END) AS miss_{i}", f"0 AS inf_{i}"]
            parts += [f"approx_count_distinct({x}) AS dist_{i}", f"MIN({x}) AS min_{i}", f"MAX({x}) AS max_{i}",
                      f"SUM({x}) AS sum_{i}",
                      f"percentile_approx({x}, array({', '.join(map(str, PROBS))})) AS q_{i}"]
        else:
            temporal = (T.TimestampType, T.TimestampNTZType, T.DateType)
            kinds[f.name] = "datetime" if isinstance(f.dataType, temporal) else "other"
            parts += [f"SUM(CASE WHEN {c} IS NULL THEN 1 ELSE 0 END) AS miss_{i}", f"0 AS inf_{i}",
                      f"approx_count_distinct({c}) AS dist_{i}"]
            if kinds[f.name] == "datetime":
                parts += [f"MIN({c}) AS min_{i}", f"MAX({c}) AS max_{i}"]
    first = spark.sql(f"SELECT {', '.join(parts)} FROM {view}").collect()[0].asDict()
    out: dict[str, dict[str, float]] = {}
    second = []
    for i, f in enumerate(schema.fields):
        rows = first["rows"]
        rec = {"missing": first[f"miss_{i}"], "n_inf": first[f"inf_{i}"], "distinct": first[f"dist_{i}"]}
        rec["count"] = rows - rec["missing"] - rec["n_inf"]
        if kinds[f.name] == "datetime":
            rec.update(min=first[f"min_{i}"], max=first[f"max_{i}"])
        if kinds[f.name] == "number":
            rec.update(min=first[f"min_{i}"], max=first[f"max_{i}"], sum=first[f"sum_{i}"] or 0.0)
            rec["mean0"] = rec["sum"] / rec["count"] if rec["count"] else float("nan")
            rec.update({p: v for p, v in zip(PROBS, first[f"q_{i}"] or [math.nan] * len(PROBS))})
            if rec["count"]:
                c = q(f.name)
                x = (f"CASE WHEN isnan({c}) OR {c} = double('inf') OR {c} = double('-inf') THEN NULL "
                     f"ELSE CAST({c} AS DOUBLE) END") if isinstance(f.dataType, (T.FloatType, T.DoubleType)) \
                    else f"CAST({c} AS DOUBLE)"
                d = f"({x} - CAST({rec['mean0']!r} AS DOUBLE))"
                second += [f"SUM({d}) AS s1_{i}", f"SUM(POWER({d}, 2)) AS m2_{i}",
                           f"SUM(POWER({d}, 3)) AS m3_{i}", f"SUM(POWER({d}, 4)) AS m4_{i}"]
        out[f.name] = rec
    if second:
        mom = spark.sql(f"SELECT {', '.join(second)} FROM {view}").collect()[0].asDict()
        for i, f in enumerate(schema.fields):
            if f"s1_{i}" in mom:
                out[f.name].update({k: mom[f"{k}_{i}"] for k in ("s1", "m2", "m3", "m4")})
    return {c: summary(r) for c, r in out.items()}


def summary(r: dict) -> dict[str, float]:
    """mean, std, skewness (G1) and excess kurtosis (G2) from two-pass sums about mean₀."""
    out = dict(r)
    n = r["count"]
    if "m2" in r and n:
        delta = r["s1"] / n
        m2 = r["m2"] - n * delta**2
        m3 = r["m3"] - 3 * delta * r["m2"] + 3 * delta**2 * r["s1"] - n * delta**3
        m4 = r["m4"] - 4 * delta * r["m3"] + 6 * delta**2 * r["m2"] - 4 * delta**3 * r["s1"] + n * delta**4
        out["mean"] = r["mean0"] + delta
        out["std"] = math.sqrt(m2 / (n - 1)) if n > 1 else math.nan
        if n > 3 and m2 > 0:
            g1 = (m3 / n) / (m2 / n) ** 1.5
            g2 = (m4 / n) / (m2 / n) ** 2 - 3
            out["skew"] = math.sqrt(n * (n - 1)) / (n - 2) * g1
            out["kurt"] = (n - 1) / ((n - 2) * (n - 3)) * ((n + 1) * g2 + 6)
    return out


def engine(sdf) -> dict[str, dict[str, float]]:
    """The same list through nbeda's aggregate layer (approximate mode, Spark's default)."""
    from nbeda.engine._run import EngineRun
    from nbeda.engine._source import open_source

    run = EngineRun(open_source(sdf))
    st = run.stats()
    numeric = run.numeric_names()
    qs = run.quantiles(numeric, PROBS)
    out = {}
    for c in run.names:
        r = {k: v for k, v in st.loc[c].items()}
        if c in numeric:
            r.update({p: float(qs.loc[c, p]) for p in PROBS})
        out[c] = summary(r)
    return out


def agree(a: dict, b: dict) -> list[str]:
    bad = []
    for c in a:
        for k in ("count", "missing", "n_inf", "distinct", "min", "max", "sum", "mean", "std", "skew", "kurt",
                  *PROBS):
            if k not in a[c] and k not in b[c]:
                continue
            x, y = (math.nan if v is None else v for v in (a[c].get(k), b[c].get(k)))
            try:
                fx, fy = float(x), float(y)
            except (TypeError, ValueError):
                if x != y:
                    bad.append(f"{c}.{k}: {x!r} != {y!r}")
                continue
            if not (fx == fy or (math.isnan(fx) and math.isnan(fy))
                    or math.isclose(fx, fy, rel_tol=1e-9, abs_tol=1e-12)):
                bad.append(f"{c}.{k}: {fx!r} != {fy!r}")
    return bad


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--rows", type=int, default=10_000_000)
    ap.add_argument("--repeat", type=int, default=2)
    ap.add_argument("--data", default=os.path.join(HERE, "data"))
    ap.add_argument("--driver-memory", default="3g")
    args = ap.parse_args(argv)

    path = write_data(args.rows, args.data)
    spark = session(args.driver_memory)
    try:
        sdf = spark.read.parquet(path)
        view = "greenhouse_raw"
        sdf.createOrReplaceTempView(view)
        start = time.perf_counter()
        spark.sql(f"SELECT COUNT(*), SUM(yield_kg) FROM {view}").collect()  # warm-up: JIT, file listing
        print(f"warm-up {time.perf_counter() - start:.1f} s")
        times: dict[str, list[float]] = {"raw": [], "engine": []}
        results = {}
        for rep in range(args.repeat):
            for side in (("raw", "engine") if rep % 2 == 0 else ("engine", "raw")):
                start = time.perf_counter()
                results[side] = raw(spark, view, sdf.schema) if side == "raw" else engine(sdf)
                times[side].append(time.perf_counter() - start)
                print(f"  {side:6s} run {rep + 1}: {times[side][-1]:7.1f} s", flush=True)
        bad = agree(results["raw"], results["engine"])
        t_raw, t_eng = min(times["raw"]), min(times["engine"])
        print(f"\nSpark local[2], {args.rows:,} rows × {len(sdf.columns)} columns ({os.path.getsize(path) / 2**20:.0f} MiB Parquet)")
        print(f"raw Spark SQL : {t_raw:8.1f} s")
        print(f"nbeda engine  : {t_eng:8.1f} s")
        print(f"ratio engine / raw: {t_eng / t_raw:.2f} (target ≤ 1.2)")
        print("numbers agree" if not bad else "DISAGREE:\n  " + "\n  ".join(bad[:20]))
        return 0 if not bad else 1
    finally:
        spark.stop()


if __name__ == "__main__":
    sys.exit(main())
