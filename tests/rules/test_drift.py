"""Slow drift by Theil–Sen, checked against scipy.stats.theilslopes and a synthetic known rate."""

from __future__ import annotations

import numpy as np
import pytest
from rules_support import T0
from scipy.stats import theilslopes

from probeflow.batch import ProcessedBatch
from probeflow.rules import build_rule_engine, parse_rules_config
from probeflow.rules.theil_sen import theil_sen_slope


@pytest.mark.parametrize("seed", range(4))
def test_theil_sen_matches_scipy(seed):
    """scipy.stats.theilslopes (Sen 1968) as the reference implementation."""
    rng = np.random.default_rng(seed)
    x = np.sort(rng.uniform(0, 100, 80))
    y = 0.37 * x + rng.standard_cauchy(80)
    assert theil_sen_slope(x, y) == pytest.approx(theilslopes(y, x).slope, rel=1e-12)


def drifting(rate_per_day, days=2.0, step=30.0, seed=0, probe="ph-1", offset=0.0):
    rng = np.random.default_rng(seed)
    t = T0 + offset + np.arange(0, days * 86400, step)
    ph = 7.2 + rate_per_day * (t - T0) / 86400 + rng.normal(0, 0.03, t.shape[0])
    return probe, t, ph


def batch(*series):
    probe = np.concatenate([np.array([p] * t.shape[0], dtype=object) for p, t, _ in series])
    t = np.concatenate([t for _, t, _ in series])
    ph = np.concatenate([v for _, _, v in series])
    order = np.argsort(t, kind="stable")
    n = t.shape[0]
    z = np.zeros(n)
    return ProcessedBatch(probe[order], t[order], z, z + 25, ph[order], z + 7, ph[order] - 7,
                          np.zeros(n, np.uint8))


def test_slow_drift_detected_within_ten_percent_of_the_known_rate():
    cfg = parse_rules_config({"drift": [{"id": "slow", "probes": ["ph-*"], "limit_per_day": 0.2,
                                         "window_s": 86400}]})
    eng = build_rule_engine(cfg)
    data = batch(drifting(0.3, probe="ph-1"), drifting(0.0, probe="ph-2", seed=1, offset=3))
    ev = []
    idx = np.arange(len(data))
    for a in range(0, len(data), 5000):
        ev += eng.process(data.select(idx[a:a + 5000]))
    raised = [e for e in ev if e.event == "raise"]
    assert [e.probe for e in raised] == ["ph-1"]
    assert raised[0].value == pytest.approx(0.3, rel=0.10)
    # needs half a window of points first
    assert raised[0].ts - T0 >= 0.5 * 86400


def test_pair_difference_drift():
    cfg = parse_rules_config({"drift": [{"id": "pair", "pair": ["ph-1", "ph-2"], "limit_per_day": 0.1,
                                         "window_s": 43200}]})
    eng = build_rule_engine(cfg)
    common = drifting(0.0, seed=5)[2]
    _, t, _ = drifting(0.0)
    a = ("ph-1", t, common + 0.25 * (t - T0) / 86400)
    b = ("ph-2", t + 1.0, common)
    ev = eng.process(batch(a, b))
    raised = [e for e in ev if e.event == "raise"]
    assert [e.probe for e in raised] == ["ph-1-ph-2"]
    assert raised[0].value == pytest.approx(0.25, rel=0.10)


def test_no_drift_no_alarm():
    cfg = parse_rules_config({"drift": [{"id": "slow", "probes": ["*"], "limit_per_day": 0.2}]})
    eng = build_rule_engine(cfg)
    assert eng.process(batch(drifting(0.02, seed=2))) == []
