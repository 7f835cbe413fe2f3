"""The Theil–Sen slope: the median of the slopes between all pairs of points.

Sources: H. Theil, "A rank-invariant method of linear and polynomial
regression analysis", Proc. Koninklijke Nederlandse Akademie van
Wetenschappen 53 (1950) 386-392; P. K. Sen, "Estimates of the regression
coefficient based on Kendall's tau", J. Amer. Statist. Assoc. 63 (1968)
1379-1389, eq. (2.2): slope = median over i < j with x_i != x_j of
(y_j - y_i) / (x_j - x_i).  Robust to up to about 29 % outliers.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

__all__ = ["evenly_thinned", "theil_sen_slope"]


def theil_sen_slope(x: np.ndarray, y: np.ndarray) -> float:
    """Median pairwise slope of y against x [units of y per unit of x]; NaN if under 2 distinct x.

    >>> theil_sen_slope(np.array([0.0, 1.0, 2.0, 3.0]), np.array([1.0, 3.0, 5.0, 100.0]))
    2.0
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    ok = np.isfinite(x) & np.isfinite(y)
    x, y = x[ok], y[ok]
    if x.shape[0] < 2:
        return float("nan")
    i, j = _pairs(x.shape[0])
    dx = x[j] - x[i]
    keep = dx != 0
    if not keep.any():
        return float("nan")
    return float(np.median((y[j][keep] - y[i][keep]) / dx[keep]))


@lru_cache(maxsize=8)
def _pairs(n: int) -> tuple[np.ndarray, np.ndarray]:
    i, j = np.triu_indices(n, k=1)
    return i.astype(np.int32), j.astype(np.int32)


def evenly_thinned(n: int, at_most: int) -> np.ndarray:
    """Indices of at most ``at_most`` points spread evenly over ``n`` (always keeps first and last)."""
    if n <= at_most:
        return np.arange(n)
    return np.unique(np.round(np.linspace(0, n - 1, at_most)).astype(np.int64))
