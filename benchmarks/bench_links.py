"""Links speed: pairwise-complete Spearman + Pearson against pandas, same frame, same run.

20 numeric columns × 1,000,000 rows, 5% missing at random in each column (seeded), a few
columns with ties.  Prints our time for Spearman **and** Pearson together, pandas'
``DataFrame.corr(method="spearman")`` and ``corr(method="pearson")``, the ratios, and the
largest absolute difference from pandas.  Run:  python benchmarks/bench_links.py [rows] [cols]
"""

from __future__ import annotations

import os
import sys
import time

import numpy as np
import pandas as pd

from nbeda.stats.links import fast_pearson, fast_spearman


def frame(n: int, k: int, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, k))
    x[:, 1] = x[:, 0] + rng.normal(size=n)  # a real link
    x[:, 2] = np.round(x[:, 2], 1)  # many ties
    x[:, 3] = rng.integers(0, 5, size=n)  # heavy ties
    x[:, 4] = np.exp(x[:, 0])  # a monotone, non-linear link
    x[rng.random((n, k)) < 0.05] = np.nan
    return pd.DataFrame(x, columns=[f"c{i}" for i in range(k)])


def main() -> None:
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 1_000_000
    k = int(sys.argv[2]) if len(sys.argv) > 2 else 20
    df = frame(n, k)
    x = df.to_numpy()

    load = os.getloadavg()[0]
    t0, c0 = time.perf_counter(), time.process_time()
    ours_s = fast_spearman(x)
    ours_p, _ = fast_pearson(x)
    ours, ours_cpu = time.perf_counter() - t0, time.process_time() - c0

    t0, c0 = time.perf_counter(), time.process_time()
    pd_s = df.corr(method="spearman").to_numpy()
    t_pd_s, c_pd_s = time.perf_counter() - t0, time.process_time() - c0
    t0 = time.perf_counter()
    pd_p = df.corr(method="pearson").to_numpy()
    t_pd_p = time.perf_counter() - t0

    off = ~np.eye(k, dtype=bool)
    d_s = float(np.nanmax(np.abs(ours_s[off] - pd_s[off])))
    d_p = float(np.nanmax(np.abs(ours_p[off] - pd_p[off])))
    print(f"frame: {n:,} rows x {k} numeric columns, 5% missing per column")
    print(f"ours (Spearman + Pearson, pairwise-complete): {ours:8.2f} s")
    print(f"pandas corr(method='spearman'):               {t_pd_s:8.2f} s   ratio {t_pd_s / ours:6.1f}x")
    print(f"pandas corr(method='pearson'):                {t_pd_p:8.2f} s   ratio {t_pd_p / ours:6.2f}x")
    print(f"CPU seconds (all threads): ours {ours_cpu:.2f}, pandas spearman {c_pd_s:.2f} "
          f"(ratio {c_pd_s / ours_cpu:.1f}x); 1-minute load average at start {load:.1f} "
          f"on {os.cpu_count()} CPUs")
    print(f"max |Δ| Spearman vs pandas: {d_s:.2e}   Pearson vs pandas: {d_p:.2e}")


if __name__ == "__main__":
    main()
