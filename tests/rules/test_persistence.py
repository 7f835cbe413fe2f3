"""Rule state survives a restart for every rule kind: process half, save JSON, restore, process the rest."""

from __future__ import annotations

import json

import numpy as np
import pytest
from demo_stream import recording

from probeflow.rules import build_rule_engine, parse_rules_config

ALL_KINDS = {
    "bands": [{"id": "band", "probes": ["p-*"], "low": 6.8, "high": 8.2, "deadband": 0.05,
               "on_delay_s": 10, "off_delay_s": 5}],
    "rate_of_change": [{"id": "rate", "probes": ["p-*"], "limit_per_min": 1.0, "window_s": 30}],
    "diagnostics": {"stale": {"after_s": 120}, "flatline": {"window_s": 300, "min_spread_mv": 2.0},
                    "noise": {"window_s": 60, "max_spread_mv": 12.0}},
    "redundancy": [{"id": "trio", "probes": ["p-1", "p-2", "p-3"], "limit": 0.4, "for_s": 20},
                   {"id": "pair", "probes": ["p-1", "p-2"], "limit": 0.1, "for_s": 10}],
    "drift": [{"id": "slow", "probes": ["p-*"], "limit_per_day": 2.0, "window_s": 7200, "every_s": 300},
              {"id": "slow-pair", "pair": ["p-1", "p-3"], "limit_per_day": 1.0, "window_s": 7200,
               "every_s": 300}],
}
PROBES = ["p-1", "p-2", "p-3"]


def events_of(engine, batches):
    out = []
    for b in batches:
        out += [(e.alarm_id, e.event, e.state, e.ts, e.value) for e in engine.process(b)]
    return out


@pytest.mark.parametrize("cut", [1234, 9000])
def test_restart_gives_the_same_events_as_one_engine(cut):
    cfg = parse_rules_config(ALL_KINDS)
    rec = recording()
    idx = np.arange(len(rec))
    parts = [rec.select(idx[a:a + 500]) for a in range(0, len(rec), 500)]
    whole = events_of(build_rule_engine(cfg, PROBES), parts)
    first_engine = build_rule_engine(cfg, PROBES)
    first = events_of(first_engine, [rec.select(idx[:cut])])
    saved = json.dumps(first_engine.state(), allow_nan=False)  # strict JSON, no NaN
    second_engine = build_rule_engine(cfg, PROBES)
    second_engine.restore(json.loads(saved))
    rest = events_of(second_engine, [rec.select(idx[cut:])])
    assert _same(first + rest, whole)
    kinds = {a.split("/")[0] for a, *_ in whole}
    assert {"band", "rate", "diagnostics", "trio", "pair", "slow"} <= kinds


def _same(a, b):
    """Equal events; values equal to 1e-9 (rolling sums may round differently after a restart)."""
    assert [x[:4] for x in a] == [x[:4] for x in b]
    assert np.allclose([x[4] for x in a], [x[4] for x in b], rtol=1e-9, atol=1e-12)
    return True
