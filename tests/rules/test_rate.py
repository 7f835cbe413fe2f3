"""Rate of change: least-squares slope over the window, checked against numpy.polyfit."""

from __future__ import annotations

import numpy as np
from rules_support import batch_of, times

from probeflow.rules import build_rule_engine, parse_rules_config
from probeflow.rules.rate import rolling_rate_per_min


def test_rolling_rate_matches_polyfit_over_each_window():
    rng = np.random.default_rng(0)
    t = np.cumsum(rng.uniform(1, 8, 300))
    v = 7 + 0.01 * t + rng.normal(0, 0.05, 300)
    got = rolling_rate_per_min(t, v, 60.0, 3)
    for i in range(0, 300, 7):
        w = (t > t[i] - 60) & (t <= t[i])
        if w.sum() < 3:
            assert np.isnan(got[i])
            continue
        ref = np.polyfit(t[w], v[w], 1)[0] * 60  # numpy.polyfit as the reference least squares
        assert abs(got[i] - ref) < 1e-9


def test_ramp_raises_when_the_rate_passes_the_limit():
    eng = build_rule_engine(parse_rules_config({"rate_of_change": [
        {"id": "fast", "probes": ["*"], "limit_per_min": 0.5, "window_s": 60}]}))
    t = np.arange(0, 300, 10.0)
    v = np.where(t < 100, 7.0, 7.0 + (t - 100) * 0.01)      # 0.6 pH/min from t=100
    v = np.where(t >= 200, 8.0, v)                         # levels off at 8
    ev = eng.process(batch_of([("ph-1", a, b) for a, b in zip(t, v)]))
    rates = rolling_rate_per_min(t, v, 60.0, 3)
    first_over = t[np.argmax(rates > 0.5)]
    first_back = t[(t > first_over) & (np.abs(rates) <= 0.5)][0]
    assert times(ev) == [("raise", first_over), ("clear", first_back)]
    assert ev[0].limit == "rate" and ev[0].value > 0.5
