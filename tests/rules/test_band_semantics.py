"""Band rule semantics, each on a hand-made sequence with the exact event times.

The semantics under test are the ones written in the rules issue (a limit is
active at the first reading at which the value has been beyond it at every
reading for at least on_delay_s; it returns at the first reading at which the
value has been at or inside limit - deadband at every reading for at least
off_delay_s).  Expected times are worked out by hand beside each case.
"""

from __future__ import annotations

from itertools import pairwise

import numpy as np
import pytest
from reference import naive_latch
from rules_support import T0, batch_of, times

from probeflow.rules import build_rule_engine, parse_rules_config


def engine(**band):
    spec = {"id": "b", "probes": ["p*"], "quantity": "ph"} | band
    return build_rule_engine(parse_rules_config({"bands": [spec]}), ["p1"])


def run(eng, seq, probe="p1"):
    return eng.process(batch_of([(probe, t, v, *rest) for t, v, *rest in seq]))


def test_on_delay_raises_at_first_reading_after_the_delay():
    eng = engine(high=8.5, on_delay_s=30)
    ev = run(eng, [(0, 8.4), (10, 8.6), (20, 8.7), (30, 8.6), (40, 8.6), (50, 8.6)])
    # above since t=10; 40 - 10 >= 30 -> raise at 40
    assert times(ev) == [("raise", 40.0)]
    assert ev[0].state == "unack_active" and ev[0].limit == "high" and ev[0].value == 8.6
    assert ev[0].threshold == 8.5 and ev[0].alarm_id == "b/p1/high"


def test_value_exactly_at_limit_is_not_above_and_restarts_the_delay():
    eng = engine(high=8.5, on_delay_s=30)
    ev = run(eng, [(0, 8.6), (10, 8.6), (20, 8.5), (30, 8.6), (40, 8.6), (50, 8.6), (60, 8.6)])
    # 8.5 at t=20 is not above: the run restarts at 30, so 60 is the first reading 30 s into it
    assert times(ev) == [("raise", 60.0)]


def test_zero_on_delay_raises_at_first_reading_above_and_never_at_the_limit():
    eng = engine(high=8.5)
    ev = run(eng, [(0, 8.5), (1, 8.5), (2, 8.50001), (3, 8.4)])
    assert times(ev) == [("raise", 2.0), ("clear", 3.0)]


def test_deadband_and_off_delay():
    eng = engine(high=8.5, deadband=0.1, off_delay_s=20)
    seq = [(0, 8.6),                       # raise at 0
           (10, 8.45), (20, 8.45),         # inside the deadband: not returned
           (30, 8.4),                      # exactly limit - deadband: returned, run starts
           (40, 8.3),                      # 10 s into the run
           (45, 8.41),                     # inside the deadband again: run broken
           (50, 8.4), (60, 8.4), (70, 8.4)]  # run starts 50; 70 - 50 >= 20 -> clear at 70
    ev = run(eng, seq)
    assert times(ev) == [("raise", 0.0), ("clear", 70.0)]
    assert ev[1].state == "unack_returned" and ev[1].value == pytest.approx(8.4)


def test_gap_in_timestamps_counts_toward_the_delays():
    eng = engine(high=8.5, on_delay_s=30, off_delay_s=30)
    ev = run(eng, [(0, 8.6), (100, 8.6), (200, 8.0), (500, 8.0)])
    # the value is taken to hold between readings: 100 - 0 >= 30, 500 - 200 >= 30
    assert times(ev) == [("raise", 100.0), ("clear", 500.0)]


def test_non_good_readings_are_skipped_entirely():
    eng = engine(high=8.5, on_delay_s=30)
    ev = run(eng, [(0, 8.6), (10, 8.0, 2), (20, 8.6), (30, 8.6), (40, 9.9, 4)])
    # t=10 (temp_fault) neither breaks the run nor counts: raise at 30; t=40 (maintenance) ignored
    assert times(ev) == [("raise", 30.0)]
    eng = engine(high=8.5)
    ev = run(eng, [(0, 9.0, 1), (10, 9.0, 3), (20, float("nan"))])
    assert ev == []  # uncalibrated, mV out of range, NaN value: never raise


def test_non_good_reading_does_not_clear():
    eng = engine(high=8.5)
    ev = run(eng, [(0, 8.6), (10, 7.0, 2), (20, 8.6), (30, 7.0)])
    assert times(ev) == [("raise", 0.0), ("clear", 30.0)]


def test_low_limit_mirrors_high():
    eng = engine(low=6.5, deadband=0.1, on_delay_s=10, off_delay_s=10)
    seq = [(0, 6.5),                   # exactly at the limit: not below
           (10, 6.4), (15, 6.45), (20, 6.3),   # below since 10: raise at 20
           (30, 6.55),                 # inside deadband (returned needs >= 6.6)
           (40, 6.6), (45, 6.7), (50, 6.6)]    # returned since 40: clear at 50
    ev = run(eng, seq)
    assert times(ev) == [("raise", 20.0), ("clear", 50.0)]
    assert {e.limit for e in ev} == {"low"}


def test_low_low_and_high_high_are_separate_alarms():
    eng = engine(low_low=4.0, low=6.0, high=9.0, high_high={"value": 11.0, "severity": "critical"})
    ev = run(eng, [(0, 7.0), (1, 9.5), (2, 11.5), (3, 8.0), (4, 5.0), (5, 3.0), (6, 7.0)])
    got = [(e.event, e.limit, round(e.ts - T0)) for e in ev]
    assert got == [("raise", "high", 1), ("raise", "high_high", 2), ("clear", "high", 3),
                   ("clear", "high_high", 3), ("raise", "low", 4), ("raise", "low_low", 5),
                   ("clear", "low_low", 6), ("clear", "low", 6)]  # same time: limit order
    assert [e.severity for e in ev if e.limit == "high_high"] == ["critical", "critical"]
    assert [e.severity for e in ev if e.limit == "low_low"] == ["high", "high"]


def test_probes_are_independent_and_globs_select_them():
    eng = engine(high=8.5, on_delay_s=10)
    ev = eng.process(batch_of([("p1", 0, 9), ("p2", 0, 8), ("q1", 0, 9), ("p1", 10, 9),
                               ("p2", 10, 9), ("q1", 10, 9), ("p2", 20, 9)]))
    assert [(e.probe, round(e.ts - T0)) for e in ev] == [("p1", 10), ("p2", 20)]


def test_repeated_and_late_readings_are_ignored():
    eng = engine(high=8.5, on_delay_s=10)
    run(eng, [(0, 9), (5, 9)])
    ev = run(eng, [(5, 9), (3, 9), (10, 9)])  # (5) repeats, (3) is older than what was seen
    assert times(ev) == [("raise", 10.0)]
    assert eng.counters["dropped_repeats_or_late"] == 2


def test_readings_in_one_batch_out_of_time_order_are_sorted():
    eng = engine(high=8.5, on_delay_s=10)
    ev = run(eng, [(10, 9), (0, 9), (5, 9)])
    assert times(ev) == [("raise", 10.0)]


@pytest.mark.parametrize("seed", range(6))
def test_fast_kernel_equals_reading_by_reading_reference_in_any_batching(seed):
    """Random sequences over several probes, fed in random batches, against tests/rules/reference.py."""
    rng = np.random.default_rng(seed)
    cfg = {"low": 6.5, "high": 8.5, "deadband": float(rng.choice([0, 0.05, 0.2])),
           "on_delay_s": float(rng.choice([0, 7, 30])), "off_delay_s": float(rng.choice([0, 5, 40]))}
    rows = []
    expected = []
    for p in ("p1", "p2", "p3"):
        n = 400
        t = np.cumsum(rng.choice([1.0, 2.0, 5.0, 60.0], n))
        v = np.round(7.5 + np.cumsum(rng.normal(0, 0.15, n)) % 2.6 - 0.3 + 0.2, 2)
        q = np.where(rng.random(n) < 0.05, 2, 0)
        rows += [(p, float(a), float(b), int(c)) for a, b, c in zip(t, v, q)]
        for name, high in (("high", True), ("low", False)):
            ref = naive_latch(t, v, limit=cfg[name], deadband=cfg["deadband"], on_delay=cfg["on_delay_s"],
                              off_delay=cfg["off_delay_s"], high=high, good=q == 0)
            expected += [(p, name, round(float(t[i]), 6), kind) for i, kind in ref]
    order = rng.permutation(len(rows))
    rows = [rows[i] for i in order]
    rows.sort(key=lambda r: r[1])  # arrival roughly in time order across probes
    eng = engine(**cfg)
    cuts = sorted(set(rng.integers(0, len(rows), 12).tolist() + [0, len(rows)]))
    got = []
    for a, b in pairwise(cuts):
        for e in eng.process(batch_of(rows[a:b])):
            got.append((e.probe, e.limit, round(e.ts - T0, 6), e.event))
    assert sorted(got) == sorted(expected)
    assert len(expected) > 4


def test_rule_on_probes_that_are_not_adjacent_in_sort_order():
    eng = engine(high=8.5, probes=["p1", "p3"])
    ev = eng.process(batch_of([("p1", 0, 9), ("p2", 0, 9), ("p3", 0, 8), ("p3", 5, 9), ("p2", 6, 9)]))
    assert [(e.probe, round(e.ts - T0)) for e in ev] == [("p1", 0), ("p3", 5)]


def test_engine_meets_the_rule_engine_protocol():
    from probeflow.rules.base import RuleEngine

    assert isinstance(engine(high=8.5), RuleEngine)
