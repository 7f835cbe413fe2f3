"""The stability criterion waits until a settling signal has settled.

The signal is a first-order step response E(t) = E_end + (E_start - E_end) exp(-t/tau)
(the usual model of an electrode moved into a new buffer; common practice, no
source), with 0.05 mV Gaussian noise, one reading a second.  Its drift is
dE/dt = -(E_start - E_end)/tau exp(-t/tau), so it falls below a bound b [mV/min]
at t_settle = tau ln(60 |E_start - E_end| / (tau b)).  A windowed criterion must
declare stability after t_settle (it averages the larger drift before t) and
well before the end of the record.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from probeflow.calibration.stability import (
    StabilityChecker,
    StabilityCriterion,
    first_stable_time,
    window_drift_per_min,
)
from probeflow.errors import ConfigError


def settling(step_mv: float, tau_s: float, duration_s: float, seed: int) -> tuple[np.ndarray, np.ndarray]:
    t = np.arange(0.0, duration_s, 1.0)
    noise = np.random.default_rng(seed).normal(0.0, 0.05, t.size)
    return t, 170.0 + step_mv * np.exp(-t / tau_s) + noise


@pytest.mark.parametrize("step_mv, tau_s, seed", [(120.0, 20.0, 1), (-80.0, 45.0, 2), (30.0, 8.0, 3)])
def test_declares_stable_after_the_signal_settles(step_mv, tau_s, seed):
    crit = StabilityCriterion()
    t, mv = settling(step_mv, tau_s, 900.0, seed)
    t_settle = tau_s * math.log(60.0 * abs(step_mv) / (tau_s * crit.max_drift_mv_per_min))
    checker = StabilityChecker(crit)
    declared = None
    for ti, ei in zip(t, mv, strict=True):
        status = checker.add(float(ti), float(ei), 25.0)
        if status.stable:
            declared = float(ti)
            assert abs(status.drift_mv_per_min) < crit.max_drift_mv_per_min
            assert status.mv == pytest.approx(170.0 + step_mv * math.exp(-ti / tau_s), abs=0.2)
            break
    assert declared is not None
    assert t_settle < declared < t_settle + 2 * crit.window_s
    assert first_stable_time(t, mv, crit) == declared


def test_a_steady_ramp_is_never_stable():
    t = np.arange(0.0, 600.0, 1.0)
    mv = 50.0 - 1.0 * t / 60.0  # 1 mV/min, twice the bound
    assert first_stable_time(t, mv) is None
    checker = StabilityChecker()
    statuses = [checker.add(float(a), float(b)) for a, b in zip(t, mv, strict=True)]
    assert not any(s.stable for s in statuses)
    assert statuses[-1].drift_mv_per_min == pytest.approx(-1.0, abs=1e-9)
    assert "drifting" in statuses[-1].reason


def test_a_flat_signal_needs_a_full_window_first():
    t = np.arange(0.0, 60.0, 0.5)
    mv = np.full(t.size, 3.0)
    assert first_stable_time(t, mv) == pytest.approx(27.0)  # 90 % of the 30 s window
    checker = StabilityChecker()
    assert "collecting" in checker.add(0.0, 3.0).reason


def test_temperature_still_changing_blocks_stability():
    t = np.arange(0.0, 300.0, 1.0)
    mv = np.full(t.size, 10.0)
    temp = 20.0 + 0.5 * t / 60.0  # 0.5 °C/min, above the 0.2 °C/min bound
    assert first_stable_time(t, mv, temp_c=temp) is None
    checker = StabilityChecker()
    for a, b, c in zip(t, mv, temp, strict=True):
        status = checker.add(float(a), float(b), float(c))
    assert not status.stable and "temperature" in status.reason


def test_window_drift_matches_a_direct_least_squares_fit():
    """Running-sum drift equals numpy.polyfit over each trailing window (a slow reference)."""
    rng = np.random.default_rng(4)
    t = np.cumsum(rng.uniform(0.5, 1.5, 200)) + 1.7e9
    y = 5.0 * np.sin(t / 40.0) + rng.normal(0, 0.05, t.size)
    fast = window_drift_per_min(t, y, 30.0)
    for i in range(10, t.size, 17):
        sel = (t >= t[i] - 30.0) & (t <= t[i])
        ref = 60.0 * np.polyfit(t[sel] - t[i], y[sel], 1)[0]
        assert fast[i] == pytest.approx(ref, rel=1e-6, abs=1e-9)


@pytest.mark.parametrize("kwargs", [{"max_drift_mv_per_min": 0}, {"window_s": -1},
                                    {"max_temp_drift_c_per_min": float("nan")}])
def test_bad_criterion_is_a_config_error(kwargs):
    with pytest.raises(ConfigError):
        StabilityCriterion(**kwargs)
