"""A cubic spline through a short table, in plain numpy.

Used to interpolate buffer pH(S) between the temperatures of a published table.
The spline is the classic C2 cubic interpolant with "not-a-knot" end conditions
(de Boor, "A Practical Guide to Splines", Springer 1978, ch. IV); it passes
exactly through every tabulated point.  Tables of two points are joined by a
straight line, of three by the parabola through them (the not-a-knot spline of
three points is that parabola).

Outside the table the spline is *not* evaluated: the caller gets the mask of
out-of-range points and decides (buffers refuse them with BufferRangeError).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["TableSpline"]


def _knot_slopes(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """First derivatives at the knots of the not-a-knot cubic spline."""
    n = x.size
    h = np.diff(x)
    d = np.diff(y) / h
    if n == 2:
        return np.array([d[0], d[0]])
    if n == 3:
        # parabola through the three points: p'(x) = d0 + c (2x - x0 - x1)
        c = (d[1] - d[0]) / (x[2] - x[0])
        slopes: np.ndarray = d[0] + c * (2.0 * x - x[0] - x[1])
        return slopes
    a = np.zeros((n, n))
    b = np.zeros(n)
    # not-a-knot at the left end: third derivative continuous at x[1]
    a[0, 0] = h[1]
    a[0, 1] = h[0] + h[1]
    b[0] = ((h[0] + 2.0 * (h[0] + h[1])) * h[1] * d[0] + h[0] ** 2 * d[1]) / (h[0] + h[1])
    for i in range(1, n - 1):
        a[i, i - 1] = h[i]
        a[i, i] = 2.0 * (h[i - 1] + h[i])
        a[i, i + 1] = h[i - 1]
        b[i] = 3.0 * (h[i] * d[i - 1] + h[i - 1] * d[i])
    # not-a-knot at the right end: third derivative continuous at x[n-2]
    a[-1, -2] = h[-1] + h[-2]
    a[-1, -1] = h[-2]
    b[-1] = (h[-1] ** 2 * d[-2] + (2.0 * (h[-2] + h[-1]) + h[-1]) * h[-2] * d[-1]) / (
        h[-2] + h[-1]
    )
    return np.linalg.solve(a, b)


@dataclass(frozen=True)
class TableSpline:
    """Cubic interpolant through (x, y); x strictly increasing, at least 2 points."""

    x: np.ndarray
    y: np.ndarray
    slopes: np.ndarray

    @classmethod
    def through(cls, x: np.ndarray, y: np.ndarray) -> TableSpline:
        xs = np.asarray(x, dtype=np.float64)
        ys = np.asarray(y, dtype=np.float64)
        return cls(xs, ys, _knot_slopes(xs, ys))

    def outside(self, xq: np.ndarray) -> np.ndarray:
        """Mask of query points outside [x0, xn] (NaN is not 'outside')."""
        mask: np.ndarray = (xq < self.x[0]) | (xq > self.x[-1])
        return mask

    def __call__(self, xq: np.ndarray) -> np.ndarray:
        """Cubic Hermite evaluation on each interval; NaN and out-of-range give NaN."""
        xq = np.asarray(xq, dtype=np.float64)
        i = np.clip(np.searchsorted(self.x, xq, side="right") - 1, 0, self.x.size - 2)
        x0 = self.x[i]
        h = self.x[i + 1] - x0
        t = (xq - x0) / h
        y0, y1 = self.y[i], self.y[i + 1]
        m0, m1 = self.slopes[i] * h, self.slopes[i + 1] * h
        t2 = t * t
        t3 = t2 * t
        out = (
            (2.0 * t3 - 3.0 * t2 + 1.0) * y0
            + (t3 - 2.0 * t2 + t) * m0
            + (-2.0 * t3 + 3.0 * t2) * y1
            + (t3 - t2) * m1
        )
        return np.where(self.outside(xq), np.nan, out)
