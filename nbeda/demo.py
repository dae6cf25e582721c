"""Invented demo data: a network of community greenhouses.

The data are simulated (nothing here describes real places or people).  The
planted properties below are what the tabs are expected to find; tests rely on
them.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["greenhouse", "write_parquet", "SITES", "CROPS"]

SITES = ("Northgate", "Riverside", "Hilltop", "Eastfield", "Old Mill")
#: Uneven site sizes (shares of rows).
SITE_SHARES = (0.36, 0.26, 0.18, 0.12, 0.08)
#: Each site's typical temperature: warmer sites are also wetter (see ``leaf_wetness_h``).
SITE_TEMPERATURE = (18.0, 21.0, 24.0, 27.0, 30.0)
CROPS = ("tomato", "lettuce", "pepper", "basil", "cucumber")
CROP_FACTOR = (1.35, 0.75, 1.05, 0.55, 1.20)
SOIL_GRADES = ("A", "B", "C", "D")
SOIL_FACTOR = (1.15, 1.05, 0.95, 0.80)


def greenhouse(n: int = 5000, seed: int = 0) -> pd.DataFrame:
    """One row per planted bed in a network of community greenhouses (invented data).

    Columns and planted properties:

    - ``plot_id`` — ``"GH-00001"``…: an identifier (all distinct).
    - ``site`` — nominal, five sites of uneven size (36%, 26%, 18%, 12%, 8%).
    - ``crop`` — nominal, five crops; tomato yields most per bed on average.
    - ``soil_grade`` — ordered categorical A < B < C < D (ordinal); its mix depends on
      the site (so a crop × soil-grade or site × soil-grade cross-tab is not independent).
    - ``pest_score`` — integers 1–5 (a rating-like ordinal candidate), ~3% missing at random.
    - ``irrigation_l`` — litres per week, continuous, right-skewed.
    - ``yield_kg`` — continuous, right-skewed (log-normal noise), rising with
      ``irrigation_l`` (the planted link); **8 rows were keyed in grams** (×1000,
      the planted unit-error extremes).
    - ``sensor_model`` — ``"v1"`` or ``"v2"``.
    - ``humidity_pct`` — sensor humidity; **gaps depend on ``sensor_model``**: about 30%
      missing on v1 sensors, about 2% on v2 (missing at random given the model: MAR).
    - ``soil_ph`` — around 6.5, with **the sentinel −999 in 1% of rows** (a disguised gap).
    - ``temperature_c`` and ``leaf_wetness_h`` — **Simpson's reversal**: warmer sites are
      wetter, so across the whole network wetness rises with temperature, but inside
      every site wetness falls as temperature rises.
    - ``organic`` — "yes"/"no" (boolean).
    - ``planted_on`` — planting dates in 2025 (datetime).
    - ``network`` — the same text in every row (constant).
    """
    if n < 1:
        raise ValueError("n must be at least 1")
    rng = np.random.default_rng(seed)
    site_idx = rng.choice(len(SITES), size=n, p=SITE_SHARES)
    crop_idx = rng.integers(0, len(CROPS), size=n)
    # Soil mix depends on the site: later sites have poorer soil.
    soil_p = np.array(
        [
            [0.40, 0.35, 0.20, 0.05],
            [0.30, 0.35, 0.25, 0.10],
            [0.20, 0.30, 0.30, 0.20],
            [0.10, 0.25, 0.35, 0.30],
            [0.05, 0.20, 0.35, 0.40],
        ]
    )
    u = rng.random(n)
    soil_idx = (u[:, None] > np.cumsum(soil_p[site_idx], axis=1)).sum(axis=1).clip(0, 3)

    irrigation = rng.gamma(shape=4.0, scale=30.0, size=n)  # litres per week, right-skewed
    log_yield = (
        0.9
        + 0.55 * np.log(irrigation)
        + np.log(np.asarray(CROP_FACTOR)[crop_idx])
        + np.log(np.asarray(SOIL_FACTOR)[soil_idx])
        + rng.normal(0.0, 0.35, size=n)
    )
    yield_kg = np.round(np.exp(log_yield), 2)
    grams = rng.choice(n, size=min(8, n), replace=False)
    yield_kg[grams] = yield_kg[grams] * 1000.0  # keyed in grams by mistake

    pest = np.clip(np.round(rng.normal(2.6, 1.0, size=n)), 1, 5)
    pest_missing = rng.random(n) < 0.03

    sensor_v1 = rng.random(n) < 0.45
    humidity = np.round(rng.normal(68.0, 8.0, size=n), 1)
    hum_missing = np.where(sensor_v1, rng.random(n) < 0.30, rng.random(n) < 0.02)

    soil_ph = np.round(rng.normal(6.5, 0.35, size=n), 2)
    sentinel = rng.random(n) < 0.01
    soil_ph[sentinel] = -999.0

    base_t = np.asarray(SITE_TEMPERATURE)[site_idx]
    temperature = np.round(base_t + rng.normal(0.0, 2.0, size=n), 1)
    # Within a site: wetter when cooler (slope -0.6 h per °C); across sites: wetter when warmer.
    wetness = np.round(
        2.0 + 0.5 * base_t - 0.6 * (temperature - base_t) + rng.normal(0.0, 0.8, size=n), 2
    )

    days = rng.integers(0, 365, size=n)
    planted = pd.Timestamp("2025-01-01") + pd.to_timedelta(days, unit="D")

    frame = pd.DataFrame(
        {
            "plot_id": [f"GH-{i:05d}" for i in range(1, n + 1)],
            "site": pd.array(np.asarray(SITES, dtype=object)[site_idx], dtype="str"),
            "crop": pd.array(np.asarray(CROPS, dtype=object)[crop_idx], dtype="str"),
            "soil_grade": pd.Categorical.from_codes(soil_idx, categories=SOIL_GRADES, ordered=True),
            "pest_score": pd.array(np.where(pest_missing, np.nan, pest), dtype="Float64").astype("Int64"),
            "irrigation_l": np.round(irrigation, 1),
            "yield_kg": yield_kg,
            "sensor_model": pd.array(np.where(sensor_v1, "v1", "v2"), dtype="str"),
            "humidity_pct": np.where(hum_missing, np.nan, humidity),
            "soil_ph": soil_ph,
            "temperature_c": temperature,
            "leaf_wetness_h": wetness,
            "organic": pd.array(np.where(rng.random(n) < 0.3, "yes", "no"), dtype="str"),
            "planted_on": planted,
            "network": pd.array(["community greenhouses"] * n, dtype="str"),
        }
    )
    return frame


def write_parquet(
    path: str, n: int = 10_000_000, seed: int = 0, chunk: int = 1_000_000, drop: tuple[str, ...] = ()
) -> str:
    """Write the greenhouse demo at ``n`` rows to one Parquet file, in chunks (bounded memory).

    Chunk k is ``greenhouse(chunk, seed=seed + k)`` with ``plot_id`` renumbered so ids stay
    distinct across chunks and ``soil_grade`` stored as text (Parquet keeps no pandas order).
    Columns named in ``drop`` are left out. Needs pyarrow (extra ``parquet`` or ``duckdb``).
    Returns ``path``; an existing file is kept.
    """
    import os

    import pyarrow as pa
    import pyarrow.parquet as pq

    if os.path.exists(path):
        return path
    tmp = f"{path}.partial{os.getpid()}"
    writer = None
    try:
        done, k = 0, 0
        while done < n:
            size = min(chunk, n - done)
            part = greenhouse(size, seed=seed + k)
            part["plot_id"] = pd.Series(range(done + 1, done + size + 1)).map("GH-{:08d}".format).to_numpy()
            part["soil_grade"] = part["soil_grade"].astype("str")
            part = part.drop(columns=list(drop))
            table = pa.Table.from_pandas(part, preserve_index=False)
            if writer is None:
                writer = pq.ParquetWriter(tmp, table.schema)
            writer.write_table(table)
            done += size
            k += 1
    finally:
        if writer is not None:
            writer.close()
    os.replace(tmp, path)
    return path
