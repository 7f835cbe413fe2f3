"""The ISA-18.2 alarm lifecycle (ANSI/ISA-18.2-2016 alarm state model, from memory):
normal -> unack_active -> ack_active -> normal, unack_active -> unack_returned -> normal,
shelving with expiry, suppression while a probe is in maintenance, and restart."""

from __future__ import annotations

import json

import pytest
from rules_support import T0, batch_of

from probeflow.errors import ProbeflowError
from probeflow.rules import build_rule_engine, parse_rules_config

CFG = {"bands": [{"id": "tank", "probes": ["t*"], "high": 8.5, "low": 6.5}]}


def fresh():
    return build_rule_engine(parse_rules_config(CFG), ["t1", "t2"])


def feed(eng, seq, probe="t1"):
    return eng.process(batch_of([(probe, t, v) for t, v in seq]))


def states(events):
    return [(e.event, e.state) for e in events]


def test_ack_while_active_then_return_goes_to_normal():
    eng = fresh()
    assert states(feed(eng, [(0, 9.0)])) == [("raise", "unack_active")]
    ack = eng.ack("tank/t1/high", T0 + 5)
    assert (ack.event, ack.state, ack.ts) == ("ack", "ack_active", T0 + 5)
    assert states(feed(eng, [(10, 8.0)])) == [("clear", "normal")]
    assert eng.active_alarms() == []


def test_return_unacknowledged_then_ack_goes_to_normal():
    eng = fresh()
    feed(eng, [(0, 9.0)])
    assert states(feed(eng, [(10, 8.0)])) == [("clear", "unack_returned")]
    assert [a["state"] for a in eng.active_alarms()] == ["unack_returned"]
    assert eng.ack("tank/t1/high", T0 + 20).state == "normal"
    with pytest.raises(ProbeflowError, match="only an unacknowledged alarm"):
        eng.ack("tank/t1/high", T0 + 21)


def test_raise_again_from_unack_returned():
    eng = fresh()
    ev = feed(eng, [(0, 9.0), (10, 8.0), (20, 9.0)])
    assert states(ev) == [("raise", "unack_active"), ("clear", "unack_returned"), ("raise", "unack_active")]


def test_unknown_alarm_id_is_a_clear_error():
    with pytest.raises(ProbeflowError, match="no alarm with id"):
        fresh().ack("tank/t9/high", T0)


def test_shelving_hides_transitions_and_expires_through_tick():
    eng = fresh()
    feed(eng, [(0, 9.0)])
    sh = eng.shelve("tank/t1/high", until_ts=T0 + 100, ts=T0 + 1)
    assert (sh.event, sh.state) == ("shelve", "shelved")
    assert feed(eng, [(10, 8.0), (20, 9.0)]) == []       # followed silently
    assert eng.tick(T0 + 99) == []
    ev = eng.tick(T0 + 150)
    assert [(e.event, e.state, e.ts - T0) for e in ev] == [("unshelve", "unack_active", 100.0)]


def test_shelving_expires_at_the_next_batch_too_and_unshelve_by_hand():
    eng = fresh()
    feed(eng, [(0, 9.0), (5, 8.0)])
    eng.shelve("tank/t1/high", until_ts=T0 + 50, ts=T0 + 6)
    ev = feed(eng, [(60, 8.0)])
    assert [(e.event, e.state) for e in ev] == [("unshelve", "normal")]
    eng.shelve("tank/t1/high", until_ts=T0 + 500, ts=T0 + 61)
    assert eng.unshelve("tank/t1/high", T0 + 62).state == "normal"
    with pytest.raises(ProbeflowError, match="not shelved"):
        eng.unshelve("tank/t1/high", T0 + 63)


def test_maintenance_suppresses_and_restores_by_condition():
    eng = fresh()
    feed(eng, [(0, 9.0)])
    feed(eng, [(0, 7.0)], probe="t2")
    ev = eng.set_maintenance("t1", True, T0 + 1)
    assert [(e.alarm_id, e.event, e.state) for e in ev] == [("tank/t1/high", "suppress", "suppressed")]
    assert feed(eng, [(10, 8.0), (20, 5.0)]) == []       # low raised silently while suppressed
    ev = eng.set_maintenance("t1", False, T0 + 30)
    got = sorted((e.alarm_id, e.event, e.state) for e in ev)
    assert got == [("tank/t1/high", "unsuppress", "normal"), ("tank/t1/low", "unsuppress", "unack_active")]
    # the other probe was never touched
    assert states(feed(eng, [(40, 9.0)], probe="t2")) == [("raise", "unack_active")]


def test_restart_neither_reraises_nor_forgets():
    """Half the stream, state saved as JSON, a new engine restored: same events as one engine."""
    seq = [(t, 9.0 if (t // 30) % 2 == 0 else 8.0) for t in range(0, 300, 7)]
    one = fresh()
    whole = feed(one, seq)
    two = fresh()
    first = feed(two, seq[:20])
    saved = json.dumps(two.state())
    three = fresh()
    three.restore(json.loads(saved))
    rest = feed(three, seq[20:])
    key = [(e.alarm_id, e.event, e.state, e.ts) for e in whole]
    assert [(e.alarm_id, e.event, e.state, e.ts) for e in first + rest] == key
    assert len(key) >= 6


def test_restart_keeps_active_and_acknowledged_state():
    eng = fresh()
    feed(eng, [(0, 9.0)])
    eng.ack("tank/t1/high", T0 + 1)
    other = fresh()
    other.restore(json.loads(json.dumps(eng.state())))
    assert [a["state"] for a in other.active_alarms()] == ["ack_active"]
    assert feed(other, [(10, 9.0)]) == []                # no re-raise after the restart
    assert states(feed(other, [(20, 8.0)])) == [("clear", "normal")]


def test_restore_rejects_a_state_of_another_version():
    with pytest.raises(ProbeflowError, match="version"):
        fresh().restore({"version": 99})
