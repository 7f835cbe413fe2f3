"""Redundant probes: deviation for a time, and the odd one out of three named by median voting."""

from __future__ import annotations

import json

import numpy as np
from rules_support import T0, batch_of

from probeflow.rules import build_rule_engine, parse_rules_config
from probeflow.rules.redundancy import odd_one_out


def trio_engine(**extra):
    spec = {"id": "trio", "probes": ["ph-a", "ph-b", "ph-c"], "limit": 0.3, "for_s": 20} | extra
    return build_rule_engine(parse_rules_config({"redundancy": [spec]}))


def trio_rows(c_value, t_range):
    rows = []
    for t in t_range:
        rows += [("ph-a", t, 7.00), ("ph-b", t, 7.02), ("ph-c", t, c_value(t))]
    return rows


def test_median_voting_names_the_odd_probe():
    eng = trio_engine()
    ev = eng.process(batch_of(trio_rows(lambda t: 7.5 if 100 <= t < 200 else 7.01, range(0, 300, 10))))
    # c is 0.48 from the median (7.02) from t=100; 20 s later (t=120) the alarm is raised on c
    assert [(e.event, e.probe, e.ts - T0) for e in ev] == [("raise", "ph-c", 120.0), ("clear", "ph-c", 200.0)]
    assert ev[0].alarm_id == "trio/ph-c/deviation"
    assert "ph-c is the odd one out" in ev[0].message and "median voting" in ev[0].message
    assert abs(ev[0].value - 0.48) < 1e-9


def test_odd_one_out_function():
    med, odd, dev = odd_one_out(np.array([[7.0, 7.1, 7.9], [6.2, 7.0, 7.05], [7.0, 7.0, 7.0]]))
    assert med.tolist() == [7.1, 7.0, 7.0]
    assert odd.tolist()[:2] == [2, 0]
    assert np.allclose(dev, [0.8, 0.8, 0.0])


def test_pair_deviation_uses_held_values_and_ignores_stale_ones():
    eng = build_rule_engine(parse_rules_config({"redundancy": [
        {"id": "pair", "probes": ["ph-a", "ph-b"], "limit": 0.2, "max_age_s": 30}]}))
    ev = eng.process(batch_of([("ph-a", 0, 7.0), ("ph-b", 5, 7.1), ("ph-a", 10, 7.4),   # 0.3 at t=10
                               ("ph-b", 15, 7.35),                                       # 0.05: clear
                               ("ph-a", 100, 8.0)]))                                     # b is 85 s old
    assert [(e.event, e.probe, e.ts - T0) for e in ev] == [("raise", "ph-a~ph-b", 10.0),
                                                           ("clear", "ph-a~ph-b", 15.0)]


def test_non_good_readings_are_not_compared():
    eng = trio_engine(for_s=0)
    rows = [("ph-a", 0, 7.0), ("ph-b", 0, 7.0), ("ph-c", 0, 9.0, 4)]  # c in maintenance
    assert eng.process(batch_of(rows)) == []


def test_redundancy_state_survives_restart():
    rows = trio_rows(lambda t: 7.5 if t >= 50 else 7.0, range(0, 200, 10))
    one = trio_engine()
    whole = one.process(batch_of(rows))
    two = trio_engine()
    first = two.process(batch_of(rows[:18]))
    three = trio_engine()
    three.restore(json.loads(json.dumps(two.state())))
    rest = three.process(batch_of(rows[18:]))
    assert [(e.event, e.ts) for e in first + rest] == [(e.event, e.ts) for e in whole] != []
