"""Trailing-window spread and slope against slow, obvious references (Python loops, numpy.polyfit)."""

from __future__ import annotations

import numpy as np
import pytest

from probeflow.rules.windows import rolling_slope, rolling_spread


@pytest.mark.parametrize("seed", range(3))
def test_rolling_spread_equals_a_loop(seed):
    rng = np.random.default_rng(seed)
    t = np.cumsum(rng.choice([0.5, 1.0, 3.0, 40.0], 700))
    v = rng.normal(0, 5, 700)
    spread, count = rolling_spread(t, v, 30.0)
    for i in range(700):
        w = (t > t[i] - 30.0) & (t <= t[i])
        assert spread[i] == v[w].max() - v[w].min()
        assert count[i] == w.sum()


def test_rolling_slope_long_span_in_blocks_stays_accurate():
    """A year of one reading per minute: the slope of a 10-minute window is still right."""
    t = 1.7e9 + np.arange(0, 8192 * 60.0, 60.0)
    v = 7.0 + 1e-4 * (t - t[0]) + 0.01 * np.sin(t / 97.0)
    got = rolling_slope(t, v, 600.0, 3)
    for i in range(3, 8192, 101):
        w = (t > t[i] - 600.0) & (t <= t[i])
        assert got[i] == pytest.approx(np.polyfit(t[w] - t[i], v[w], 1)[0], rel=1e-9)
    assert np.isnan(rolling_slope(np.array([0.0, 1.0]), np.array([1.0, 2.0]), 10.0, 3)).all()
