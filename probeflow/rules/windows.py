"""Trailing time-window statistics in plain numpy: spread (max - min) and least-squares slope.

Each reading ``i`` gets the statistic over the readings in (t[i] - window_s, t[i]].
``t`` must be sorted ascending.  No Python loop over readings.
"""

from __future__ import annotations

import numpy as np

__all__ = ["rolling_count", "rolling_slope", "rolling_spread", "window_starts"]


def window_starts(t: np.ndarray, window_s: float) -> np.ndarray:
    """Index of the first reading inside (t[i] - window_s, t[i]] for every i."""
    return np.searchsorted(t, t - window_s, side="right")


def rolling_count(t: np.ndarray, window_s: float) -> np.ndarray:
    return np.arange(t.shape[0]) - window_starts(t, window_s) + 1


def _range_extreme(v: np.ndarray, lo: np.ndarray, ufunc: np.ufunc) -> np.ndarray:
    """ufunc-reduce of v[lo[i] : i + 1] for every i, by a sparse table (O(n log n) work).

    Level j holds the reduction over 2**j consecutive readings; any range is
    covered by two overlapping blocks of the largest level that fits
    (max/min are idempotent, so the overlap does no harm).
    """
    n = v.shape[0]
    hi = np.arange(n)
    length = hi - lo + 1
    k = np.zeros(n, dtype=np.int64)
    np.floor(np.log2(length), out=k, casting="unsafe")
    levels = [v]
    for j in range(1, int(k.max(initial=0)) + 1):
        prev = levels[-1]
        half = 1 << (j - 1)
        levels.append(ufunc(prev[:-half], prev[half:]))
    out = np.empty(n)
    for j in np.unique(k).tolist():
        sel = np.flatnonzero(k == j)
        table = levels[j]
        out[sel] = ufunc(table[lo[sel]], table[hi[sel] - (1 << j) + 1])
    return out


def rolling_spread(t: np.ndarray, v: np.ndarray, window_s: float) -> tuple[np.ndarray, np.ndarray]:
    """max - min of v over each trailing window, and the count of readings in it."""
    if t.shape[0] == 0:
        return np.empty(0), np.empty(0, dtype=np.int64)
    lo = window_starts(t, window_s)
    spread = _range_extreme(v, lo, np.maximum) - _range_extreme(v, lo, np.minimum)
    return spread, np.arange(t.shape[0]) - lo + 1


SLOPE_BLOCK_ROWS = 4096
SLOPE_BLOCK_WINDOWS = 32.0


def rolling_slope(t: np.ndarray, v: np.ndarray, window_s: float, min_points: int) -> np.ndarray:
    """Ordinary least-squares slope dv/dt over each trailing window [units of v per s].

    slope = (n Σxy - Σx Σy) / (n Σx² - (Σx)²) (the normal equations of a
    straight-line fit; e.g. NIST/SEMATECH e-Handbook of Statistical Methods,
    section 4.1.4.1, from memory), from prefix sums.  NaN where the window
    holds fewer than ``min_points`` readings or one distinct time.

    Prefix sums lose precision as they grow, so the readings are taken in
    blocks of at most 4096 rows and 32 windows of time, each with x and y
    measured from the block's first reading (its look-back included).
    """
    n = t.shape[0]
    out = np.empty(n)
    if n == 0:
        return out
    lo_all = window_starts(t, window_s)
    s = 0
    while s < n:
        e = min(s + SLOPE_BLOCK_ROWS, int(np.searchsorted(t, t[s] + SLOPE_BLOCK_WINDOWS * window_s, "right")))
        e = max(e, s + 1)
        base = int(lo_all[s])
        out[s:e] = _slope_block(t[base:e], v[base:e], lo_all[s:e] - base, s - base, min_points)
        s = e
    return out


def _slope_block(t: np.ndarray, v: np.ndarray, lo: np.ndarray, first: int, min_points: int) -> np.ndarray:
    """Slopes for rows first..len(t)-1 of a block whose windows start at ``lo`` (block-relative)."""
    n = t.shape[0]
    x = t - t[0]
    y = v - v[0]

    def prefix(a: np.ndarray) -> np.ndarray:
        acc = np.zeros(n + 1)
        np.cumsum(a, out=acc[1:])
        return acc

    sx, sy, sxx, sxy = (prefix(a) for a in (x, y, x * x, x * y))
    hi = np.arange(first + 1, n + 1)
    cnt = (hi - lo).astype(np.float64)
    wx = sx[hi] - sx[lo]
    wy = sy[hi] - sy[lo]
    wxx = sxx[hi] - sxx[lo]
    num = cnt * (sxy[hi] - sxy[lo]) - wx * wy
    den = cnt * wxx - wx * wx
    ok = (cnt >= min_points) & (den > 1e-12 * np.maximum(cnt * wxx, 1e-300))
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(ok, num / np.where(ok, den, 1.0), np.nan)
