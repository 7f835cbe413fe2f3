"""Per-probe diagnostics on hand-made sequences, exact event times worked out beside each."""

from __future__ import annotations

import json

import numpy as np
from rules_support import T0, batch_of, times

from probeflow.rules import build_rule_engine, parse_rules_config


def diag(**section):
    return build_rule_engine(parse_rules_config({"diagnostics": section}), ["ph-1", "ph-2"])


OFF = {"enabled": False}


def kinds(events):
    return [(e.event, e.limit, e.probe, round(e.ts - T0, 6)) for e in events]


def test_stale_raised_by_tick_and_cleared_by_the_next_reading():
    eng = diag(stale={"after_s": 300}, flatline=OFF, noise=OFF)
    eng.process(batch_of([("ph-1", t, 7.0) for t in range(0, 101, 10)], quantity="mv"))
    eng.tick(T0 + 150)  # ph-2 never reported: watched from the first tick
    assert eng.tick(T0 + 399) == []
    ev = eng.tick(T0 + 401)
    assert kinds(ev) == [("raise", "stale", "ph-1", 400.0)]          # 100 + 300
    ev = eng.tick(T0 + 451)
    assert kinds(ev) == [("raise", "stale", "ph-2", 450.0)]          # first tick 150 + 300
    ev = eng.process(batch_of([("ph-1", 600, 7.0)], quantity="mv"))
    assert kinds(ev) == [("clear", "stale", "ph-1", 600.0)]
    assert ev[0].state == "unack_returned"


def test_stale_found_in_a_replayed_gap_without_ticks():
    eng = diag(stale={"after_s": 300}, flatline=OFF, noise=OFF)
    ev = eng.process(batch_of([("ph-1", 0, 7.0), ("ph-1", 10, 7.0), ("ph-1", 500, 7.0), ("ph-1", 510, 7.0)],
                              quantity="mv"))
    assert kinds(ev) == [("raise", "stale", "ph-1", 310.0), ("clear", "stale", "ph-1", 500.0)]


def test_flatline_after_a_whole_window_of_flat_signal():
    eng = diag(stale=OFF, noise=OFF, flatline={"window_s": 60, "min_spread_mv": 0.1})
    rows = [("ph-1", t, 12.0) for t in range(0, 100, 10)] + [("ph-1", 100, 14.0), ("ph-1", 110, 12.0)]
    ev = eng.process(batch_of(rows, quantity="mv"))
    # read since 0, so the first full window ends at 60: spread 0 < 0.1 -> raise at 60; at 100 the
    # window (40, 100] holds 12 and 14: spread 2 -> returned
    assert kinds(ev) == [("raise", "flatline", "ph-1", 60.0), ("clear", "flatline", "ph-1", 100.0)]


def test_noise_when_spread_exceeds_the_bound():
    eng = diag(stale=OFF, flatline=OFF, noise={"window_s": 30, "max_spread_mv": 20})
    mv = [0, 1, 0, 1, 15, -10, 0, 1, 0, 1, 0, 1]
    ev = eng.process(batch_of([("ph-1", 10 * k, v) for k, v in enumerate(mv)], quantity="mv"))
    # spread first > 20 at t=50 (15 and -10 in (20, 50]); at t=70 the window (40, 70] holds
    # -10, 0, 1: spread 11, back within the bound
    assert kinds(ev) == [("raise", "noise", "ph-1", 50.0), ("clear", "noise", "ph-1", 70.0)]


def test_temp_fault_persisting_and_mv_out_of_range():
    eng = diag(stale=OFF, flatline=OFF, noise=OFF, temp_fault={"for_s": 30})
    rows = [("ph-1", 0, 7.0, 0), ("ph-1", 10, 7.0, 2), ("ph-1", 20, 7.0, 2), ("ph-1", 30, 7.0, 2),
            ("ph-1", 40, 7.0, 2), ("ph-1", 50, 7.0, 0),
            ("ph-2", 0, 7.0, 3), ("ph-2", 10, 7.0, 4), ("ph-2", 20, 7.0, 0)]
    ev = eng.process(batch_of(rows, quantity="mv"))
    # temp_fault since 10; 40 - 10 >= 30 -> raise at 40; good at 50 -> clear.  ph-2: the maintenance
    # reading at 10 is ignored, the good one at 20 clears mv_range
    assert kinds(ev) == [("raise", "mv_range", "ph-2", 0.0), ("clear", "mv_range", "ph-2", 20.0),
                         ("raise", "temp_fault", "ph-1", 40.0), ("clear", "temp_fault", "ph-1", 50.0)]


def test_configured_mv_bounds():
    eng = diag(stale=OFF, flatline=OFF, noise=OFF, mv_range={"min_mv": -500, "max_mv": 500})
    ev = eng.process(batch_of([("ph-1", 0, 100.0), ("ph-1", 10, 600.0), ("ph-1", 20, -200.0)], quantity="mv"))
    assert times(ev) == [("raise", 10.0), ("clear", 20.0)]


def test_diagnostics_state_survives_restart():
    rng = np.random.default_rng(4)
    rows = [("ph-1", 10 * k, float(v)) for k, v in enumerate(np.where(rng.random(200) < 0.1, 40.0, 0.0))]
    rows += [("ph-1", 2500 + 10 * k, 1.0) for k in range(100)]
    cfg = {"stale": {"after_s": 200}, "flatline": {"window_s": 120}, "noise": {"window_s": 30}}
    whole = diag(**cfg).process(batch_of(rows, quantity="mv"))
    a = diag(**cfg)
    first = a.process(batch_of(rows[:150], quantity="mv"))
    b = diag(**cfg)
    b.restore(json.loads(json.dumps(a.state())))
    rest = b.process(batch_of(rows[150:], quantity="mv"))
    assert kinds(first + rest) == kinds(whole)
    assert {e.limit for e in whole} == {"noise", "stale", "flatline"}
