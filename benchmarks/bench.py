"""Speed and memory of every section, as ratios against pandas run side by side.

    python benchmarks/bench.py [--rows 1000000] [--sections spread,links] [--no-memory]

Builds a bench frame (default 1,000,000 rows × 28 columns: 16 float columns with 5%
missing, 4 int, 3 categorical, 3 string incl. one with 1,000 levels, 1 datetime, 1 bool),
times the pandas primitives `describe(include="all")`, `isna().sum()` and `corr()` in the
same process, then each section, and prints each section's time as a ratio against them,
plus peak traced memory (tracemalloc) next to the frame's own size.
"""

from __future__ import annotations

import argparse
import gc
import time
import tracemalloc

import numpy as np
import pandas as pd

import nbeda  # noqa: F401
from nbeda.report import Report
from nbeda.sections import SECTIONS


def bench_frame(rows: int, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    cols: dict[str, object] = {}
    for i in range(16):
        x = rng.normal(10 * i, 1 + i, rows)
        if i % 4 == 1:
            x = np.exp(x / (10 * i + 1))  # some skewed columns
        x[rng.random(rows) < 0.05] = np.nan
        cols[f"f{i:02d}"] = x
    for i in range(4):
        cols[f"i{i}"] = rng.integers(0, [6, 50, 1000, 10**6][i], rows)
    for i, k in enumerate((3, 8, 25)):
        cols[f"cat{i}"] = pd.Categorical.from_codes(rng.integers(0, k, rows), [f"L{j}" for j in range(k)])
    cols["s_small"] = pd.array(rng.choice(["north", "south", "east", "west"], rows), dtype="str")
    cols["s_1000"] = pd.array(np.char.add("lvl", rng.integers(0, 1000, rows).astype(str)), dtype="str")
    cols["s_mid"] = pd.array(np.char.add("bed-", rng.integers(0, 60, rows).astype(str)), dtype="str")
    cols["when"] = pd.Timestamp("2024-01-01") + pd.to_timedelta(rng.integers(0, 365 * 24, rows), unit="h")
    cols["flag"] = rng.random(rows) < 0.3
    return pd.DataFrame(cols)


def timed(fn) -> float:
    gc.collect()
    t = time.perf_counter()
    fn()
    return time.perf_counter() - t


def peak_mib(fn) -> float:
    gc.collect()
    tracemalloc.start()
    try:
        fn()
        return tracemalloc.get_traced_memory()[1] / 2**20
    finally:
        tracemalloc.stop()


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--sections", default=",".join(SECTIONS))
    ap.add_argument("--no-memory", action="store_true", help="skip the (slower) traced-memory pass")
    args = ap.parse_args()
    df = bench_frame(args.rows)
    frame_mib = df.memory_usage(deep=True).sum() / 2**20
    print(f"bench frame: {df.shape[0]:,} rows × {df.shape[1]} columns, {frame_mib:,.0f} MiB")
    base = {
        "describe(include='all')": timed(lambda: df.describe(include="all")),
        "isna().sum()": timed(lambda: df.isna().sum()),
        "corr() (numeric)": timed(lambda: df.select_dtypes("number").corr()),
    }
    for k, v in base.items():
        print(f"  pandas {k:<26} {v:8.2f} s")
    ref = base["describe(include='all')"]
    print(f"\n{'section':<10} {'seconds':>8} {'× describe':>11} {'× isna.sum':>11} {'× corr':>8}"
          + ("" if args.no_memory else f" {'peak MiB':>9} {'× frame':>8}"))
    for name in args.sections.split(","):
        report = Report(df)  # fresh: nothing cached between sections (roles recomputed each time)
        try:
            t = timed(lambda: report.section(name))
        except NotImplementedError:
            print(f"{name:<10} not implemented")
            continue
        line = (f"{name:<10} {t:8.2f} {t / ref:11.2f} {t / base['isna().sum()']:11.1f}"
                f" {t / base['corr() (numeric)']:8.1f}")
        if not args.no_memory:
            m = peak_mib(lambda: Report(df).section(name))
            line += f" {m:9.0f} {m / frame_mib:8.2f}"
        print(line, flush=True)


if __name__ == "__main__":
    main()
