"""Extremes: which values are far from the bulk, by which rule, by how much.

Every rule lives in self-contained plain numpy/pandas/scipy functions whose source
is embedded in the emitted code, so the code rebuilds the table exactly.

Rules (``rule=`` on request, for every numeric column, or a ``{column: rule}`` mapping):

- ``tukey``       Tukey (1977) fences Q1 − 1.5·IQR, Q3 + 1.5·IQR;
- ``tukey_far``   the far fences, k = 3;
- ``tukey_log``   Tukey fences (k = 1.5) on log(x), back-transformed (positive columns only);
- ``modified_z``  Iglewicz & Hoaglin (1993): 0.6745·(x − median)/MAD, flagged above 3.5;
- ``esd``         generalized ESD many-outlier procedure (Rosner 1983), at most
                  ``max_outliers`` outliers, level ``alpha``;
- ``zscore``      |x − mean|/SD above 3 (common practice; the extremes inflate the SD).

Quartiles use linear interpolation between order statistics (the pandas/numpy
default, Hyndman & Fan type 7).  All rules use the finite values only; ±inf is
always flagged and counted apart (``n_inf``); missing values are never flagged.

Policy when no rule is requested (the thresholds are our own choice, stated in
each column's ``reason``):

1. fewer than 5 finite values → ``none`` (too few to call a value extreme);
2. IQR = 0 or MAD = 0 → ``none`` ("no spread": fences undefined, nothing flagged);
3. ordinal columns → ``tukey_far`` (the ends of a short ordered scale are not extremes);
4. all values positive, octile skewness ≥ 0.15, 7th/1st octile ratio ≥ 2 (strongly
   right-skewed, spanning a multiplicative range) and the log at least halves the
   octile skewness → ``tukey_log``;
5. continuous, n ≥ 25 (Rosner's λ approximation is accurate from n ≈ 25, per the
   NIST/SEMATECH e-Handbook §1.3.5.17.3), |octile skewness| ≤ 0.1 and Moors' octile
   kurtosis within 1.1–1.4 (normal: 1.233) → ``esd``; if ESD reaches its maximum
   number of outliers (more may exist, masking), → ``modified_z`` instead;
6. otherwise → ``tukey``.

Octile skewness is (E7 + E1 − 2·E4)/(E7 − E1) and Moors' kurtosis
((E7 − E5) + (E3 − E1))/(E6 − E2) (Moors 1988), Ei the i-th octile: both ignore the
outer 12.5% of each tail, so a few extremes cannot steer the choice of rule.

Notes per column also point at a possible unit error (a separate cluster of values
near 10×, 100× or 1000× the median, or near 1/10…1/1000 of it) and at repeated
extreme values that look like codes for "missing" (−999, 9999, …).

Multivariate: robust squared Mahalanobis distances from an orthogonalized
Gnanadesikan–Kettenring (OGK) estimate of location and scatter (Maronna & Zamar
2002; MAD scales, two iterations, one reweighting step at the χ²(p) 0.9 quantile
with the usual consistency factor), fitted on the complete rows of the numeric
columns (columns with the log rule enter as log(x); a seeded sample when there are
more complete rows than the fit size), rows flagged beyond the χ²(p) 0.975 quantile.
Each flagged row names the columns that contribute most, as shares of its squared
distance: the Shapley values e_j·(S⁻¹e)_j, which sum to the squared distance
(Mayrhofer & Filzmoser 2023, "Multivariate outlier explanations using Shapley values
and Mahalanobis distances", Econometrics and Statistics — reference from memory; the
identity Σ_j e_j·(S⁻¹e)_j = eᵀS⁻¹e is checked in the tests).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from nbeda._context import Context
from nbeda.stats._codegen import float_frame_code, function_source, header, join_blocks, labels_list, lit

__all__ = [
    "RULES",
    "EXTREMES_COLUMNS",
    "FIT_ROWS",
    "MAX_JOINT_COLUMNS",
    "sorted_quantile",
    "column_median",
    "esd_steps",
    "cluster_notes",
    "extreme_scan",
    "extremes_table",
    "robust_distances",
    "joint_scan",
    "joint_table",
    "compute_extremes",
    "extremes_code",
    "action_code",
]

RULES = ("tukey", "tukey_far", "tukey_log", "modified_z", "esd", "zscore")
EXTREMES_COLUMNS = [
    "rule", "reason", "basis", "n", "lower", "upper", "n_low", "n_high", "n_inf",
    "share", "most_extreme", "most_extreme_score", "note",
]
#: Complete rows above this count: the robust distance is fitted on a seeded sample of this size.
FIT_ROWS = 5000
#: At most this many numeric columns enter the joint (multivariate) distance.
MAX_JOINT_COLUMNS = 30


# --------------------------------------------------------------------------------------
# Embedded functions (plain numpy/pandas/scipy; their source goes into the emitted code)
# --------------------------------------------------------------------------------------
def sorted_quantile(s, n, q):
    """Quantile q of each column of s (sorted ascending, NaN last; n finite values per column).

    Linear interpolation between order statistics, computed exactly as numpy/pandas'
    default method ("linear", Hyndman & Fan type 7).
    """
    cols = np.arange(s.shape[1])
    h = n * q + (1.0 - q) - 1.0
    last = np.maximum(n - 1, 0)
    lo = np.clip(np.floor(h), 0, last).astype(np.int64)
    hi = np.minimum(lo + 1, last)
    t = np.where(h >= last, 0.0, h - np.floor(h))
    a, b = s[lo, cols], s[hi, cols]
    with np.errstate(invalid="ignore", over="ignore"):
        d = b - a
        out = np.where(t >= 0.5, b - d * (1 - t), a + d * t)
    return np.where(n > 0, out, np.nan)


def column_median(d, n):
    """Median of each column of d (n finite values per column, NaN elsewhere), by partitioning
    the columns that share the same n together (no full sort)."""
    out = np.full(d.shape[1], np.nan)
    for m in np.unique(n[n > 0]).tolist():
        cols = np.flatnonzero(n == m)
        lo, hi = (m - 1) // 2, m // 2
        part = np.partition(d[:, cols], [lo, hi], axis=0)  # NaN sorts last
        out[cols] = (part[lo] + part[hi]) / 2.0
    return out


def esd_steps(s, z, n, r, alpha):
    """Generalized ESD (Rosner 1983) on each column, vectorised over columns.

    s: each column's values sorted ascending (NaN last); z: the same columns in row order (to find
    the rows of the candidates); n: finite values per column; r[j]: the maximum number of outliers tested in column j (≤ n[j] − 3).
    At every step the value furthest from the mean of the values left is the smallest or the
    largest of them, so only the r + 1 lowest and r + 1 highest values can ever be removed: the
    middle is summarised once (count, mean, sum of squared deviations) and merged with the
    candidates still in at each step by the exact pairwise update of Chan, Golub & LeVeque (1979).
    Returns the per-step statistics R (steps × columns), critical values lam, removed row
    positions, signed scores (x − mean)/SD, the number of outliers found per column, and the
    mean/SD/λ of the data left after removing them.
    """
    n_rows, p = s.shape
    cols = np.arange(p)
    steps = int(r.max(initial=0)) + 1
    rank = np.arange(steps)[:, None]
    k_low = np.broadcast_to(rank, (steps, p))
    k_high = n[None, :] - steps + rank
    ok = np.vstack([k_low < n[None, :], k_high >= steps])  # high candidates not already low ones
    k = np.clip(np.vstack([k_low, k_high]), 0, max(n_rows - 1, 0))
    cand = s[k, cols] if n_rows else np.zeros(k.shape)
    cand_row = np.zeros(k.shape, dtype=np.int64)
    for j in range(p):  # rows of the candidates: a stable sort of the tail rows only
        if n[j] == 0:
            continue
        low_v, high_v = s[min(steps, n[j]) - 1, j], s[max(n[j] - steps, 0), j]
        idx = np.flatnonzero((z[:, j] <= low_v) | (z[:, j] >= high_v))
        idx = idx[np.argsort(z[idx, j], kind="stable")]
        c_low = int(np.sum(z[idx, j] <= low_v))
        pos = np.where(k[:, j] < c_low, k[:, j], idx.size - (n[j] - k[:, j]))
        cand_row[:, j] = idx[np.clip(pos, 0, idx.size - 1)]
    idx = np.arange(n_rows)[:, None]
    core = (idx >= steps) & (idx < n[None, :] - steps)
    n_core = core.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_core = np.where(n_core > 0, np.where(core, s, 0.0).sum(axis=0) / n_core, 0.0)
        m2_core = (np.where(core, s - mean_core, 0.0) ** 2).sum(axis=0)
    active = ok.copy()
    R = np.full((steps, p), np.nan)
    lam = np.full((steps, p), np.nan)
    mean = np.full((steps, p), np.nan)
    sd = np.full((steps, p), np.nan)
    removed = np.zeros((steps, p), dtype=np.int64)
    signed = np.full((steps, p), np.nan)
    for i in range(steps):
        m = n - i  # values left at this step
        valid = (i <= r) & (m >= 3)
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            nb = active.sum(axis=0)
            mean_b = np.where(active, cand, 0.0).sum(axis=0) / nb
            m2_b = (np.where(active, cand - mean_b, 0.0) ** 2).sum(axis=0)
            total = n_core + nb
            delta = mean_b - mean_core
            mu = mean_core + delta * nb / total
            v = np.sqrt((m2_core + m2_b + delta**2 * n_core * nb / total) / (m - 1))
            dev = cand - mu
            absdev = np.where(active, np.abs(dev), -1.0)
            j = absdev.argmax(axis=0)
            ok_i = valid & (v > 0)
            R[i] = np.where(ok_i, absdev[j, cols] / v, np.nan)
            signed[i] = np.where(ok_i, dev[j, cols] / v, np.nan)
            df = np.where(valid, m - 2, 1).astype("float64")
            t = stats.t.ppf(1.0 - alpha / (2.0 * np.where(valid, m, 2)), df)
            lam[i] = np.where(valid, (m - 1) * t / np.sqrt((m - 2 + t**2) * m), np.nan)
        mean[i] = np.where(valid, mu, np.nan)
        sd[i] = np.where(valid, v, np.nan)
        removed[i] = cand_row[j, cols]
        active[j[valid], cols[valid]] = False
    step_no = np.arange(1, steps + 1)[:, None]
    beyond = (R > lam) & (step_no <= r[None, :])
    found = np.where(beyond.any(axis=0), steps - np.argmax(beyond[::-1], axis=0), 0)
    rest = np.minimum(found, steps - 1)
    return {
        "r": r, "R": R, "lam": lam, "removed": removed, "signed": signed, "found": found,
        "mean": mean[rest, cols], "sd": sd[rest, cols], "lam_rest": lam[rest, cols],
    }


def cluster_notes(v, lower, upper, median, flagged):
    """Notes on one column's flagged values: a separate cluster near 10^k× (or 1/10^k of) the
    median, i.e. a possible unit error, and repeated extreme values that look like missing codes.

    v: the column's finite values sorted ascending (data units); flagged: its flagged values.
    """
    notes = []
    if median > 0 and np.isfinite(upper):
        first = int(np.searchsorted(v, upper, side="right"))
        if 0 < first < v.size:
            seg = v[first - 1:]
            with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
                jump = (seg[:-1] > 0) & (seg[1:] / seg[:-1] >= 3.0)
            at = np.flatnonzero(jump)
            if at.size:
                cluster = seg[at[0] + 1:]
                with np.errstate(over="ignore"):
                    ratio = float(np.median(cluster)) / median
                k = int(np.round(np.log10(ratio))) if np.isfinite(ratio) else 0
                if cluster.size >= 2 and 1 <= k <= 3 and abs(np.log10(ratio) - k) <= 0.4:
                    notes.append(
                        f"possible unit error: {cluster.size} high values ({cluster[0]:.4g} to "
                        f"{cluster[-1]:.4g}) sit apart from the rest, near {10**k:,}× the median "
                        f"({median:.4g}) — e.g. grams keyed as kilograms"
                    )
    if median > 0 and np.isfinite(lower):
        last = int(np.searchsorted(v, lower, side="left"))
        if 0 < last < v.size and v[0] > 0:
            seg = v[: last + 1]
            with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
                jump = seg[1:] / seg[:-1] >= 3.0
            at = np.flatnonzero(jump)
            if at.size:
                cluster = seg[: at[-1] + 1]
                with np.errstate(over="ignore"):
                    ratio = median / float(np.median(cluster))
                k = int(np.round(np.log10(ratio))) if np.isfinite(ratio) else 0
                if cluster.size >= 2 and 1 <= k <= 3 and abs(np.log10(ratio) - k) <= 0.4:
                    notes.append(
                        f"possible unit error: {cluster.size} low values ({cluster[0]:.4g} to "
                        f"{cluster[-1]:.4g}) sit apart from the rest, near 1/{10**k:,} of the "
                        f"median ({median:.4g}) — e.g. kilograms keyed where grams were meant"
                    )
    if flagged.size >= 2:
        vals, counts = np.unique(flagged, return_counts=True)
        nines = np.isin(np.abs(vals), [9.0, 99.0, 999.0, 9999.0, 99999.0, 999999.0])
        code_like = (nines & (counts >= 2)) | (counts >= max(3, 0.005 * v.size))
        for value, count in zip(vals[code_like], counts[code_like]):
            notes.append(
                f"the value {value:g} is repeated {count} times among the flagged values: it may "
                "be a code for 'missing' rather than a measurement"
            )
    return notes


def extreme_scan(values, roles, requested, big_ints, alpha=0.05, max_outliers=10):
    """Fences, flags and notes for each column of `values` (rows × columns, float64).

    roles: each column's role; requested: a rule name per column or None (the policy chooses);
    big_ints: True where an integer column holds values beyond ±2**53 (inexact as float64).
    """
    x = np.asarray(values, dtype="float64").reshape(len(values), len(roles))
    n_rows, p = x.shape
    cols = np.arange(p)
    fin = np.isfinite(x)
    n = fin.sum(axis=0)
    n_inf = np.isinf(x).sum(axis=0)
    # Scale every column by a power of two (exact in floating point) so squares never overflow.
    absmax = np.abs(np.where(fin, x, 0.0)).max(axis=0, initial=0.0)
    scale = np.ldexp(1.0, np.frexp(absmax)[1] - 1)
    z = x / scale
    z[~fin] = np.nan
    s = np.sort(z, axis=0) if n_rows else np.full((1, p), np.nan)  # sorted once, reused below
    q1, med, q3 = (sorted_quantile(s, n, q) for q in (0.25, 0.5, 0.75))
    iqr = q3 - q1
    octile = [sorted_quantile(s, n, k / 8) for k in range(1, 8)]
    dev = z - med
    np.abs(dev, out=dev)
    mad = column_median(dev, n)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        np.copyto(dev, z)
        dev[~fin] = 0.0
        mean = dev.sum(axis=0) / n
        dev -= mean
        dev[~fin] = 0.0
        sd = np.sqrt(np.einsum("ij,ij->j", dev, dev) / (n - 1))
        del dev
        skew8 = (octile[6] + octile[0] - 2 * octile[3]) / (octile[6] - octile[0])
        moors = ((octile[6] - octile[4]) + (octile[2] - octile[0])) / (octile[5] - octile[1])
        spread8 = octile[6] / octile[0]
    lo_val, hi_val = s[0], s[np.maximum(n - 1, 0), cols]
    positive = (n > 0) & (lo_val > 0)
    pos_cols = np.flatnonzero(positive)
    ls = np.log(s[:, pos_cols]) + np.log(scale[pos_cols])  # log of the data (data units), positive columns
    lq1, lq3, lo8, mid8, hi8 = (np.full(p, np.nan) for _ in range(5))
    for arr, q in ((lq1, 0.25), (lq3, 0.75), (lo8, 0.125), (mid8, 0.5), (hi8, 0.875)):
        arr[pos_cols] = sorted_quantile(ls, n[pos_cols], q)
    del ls
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        skew8_log = (hi8 + lo8 - 2 * mid8) / (hi8 - lo8)

    # ---- the rule of each column
    rule, reason = [], []
    for j in range(p):
        want = requested[j]
        if want is not None:
            if want == "tukey_log" and not positive[j]:
                rule.append("tukey")
                reason.append("requested tukey_log, but the log scale needs positive values: Tukey fences (k = 1.5)")
            else:
                rule.append(want)
                reason.append("requested")
        elif n[j] < 5:
            rule.append("none")
            reason.append(f"only {n[j]} finite value(s): too few to call any value extreme")
        elif iqr[j] == 0 or mad[j] == 0:
            rule.append("none")
            reason.append(
                "no spread: " + ("IQR = 0" if iqr[j] == 0 else "MAD = 0")
                + " (at least half the values are equal), so fences are undefined; nothing flagged"
            )
        elif roles[j] == "ordinal":
            rule.append("tukey_far")
            reason.append("ordinal scale: the ends of a short ordered scale are not extremes, so the far fences (k = 3)")
        elif positive[j] and skew8[j] >= 0.15 and spread8[j] >= 2 and abs(skew8_log[j]) <= skew8[j] / 2:
            rule.append("tukey_log")
            reason.append(
                f"strongly right-skewed positive values (octile skewness {skew8[j]:.2f} ≥ 0.15, "
                f"7th/1st octile ratio {spread8[j]:.2f} ≥ 2; on the log scale {skew8_log[j]:.2f}, "
                "at most half): Tukey fences on the log scale"
            )
        elif roles[j] == "continuous" and n[j] >= 25 and abs(skew8[j]) <= 0.1 and 1.1 <= moors[j] <= 1.4:
            rule.append("esd")
            reason.append(
                f"roughly normal (octile skewness {skew8[j]:.2f}, Moors kurtosis {moors[j]:.2f} "
                f"within 1.10–1.40; n ≥ 25): generalized ESD, α = {alpha:g}, at most {max_outliers} outliers"
            )
        else:
            rule.append("tukey")
            reason.append(
                f"not roughly normal (octile skewness {skew8[j]:.2f}, Moors kurtosis {moors[j]:.2f}) "
                "and not strongly right-skewed: Tukey fences (k = 1.5)"
            )
    rule = np.array(rule, dtype=object).reshape(p)

    # ---- generalized ESD where it is used
    esd_cols = np.flatnonzero(rule == "esd")
    esd = None
    esd_rows, esd_colj, esd_sc = [], [], []
    if esd_cols.size:
        r = np.clip(np.minimum(max_outliers, n[esd_cols] - 3), 0, None)
        esd = esd_steps(s[:, esd_cols], z[:, esd_cols], n[esd_cols], r, alpha)
        for k, j in enumerate(esd_cols):
            if requested[j] is None and esd["found"][k] >= max_outliers:
                rule[j] = "modified_z"
                reason[j] = (
                    f"roughly normal, but generalized ESD reached its maximum of {max_outliers} "
                    "outliers (more may exist and mask each other): robust modified z-score instead"
                )
                continue
            f = int(esd["found"][k])
            esd_rows.append(esd["removed"][:f, k])
            esd_colj.append(np.full(f, j))
            esd_sc.append(esd["signed"][:f, k])
    esd_rows = np.concatenate(esd_rows).astype(np.int64) if esd_rows else np.zeros(0, dtype=np.int64)
    esd_colj = np.concatenate(esd_colj).astype(np.int64) if esd_colj else np.zeros(0, dtype=np.int64)
    esd_sc = np.concatenate(esd_sc) if esd_sc else np.zeros(0)

    # ---- fences (data units), score anchors and units per column
    kk = np.where(rule == "tukey_far", 3.0, 1.5)
    is_tukey = np.isin(rule, ["tukey", "tukey_far"])
    is_log = rule == "tukey_log"
    is_modz = rule == "modified_z"
    is_z = rule == "zscore"
    is_esd = rule == "esd"
    spread = np.select([is_tukey, is_log, is_modz, is_z | is_esd], [iqr, lq3 - lq1, mad, sd], np.nan)
    usable = (n >= 5) & (spread > 0) & (rule != "none")
    with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
        lower = np.select(
            [is_tukey, is_log, is_modz, is_z],
            [(q1 - kk * iqr) * scale, np.exp(lq1 - 1.5 * (lq3 - lq1)), (med - 3.5 * mad / 0.6745) * scale,
             (mean - 3.0 * sd) * scale],
            np.nan,
        )
        upper = np.select(
            [is_tukey, is_log, is_modz, is_z],
            [(q3 + kk * iqr) * scale, np.exp(lq3 + 1.5 * (lq3 - lq1)), (med + 3.5 * mad / 0.6745) * scale,
             (mean + 3.0 * sd) * scale],
            np.nan,
        )
        if esd is not None:
            band_lo = (esd["mean"] - esd["lam_rest"] * esd["sd"]) * scale[esd_cols]
            band_hi = (esd["mean"] + esd["lam_rest"] * esd["sd"]) * scale[esd_cols]
            keep = is_esd[esd_cols]
            lower[esd_cols[keep]] = band_lo[keep]
            upper[esd_cols[keep]] = band_hi[keep]
        lower = np.where(usable, lower, np.nan)
        upper = np.where(usable, upper, np.nan)
        # scores: (value − anchor)/unit on the rule's scale; Tukey anchors at the quartiles
        anchor_lo = np.select([is_tukey, is_log, is_modz], [q1, lq1, med], mean)
        anchor_hi = np.select([is_tukey, is_log, is_modz], [q3, lq3, med], mean)
        unit = np.select([is_modz], [mad / 0.6745], spread)

        flag_low = fin & (x < lower)
        flag_high = fin & (x > upper)
        esd_use = usable & is_esd
        flag_low[:, esd_use] = False
        flag_high[:, esd_use] = False
        mine = esd_use[esd_colj]
        esd_rows, esd_colj, esd_sc = esd_rows[mine], esd_colj[mine], esd_sc[mine]
        flag_low[esd_rows[esd_sc < 0], esd_colj[esd_sc < 0]] = True
        flag_high[esd_rows[esd_sc > 0], esd_colj[esd_sc > 0]] = True
        esd_key = esd_rows * max(p, 1) + esd_colj
        esd_sort = np.argsort(esd_key)
        esd_key, esd_sc = esd_key[esd_sort], esd_sc[esd_sort]

        def score_of(zv, j_idx, high):
            base = np.where(is_log[j_idx], np.log(np.where(is_log[j_idx], zv, 1.0)) + np.log(scale[j_idx]), zv)
            anchor = np.where(high, anchor_hi[j_idx], anchor_lo[j_idx])
            return (base - anchor) / unit[j_idx]

        s_lo, s_hi = score_of(lo_val, cols, False), score_of(hi_val, cols, True)
        top_hi = np.abs(s_hi) >= np.abs(s_lo)
        most = np.where(top_hi, hi_val, lo_val) * scale
        most_score = np.where(top_hi, s_hi, s_lo)
        if esd is not None:
            first = esd["removed"][0]
            most[esd_cols] = np.where(is_esd[esd_cols], x[first, esd_cols] if n_rows else np.nan, most[esd_cols])
            most_score[esd_cols] = np.where(is_esd[esd_cols], esd["signed"][0], most_score[esd_cols])
        ok_most = usable & np.isfinite(most_score)
        most = np.where(ok_most, most, np.nan)
        most_score = np.where(ok_most, most_score, np.nan)
        n_low, n_high = flag_low.sum(axis=0), flag_high.sum(axis=0)
        share = np.where(n + n_inf > 0, (n_low + n_high + n_inf) / np.maximum(n + n_inf, 1), np.nan)

        # ---- every flagged cell: row position, column position, side, score, fence
        r_idx, c_idx = np.nonzero((flag_low | flag_high | np.isinf(x)).T)
        r_idx, c_idx = c_idx, r_idx  # ordered by column, then row
        cell_x = x[r_idx, c_idx]
        cell_inf = np.isinf(cell_x)
        cell_high = np.where(cell_inf, cell_x > 0, flag_high[r_idx, c_idx])
        cell_score = np.where(
            cell_inf, cell_x,
            np.where(
                is_esd[c_idx],
                esd_sc[np.clip(np.searchsorted(esd_key, r_idx * max(p, 1) + c_idx), 0, max(esd_sc.size - 1, 0))]
                if esd_sc.size else np.nan,
                score_of(z[r_idx, c_idx], c_idx, cell_high),
            ),
        )
        cell_fence = np.where(cell_inf, np.nan, np.where(cell_high, upper[c_idx], lower[c_idx]))

    basis_text = {
        "tukey": "Q1 − 1.5·IQR, Q3 + 1.5·IQR (Tukey 1977); quartiles by linear interpolation (pandas default)",
        "tukey_far": "Q1 − 3·IQR, Q3 + 3·IQR (Tukey 1977); quartiles by linear interpolation (pandas default)",
        "tukey_log": "exp(Q1 − 1.5·IQR), exp(Q3 + 1.5·IQR) of log(x); quartiles by linear interpolation (pandas default)",
        "modified_z": "median ± 3.5·MAD/0.6745, i.e. |0.6745·(x − median)/MAD| > 3.5 (Iglewicz & Hoaglin 1993)",
        "esd": f"generalized ESD (Rosner 1983), α = {alpha:g}, at most {max_outliers} outliers; fences: mean ± λ·SD of the rest",
        "zscore": "mean ± 3·SD, i.e. |z| > 3 (common practice)",
        "none": "",
    }
    basis = [basis_text[rj] for rj in rule]

    # ---- notes
    notes = []
    for j in range(p):
        nj = []
        if big_ints[j]:
            nj.append("integers beyond ±2**53 are not exact as float64: fences and flags are approximate")
        if n_inf[j]:
            nj.append(f"{n_inf[j]} infinite value(s): always flagged, counted in n_inf; fences use finite values only")
        if rule[j] != "none" and n[j] < 5:
            nj.append(f"only {n[j]} finite value(s): nothing flagged")
        elif rule[j] != "none" and not spread[j] > 0:
            nj.append("no spread (the rule's scale is 0): fences undefined, nothing flagged")
        if n[j] >= 1 and (iqr[j] == 0 or mad[j] == 0):
            differ = int(np.sum(fin[:, j] & (z[:, j] != med[j])))
            if differ == 0:
                nj.append("constant: every finite value is the same")
            else:
                nj.append(f"{differ} value(s) differ from the common value {med[j] * scale[j]:.6g}")
        if rule[j] == "tukey_log" and usable[j]:
            nj.append("fences computed on log(x) and back-transformed (asymmetric in x)")
        if rule[j] == "zscore" and usable[j]:
            nj.append("mean and SD are inflated by the extremes themselves (masking)")
            if n[j] <= 10:
                nj.append(f"with n = {n[j]} no |z| can exceed (n − 1)/√n = {(n[j] - 1) / np.sqrt(n[j]):.2f} < 3")
        if rule[j] == "esd" and usable[j]:
            k = int(np.flatnonzero(esd_cols == j)[0])
            nj.append(
                f"ESD: {int(esd['found'][k])} outlier(s) among the {int(esd['r'][k])} most extreme tested"
            )
            if requested[j] is not None and esd["found"][k] >= max(1, min(max_outliers, n[j] - 3)):
                nj.append("ESD reached its maximum number of outliers: more may exist (raise max_outliers)")
            if n[j] < 25:
                nj.append("n < 25: Rosner's λ approximation is less accurate (NIST/SEMATECH e-Handbook §1.3.5.17.3)")
            inside = (flag_low[:, j] | flag_high[:, j]) & (x[:, j] >= lower[j]) & (x[:, j] <= upper[j])
            if inside.any():
                nj.append(f"{int(inside.sum())} ESD outlier(s) lie inside the fences of the remaining data")
        if usable[j] and n_low[j] + n_high[j] > 0:
            v = s[: n[j], j] * scale[j]
            flagged = x[flag_low[:, j] | flag_high[:, j], j]
            nj.extend(cluster_notes(v, lower[j], upper[j], med[j] * scale[j], flagged))
        notes.append("; ".join(nj))

    return {
        "rule": list(rule), "reason": list(reason), "basis": basis, "n": n, "lower": lower, "upper": upper,
        "n_low": n_low, "n_high": n_high, "n_inf": n_inf, "share": share, "most_extreme": most,
        "most_extreme_score": most_score, "note": notes,
        "flag_low": flag_low, "flag_high": flag_high, "flag_inf": np.isinf(x),
        "cell_row": r_idx, "cell_col": c_idx, "cell_high": cell_high, "cell_score": cell_score,
        "cell_fence": cell_fence, "q1": q1 * scale, "median": med * scale, "q3": q3 * scale,
        "joint_ok": usable & (n >= 5), "log_scale": is_log & usable,
    }


def extremes_table(scan, labels):
    """The Extremes table: one row per numeric column (index ``column``)."""
    index = pd.Index(list(labels), name="column", tupleize_cols=False, dtype=object)
    columns = [
        "rule", "reason", "basis", "n", "lower", "upper", "n_low", "n_high", "n_inf",
        "share", "most_extreme", "most_extreme_score", "note",
    ]
    table = pd.DataFrame({c: list(scan[c]) for c in columns}, index=index, columns=columns)
    ints = {c: "int64" for c in ("n", "n_low", "n_high", "n_inf")}
    floats = {c: "float64" for c in ("lower", "upper", "share", "most_extreme", "most_extreme_score")}
    texts = {c: object for c in ("rule", "reason", "basis", "note")}
    return table.astype({**ints, **floats, **texts})


def robust_distances(y, fit):
    """Robust squared Mahalanobis distances of the rows of y (finite, m × p), fitted on the rows `fit`.

    Orthogonalized Gnanadesikan–Kettenring (OGK) estimate (Maronna & Zamar 2002) with MAD scales
    and two iterations, made consistent (median distance = χ²(p) median), then one reweighting
    step: mean and covariance of the rows within the χ²(p) 0.9 quantile, times the consistency
    factor 0.9 / F_{χ²(p+2)}(χ²(p) 0.9 quantile).  Every column must have MAD > 0 on the fit rows.
    Returns (d2 for every row, centre, precision, med, mad): centre and precision are in units
    standardized by the fit rows' median and MAD of each column.
    """
    p = y.shape[1]
    f = y[fit]
    med = np.median(f, axis=0)
    mad = np.median(np.abs(f - med), axis=0) * 1.482602218505602
    f = (f - med) / mad

    def rscale(a):
        c = np.median(a, axis=0)
        out = np.median(np.abs(a - c), axis=0) * 1.482602218505602
        return np.where(out > 0, out, 1e-12)

    jj, kk = np.triu_indices(p, 1)
    z = f
    for _ in range(2):
        u = z / rscale(z)
        corr = np.eye(p)
        gk = (rscale(u[:, jj] + u[:, kk]) ** 2 - rscale(u[:, jj] - u[:, kk]) ** 2) / 4.0
        corr[jj, kk] = gk
        corr[kk, jj] = gk
        z = u @ np.linalg.eigh(corr)[1]
    d2_fit = (((z - np.median(z, axis=0)) / rscale(z)) ** 2).sum(axis=1)
    if np.median(d2_fit) > 0:
        d2_fit = d2_fit * stats.chi2.ppf(0.5, p) / np.median(d2_fit)
    keep = d2_fit <= stats.chi2.ppf(0.9, p)
    if keep.sum() <= p:
        keep = np.ones(f.shape[0], dtype=bool)
    centre = f[keep].mean(axis=0)
    cov = np.cov(f[keep], rowvar=False).reshape(p, p)
    cov = cov * 0.9 / stats.chi2.cdf(stats.chi2.ppf(0.9, p), p + 2)
    vals, vecs = np.linalg.eigh(cov)
    vals = np.maximum(vals, vals.max() * 1e-12)
    precision = (vecs / vals) @ vecs.T
    e = y - med
    e /= mad
    e -= centre
    d2 = ((e @ precision) * e).sum(axis=1)
    return d2, centre, precision, med, mad


def joint_scan(values, joint_ok, log_scale, seed=0, fit_rows=5000, max_cols=30):
    """Rows far from the bulk in the joint space of the usable numeric columns (robust distance).

    Columns with the log rule enter as log(x); rows with any missing or infinite value are left
    out; above fit_rows complete rows the fit uses a seeded sample (numpy default_rng(seed)).
    """
    x = np.asarray(values, dtype="float64").reshape(len(values), len(joint_ok))
    n_rows = x.shape[0]
    cols = np.flatnonzero(np.asarray(joint_ok, dtype=bool))[:max_cols]
    out = {"columns": cols, "d2": np.full(n_rows, np.nan), "cutoff": np.nan, "flagged": np.zeros(n_rows, dtype=bool),
           "rows": np.zeros(0, dtype=np.int64), "contrib": np.zeros((0, cols.size)), "n_used": 0, "n_fit": 0, "note": ""}
    y = x[:, cols]
    logs = np.flatnonzero(np.asarray(log_scale, dtype=bool)[cols])
    with np.errstate(invalid="ignore", divide="ignore"):
        y[:, logs] = np.log(np.where(y[:, logs] > 0, y[:, logs], np.nan))
    where = np.flatnonzero(np.isfinite(y).all(axis=1))
    m = where.size
    if m > fit_rows:
        fit = np.sort(np.random.default_rng(seed).choice(m, size=fit_rows, replace=False))
    else:
        fit = np.arange(m)
    if m:
        # usable columns: MAD > 0 on the fit rows, and no value more than 1e100 MADs from the median
        f = y[where[fit]]
        med_f = np.median(f, axis=0)
        mad_f = np.median(np.abs(f - med_f), axis=0)
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            span = np.abs(y[where] - med_f).max(axis=0) / mad_f
        spread_ok = (mad_f > 0) & (span < 1e100)
        cols = cols[spread_ok]
    out["columns"] = cols
    p = cols.size
    if p < 2 or m < max(20, 5 * p):
        out["contrib"] = np.zeros((0, p))
        out["note"] = (
            f"robust distance not computed: needs at least 2 numeric columns with spread and "
            f"max(20, 5·p) complete rows (have {p} column(s), {m} complete row(s))"
        )
        return out
    y = y[where][:, spread_ok]
    try:
        with np.errstate(over="ignore", invalid="ignore", divide="ignore", under="ignore"):
            d2, centre, precision, med, mad = robust_distances(y, fit)
    except np.linalg.LinAlgError:
        centre = precision = np.array([np.nan])
    if not (np.isfinite(centre).all() and np.isfinite(precision).all()):
        out["contrib"] = np.zeros((0, p))
        out["note"] = "robust distance not computed: the estimate failed numerically (values spanning too wide a range)"
        return out
    cutoff = stats.chi2.ppf(0.975, p)
    out["d2"][where] = d2
    flagged = d2 > cutoff
    out["flagged"][where[flagged]] = True
    out["cutoff"], out["n_used"], out["n_fit"] = cutoff, m, fit.size
    # Shapley contribution of each column to d² (Mayrhofer & Filzmoser 2023): e_j · (P e)_j, summing to d²
    with np.errstate(over="ignore", invalid="ignore"):
        e = (y[flagged] - med) / mad - centre
        out["contrib"] = e * (e @ precision)
    out["rows"] = where[flagged]
    out["note"] = (
        f"robust distance on {p} columns and {m} complete rows"
        + (f" (fitted on a seeded sample of {fit_rows} rows)" if m > fit_rows else "")
        + f"; {int(flagged.sum())} row(s) beyond the χ²({p}) 0.975 quantile {cutoff:.2f}"
    )
    return out


def joint_table(joint, labels, row_labels):
    """One row per row flagged by the robust distance, most distant first, with its main contributors
    (up to three columns with the largest shares of the squared distance, shares of at least 1%)."""
    names = np.empty(len(joint["columns"]), dtype=object)
    names[:] = [str(labels[c]) for c in joint["columns"]]
    order = np.argsort(-joint["d2"][joint["rows"]], kind="stable")
    rows = joint["rows"][order]
    d2 = joint["d2"][rows]
    contrib = joint["contrib"][order]
    top = pd.Series("", index=np.arange(rows.size), dtype=object)
    if rows.size and names.size:
        best = np.argsort(-contrib, axis=1, kind="stable")[:, :3]
        picked = np.take_along_axis(contrib, best, axis=1)
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            share = np.round(100 * picked / d2[:, None])
        show = (share >= 1) & np.isfinite(share) & np.isfinite(d2)[:, None]
        for t in range(best.shape[1]):
            part = pd.Series(names[best[:, t]], dtype=object) + " (" + pd.Series(
                np.where(show[:, t], share[:, t], 0).astype(np.int64).astype(str), dtype=object) + "%)"
            part = part.where(show[:, t], "")
            sep = pd.Series(np.where((top != "") & show[:, t], "; ", ""), dtype=object)
            top = top + sep + part
    p = names.size
    return pd.DataFrame(
        {
            "row": pd.Series(list(pd.Index(row_labels)[rows]), dtype=object),
            "distance2": d2,
            "cutoff": np.full(rows.size, joint["cutoff"]),
            "p_value": stats.chi2.sf(d2, p) if p else np.zeros(0),
            "top_columns": top.astype(object),
        }
    )


# --------------------------------------------------------------------------------------
# Library side
# --------------------------------------------------------------------------------------
def _requested(ctx: Context, positions: list[int], rule: Any) -> list[str | None]:
    if rule is None or isinstance(rule, str):
        if rule is not None and rule not in RULES:
            raise ValueError(f"unknown rule {rule!r}; rules are: {', '.join(RULES)}")
        return [rule] * len(positions)
    if isinstance(rule, Mapping):
        out: list[str | None] = [None] * len(positions)
        for label, r in rule.items():
            if r not in RULES:
                raise ValueError(f"unknown rule {r!r} for column {label!r}; rules are: {', '.join(RULES)}")
            hits = ctx.positions_of(label)
            if not hits:
                raise KeyError(f"rule: no column named {label!r}")
            for h in hits:
                if h in positions:
                    out[positions.index(h)] = r
        return out
    raise TypeError("rule must be None, a rule name or a {column: rule} mapping")


def _big_ints(ctx: Context, positions: list[int]) -> list[bool]:
    out = []
    dtypes = ctx.frame.dtypes
    for i in positions:
        dt = dtypes.iloc[i]
        big = False
        if pd.api.types.is_integer_dtype(dt) and not isinstance(dt, pd.CategoricalDtype):
            v = ctx.series(i).dropna()
            if len(v):
                big = bool(v.max() > 2**53 or v.min() < -(2**53))
        out.append(big)
    return out


def compute_extremes(
    ctx: Context, rule: Any = None, alpha: float = 0.05, max_outliers: int = 10
) -> dict[str, Any]:
    """Run the scan and the joint distance; returns the pieces the section displays."""
    if not 0 < float(alpha) < 1:
        raise ValueError(f"alpha must be in (0, 1), got {alpha!r}")
    if int(max_outliers) != max_outliers or int(max_outliers) < 1:
        raise ValueError(f"max_outliers must be a positive integer, got {max_outliers!r}")
    positions = ctx.numeric_positions()
    requested = _requested(ctx, positions, rule)
    all_roles = ctx.roles
    roles = [all_roles[i] for i in positions]
    big = _big_ints(ctx, positions)
    values = ctx.float_frame(positions)
    scan = extreme_scan(values, roles, requested, big, alpha=float(alpha), max_outliers=int(max_outliers))
    labels = [ctx.labels[i] for i in positions]
    table = extremes_table(scan, labels)
    fit_rows = int(ctx.options.sample) if ctx.options.sample else FIT_ROWS
    joint = joint_scan(values, scan["joint_ok"], scan["log_scale"], seed=ctx.options.seed,
                       fit_rows=fit_rows, max_cols=MAX_JOINT_COLUMNS)
    jtable = joint_table(joint, labels, ctx.frame.index)
    return {
        "positions": positions, "requested": requested, "roles": roles, "big_ints": big,
        "scan": scan, "table": table, "joint": joint, "joint_table": jtable, "fit_rows": fit_rows,
        "alpha": float(alpha), "max_outliers": int(max_outliers),
    }


def _setup_code(ctx: Context, parts: dict[str, Any], frame_name: str) -> str:
    positions = parts["positions"]
    requested = parts["requested"]
    return f"""\
# The numeric columns (continuous, discrete, numeric-coded ordinal) as float64:
# missing values are NaN and durations are in seconds.
{float_frame_code(ctx, positions, frame_name, var="x")}labels = {labels_list(ctx, positions)}
# Each column's role (from the Roles tab) and the rule requested for it (None: the policy chooses).
roles = {parts['roles']!r}
requested = {requested!r}
# Integer columns holding values beyond ±2**53 (inexact as float64).
big_ints = {parts['big_ints']!r}

scan = extreme_scan(x.to_numpy(dtype="float64", na_value=np.nan), roles, requested, big_ints,
                    alpha={parts['alpha']!r}, max_outliers={parts['max_outliers']!r})
extremes = extremes_table(scan, labels)

# Rows far from the bulk jointly (robust distance), fitted on a seeded sample when large.
joint = joint_scan(x.to_numpy(dtype="float64", na_value=np.nan), scan["joint_ok"], scan["log_scale"],
                   seed={ctx.options.seed!r}, fit_rows={parts['fit_rows']!r}, max_cols={MAX_JOINT_COLUMNS!r})
extremes_joint = joint_table(joint, labels, {frame_name}.index)
"""


def extremes_code(ctx: Context, parts: dict[str, Any], frame_name: str = "df") -> str:
    """Plain code that rebuilds the Extremes table (and the robust-distance table)."""
    asked = sorted({str(r) for r in parts["requested"]})
    rule_text = "per column (see `requested`)" if len(asked) > 1 else (asked[0] if asked else "None")
    extra = [
        f"Extremes options: rule={rule_text}, alpha={parts['alpha']!r}, max_outliers={parts['max_outliers']!r}",
        "An extreme value may be a real, important case: investigate before removing anything.",
    ]
    return join_blocks(
        header("Extremes: extreme values by a stated rule per column", ctx, frame_name, extra),
        "# The rules (self-contained functions; see each docstring).",
        function_source(sorted_quantile),
        function_source(column_median),
        function_source(esd_steps),
        function_source(cluster_notes),
        function_source(extreme_scan),
        function_source(extremes_table),
        function_source(robust_distances),
        function_source(joint_scan),
        function_source(joint_table),
        _setup_code(ctx, parts, frame_name),
    )


def action_code(
    ctx: Context, parts: dict[str, Any], kind: str, frame_name: str = "df", joint: bool = True
) -> str:
    """Code that filters, caps (winsorizes) or flags the extreme rows — on a copy, never in place."""
    if kind not in ("filter", "cap", "flag"):
        raise ValueError("kind must be 'filter', 'cap' or 'flag'")
    base = extremes_code(ctx, parts, frame_name)
    positions = parts["positions"]
    rows_expr = (
        'scan["flag_low"].any(axis=1) | scan["flag_high"].any(axis=1) | scan["flag_inf"].any(axis=1)'
    )
    joint_line = ' | joint["flagged"]' if joint else ""
    caution = (
        "# Caution: an extreme value may be a real, important case (or the signal you are looking for).\n"
        "# Investigate each flagged row before removing or changing it; report what you did.\n"
    )
    if kind == "filter":
        body = f"""\
{caution}# Rows flagged by any column's rule (including ±inf){' or by the robust distance' if joint else ''}.
flagged_rows = {rows_expr}{joint_line}
{frame_name}_filtered = {frame_name}.loc[~flagged_rows].copy()
"""
    elif kind == "cap":
        names = lit(positions)
        body = f"""\
{caution}# Winsorize: clip each numeric column at its fences (values beyond, including ±inf, become the
# fence). Columns without fences are left alone; robust-distance flags have no per-column fence.
{frame_name}_capped = {frame_name}.copy()
for pos, lo, hi in zip({names}, extremes["lower"].to_numpy(), extremes["upper"].to_numpy()):
    if np.isnan(lo) and np.isnan(hi):
        continue
    col = {frame_name}_capped.iloc[:, pos]
    if pd.api.types.is_timedelta64_dtype(col.dtype):
        capped = col.clip(pd.to_timedelta(lo, unit="s"), pd.to_timedelta(hi, unit="s"))
    else:
        capped = col.astype("float64").clip(lo, hi)
    {frame_name}_capped.isetitem(pos, capped)
"""
    else:
        taken = {str(c) for c in ctx.labels}
        flag_name = "is_extreme"
        while flag_name in taken:
            flag_name = "_" + flag_name
        flag_key: Any = flag_name
        if isinstance(ctx.frame.columns, pd.MultiIndex):  # a full-length key for MultiIndex columns
            flag_key = (flag_name,) + ("",) * (ctx.frame.columns.nlevels - 1)
        body = f"""\
{caution}# A boolean column marking the rows flagged by any column's rule{' or by the robust distance' if joint else ''}.
{frame_name}_flagged = {frame_name}.copy()
{frame_name}_flagged[{flag_key!r}] = {rows_expr}{joint_line}
"""
    return join_blocks(base, body)
