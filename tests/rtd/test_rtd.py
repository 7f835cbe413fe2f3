"""Pt100/Pt1000 by Callendar-Van Dusen, IEC 60751:2008.

Check values: tests/data/rtd_iec60751_pt100.csv (IEC 60751:2008 Table 1, Pt100,
0.01 ohm resolution; recalled FROM MEMORY, see the file header).  The inverse is
also checked against a slow bisection kept here as a naive reference.
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np
import pytest

from probeflow.rtd import resistance_from_temp, temp_from_resistance

DATA = Path(__file__).resolve().parents[1] / "data" / "rtd_iec60751_pt100.csv"


def _table() -> list[tuple[float, float]]:
    with DATA.open(encoding="utf-8") as fh:
        assert fh.readline().startswith("# source:")
        return [(float(r["temp_c"]), float(r["ohms"])) for r in csv.DictReader(fh)]


TABLE = _table()


@pytest.mark.parametrize(("temp_c", "ohms"), TABLE)
def test_pt100_table_points(temp_c: float, ohms: float) -> None:
    """IEC 60751:2008 Table 1 (Pt100): resistance within 0.01 ohm, table rounding 0.005."""
    assert resistance_from_temp(temp_c) == pytest.approx(ohms, abs=0.01)
    assert abs(resistance_from_temp(temp_c) - ohms) <= 0.005 + 1e-9


@pytest.mark.parametrize(("temp_c", "ohms"), TABLE)
def test_pt100_inverse_at_table_points(temp_c: float, ohms: float) -> None:
    """Inverse of the exact resistance within 0.001 °C; of the rounded table value within
    0.005 ohm / slope (~0.02 °C)."""
    exact = resistance_from_temp(temp_c)
    if math.isclose(temp_c, -200.0) or math.isclose(temp_c, 850.0):
        assert temp_from_resistance(exact) == pytest.approx(temp_c, abs=1e-3)
        return
    assert temp_from_resistance(exact) == pytest.approx(temp_c, abs=1e-3)
    assert temp_from_resistance(ohms) == pytest.approx(temp_c, abs=0.03)


@pytest.mark.parametrize(("temp_c", "ohms"), TABLE)
def test_pt1000_is_ten_times_pt100(temp_c: float, ohms: float) -> None:
    """IEC 60751: Pt1000 follows the same equation with R0 = 1000 ohm."""
    assert resistance_from_temp(temp_c, r0=1000.0) == pytest.approx(10 * ohms, abs=0.1)
    assert temp_from_resistance(resistance_from_temp(temp_c, r0=1000.0), r0=1000.0) == pytest.approx(
        temp_c, abs=1e-3)


def _bisect(ohms: float, r0: float = 100.0) -> float:
    lo, hi = -200.0, 850.0
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if resistance_from_temp(mid, r0) < ohms:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)


def test_inverse_matches_naive_bisection_everywhere() -> None:
    rng = np.random.default_rng(60751)
    ohms = rng.uniform(resistance_from_temp(-200.0), resistance_from_temp(850.0), 300)
    fast = temp_from_resistance(ohms)
    slow = np.array([_bisect(float(r)) for r in ohms])
    assert np.max(np.abs(fast - slow)) < 1e-9


def test_round_trip_dense_grid_below_and_above_zero() -> None:
    t = np.linspace(-200.0, 850.0, 200_001)
    back = temp_from_resistance(resistance_from_temp(t))
    assert np.max(np.abs(back - t)) < 1e-9
    # continuity at 0 °C
    assert temp_from_resistance(100.0) == 0.0
    assert temp_from_resistance(np.nextafter(100.0, 0.0)) < 0.0


def test_outside_range_gives_nan_not_clamped() -> None:
    assert math.isnan(resistance_from_temp(-200.01))
    assert math.isnan(resistance_from_temp(850.01))
    below = resistance_from_temp(-200.0) - 0.001
    above = resistance_from_temp(850.0) + 0.001
    out = temp_from_resistance(np.array([below, 100.0, above, 0.0, -5.0, np.nan, np.inf]))
    assert out[1] == 0.0
    assert np.isnan(out[[0, 2, 3, 4, 5, 6]]).all()


def test_scalars_and_arrays_agree() -> None:
    t = np.array([[-150.0, -0.5], [0.0, 421.7]])
    r = resistance_from_temp(t)
    assert r.shape == (2, 2)
    for idx in np.ndindex(t.shape):
        s = resistance_from_temp(float(t[idx]))
        assert isinstance(s, float) and s == r[idx]
        assert temp_from_resistance(s) == temp_from_resistance(r)[idx]
    # per-sensor R0 broadcasts
    both = temp_from_resistance(np.array([138.5055, 1385.055]), r0=np.array([100.0, 1000.0]))
    assert both == pytest.approx([100.0, 100.0], abs=1e-9)
