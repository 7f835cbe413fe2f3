"""The backtest counts what the live engine raises on the same recording, in any chunking."""

from __future__ import annotations

import json
import subprocess
import sys
from collections import Counter
from itertools import pairwise

import numpy as np
import pytest
from demo_stream import recording
from rules_support import T0

from probeflow.batch import QUALITY_NAMES, ProcessedBatch
from probeflow.events import rfc3339
from probeflow.rules import build_rule_engine, parse_rules_config
from probeflow.rules.backtest import Backtest, compare
from probeflow.rules.recording import iter_recording

RULES_A = {
    "bands": [
        {"id": "tight", "probes": ["p-*"], "low": 6.8, "high": 8.2, "deadband": 0.05,
         "on_delay_s": 10, "off_delay_s": 5},
        {"id": "wide-dev", "probes": ["p-1", "p-2"], "quantity": "neutral_dev", "high": 1.0,
         "high_high": 1.4, "on_delay_s": 30},
    ],
    "rate_of_change": [{"id": "fast", "probes": ["p-*"], "limit_per_min": 1.0, "window_s": 30}],
    "diagnostics": {"stale": {"after_s": 120}},
    "redundancy": [{"id": "trio", "probes": ["p-1", "p-2", "p-3"], "limit": 0.4, "for_s": 20}],
    "drift": [{"id": "slow", "probes": ["p-*"], "limit_per_day": 2.0, "window_s": 7200, "every_s": 300}],
}
RULES_B = {"bands": [{"id": "tight", "probes": ["p-*"], "low": 6.8, "high": 8.2, "deadband": 0.3,
                      "on_delay_s": 60, "off_delay_s": 60}]}


def chunks(batch, sizes):
    idx = np.arange(len(batch))
    edges = [0, *sizes, len(batch)]
    for a, b in pairwise(edges):
        if b > a:
            yield batch.select(idx[a:b])


def live_counts(cfg, batch, batch_rows):
    eng = build_rule_engine(cfg, ["p-1", "p-2", "p-3"])
    raised = Counter()
    for chunk in chunks(batch, list(range(batch_rows, len(batch), batch_rows))):
        for ev in eng.process(chunk):
            if ev.event == "raise":
                raised[ev.rule] += 1
    return raised


@pytest.mark.parametrize("live_rows", [97, 1000])
def test_backtest_counts_equal_live_engine_counts(live_rows):
    cfg = parse_rules_config(RULES_A)
    rec = recording()
    live = live_counts(cfg, rec, live_rows)
    bt = Backtest(cfg, ["p-1", "p-2", "p-3"])
    for chunk in chunks(rec, [len(rec) // 3, 2 * len(rec) // 3]):
        bt.feed(chunk)
    stats = bt.finish()
    assert {rid: s.activations for rid, s in stats.items() if s.activations} == dict(live)
    assert sum(live.values()) > 10
    assert stats["tight"].activations > 0 and stats["trio"].activations > 0
    assert stats["diagnostics"].activations >= 1      # the gap on p-2
    span = rec.ts[-1] - rec.ts[0]
    assert 0 < stats["tight"].active_s < stats["tight"].alarms * span  # summed over its alarms


def test_active_time_and_chattering_by_hand():
    """Alarm up at 0..10 and 70..100, recording ends at 100; a re-raise 20 s after a clear chatters."""
    cfg = parse_rules_config({"bands": [{"id": "b", "probes": ["x"], "high": 8.0}]})
    seq = [(0, 9), (10, 7), (30, 9), (40, 7), (70, 9), (100, 9)]
    n = len(seq)
    ts = np.array([T0 + t for t, _ in seq])
    ph = np.array([v for _, v in seq], float)
    z = np.zeros(n)
    bt = Backtest(cfg, chatter_s=25)
    bt.feed(ProcessedBatch(np.array(["x"] * n, dtype=object), ts, z, z + 25, ph, z + 7, ph - 7,
                           np.zeros(n, np.uint8)))
    s = bt.finish()["b"]
    assert (s.activations, s.active_s, s.chattering, s.alarms) == (3, 10 + 10 + 30, 1, 1)


def test_compare_reports_b_minus_a():
    rec = recording(2000)
    a = Backtest(parse_rules_config(RULES_A))
    b = Backtest(parse_rules_config(RULES_B))
    a.feed(rec)
    b.feed(rec)
    diff = {d["rule"]: d for d in compare(a.finish(), b.finish())}
    assert diff["tight"]["activations_diff"] == b.stats["tight"].activations - a.stats["tight"].activations
    assert diff["tight"]["activations_diff"] < 0       # wider deadband and delays: fewer alarms
    assert diff["trio"]["only_in"] == "A"


def test_backtest_command_on_a_jsonl_recording(tmp_path):
    rec = recording(1500)
    path = tmp_path / "rec.jsonl"
    with path.open("w") as f:
        for i in range(len(rec)):
            f.write(json.dumps({"kind": "reading", "probe": rec.probe[i], "ts": rfc3339(rec.ts[i]),
                                "mv": rec.mv[i], "temp_c": 25.0, "ph": rec.ph[i], "neutral_ph": 7.0,
                                "neutral_dev": rec.neutral_dev[i],
                                "quality": QUALITY_NAMES[rec.quality[i]]}) + "\n")
            if i == 10:
                f.write(json.dumps({"kind": "alert", "rule": "x", "probe": "p-1", "event": "raise"}) + "\n")
    a = tmp_path / "a.yaml"
    a.write_text(json.dumps({"rules": RULES_A}))
    b = tmp_path / "b.yaml"
    b.write_text(json.dumps(RULES_B))  # the bare section works too
    out = subprocess.run([sys.executable, "-m", "probeflow", "backtest", str(path), "--rules", str(a),
                          "--rules", str(b), "--json", "--no-progress"], capture_output=True, text=True,
                         check=True)
    res = json.loads(out.stdout)
    assert res["readings"] == len(rec)
    read_back = ProcessedBatch.concat(list(iter_recording(path)))
    assert np.allclose(read_back.ts, rec.ts, rtol=0, atol=1e-6)
    assert np.array_equal(read_back.quality, rec.quality) and np.allclose(read_back.ph, rec.ph)
    want = Backtest(parse_rules_config(RULES_A))
    want.feed(read_back)
    expected = {s.rule: s.activations for s in want.finish().values()}
    assert {d["rule"]: d["activations"] for d in res["sets"]["A"]} == expected
    assert any(d["rule"] == "tight" for d in res["difference_b_minus_a"])
    text = subprocess.run([sys.executable, "-m", "probeflow", "backtest", str(path), "--rules", str(a),
                           "--no-progress"], capture_output=True, text=True, check=True).stdout
    assert "activations" in text and "tight" in text


def test_backtest_command_names_a_bad_rules_file(tmp_path):
    bad = tmp_path / "bad.yaml"
    bad.write_text("rules:\n  bands:\n    - id: x\n      probes: [a]\n      hihg: 3\n")
    rec = tmp_path / "r.jsonl"
    rec.write_text("")
    out = subprocess.run([sys.executable, "-m", "probeflow", "backtest", str(rec), "--rules", str(bad),
                          "--no-progress"], capture_output=True, text=True, check=False)
    assert out.returncode == 2
    assert "bad.yaml" in out.stderr and "rules.bands[0].hihg" in out.stderr


def test_parquet_recording_reads_the_same_as_jsonl(tmp_path):
    import pyarrow as pa
    import pyarrow.parquet as pq

    rec = recording(800)
    table = pa.table({"probe": rec.probe.astype(str), "ts": rec.ts, "mv": rec.mv, "temp_c": rec.temp_c,
                      "ph": rec.ph, "neutral_ph": rec.neutral_ph, "neutral_dev": rec.neutral_dev,
                      "quality": [QUALITY_NAMES[q] for q in rec.quality]})
    path = tmp_path / "rec.parquet"
    pq.write_table(table, path)
    back = ProcessedBatch.concat(list(iter_recording(path)))
    assert np.array_equal(back.ts, rec.ts) and np.array_equal(back.ph, rec.ph)
    assert np.array_equal(back.quality, rec.quality) and list(back.probe) == list(rec.probe)


def test_raw_readings_are_converted_with_the_site_config(tmp_path):
    """Raw mV readings + --config: the same counts as converting them in-process first."""
    from probeflow.config.load import load_config
    from probeflow.convert import Converter

    config = tmp_path / "site.yaml"
    config.write_text("site: invented-works\nprobes:\n"
                      "  - id: p-1\n    calibration: {offset_mv: 2.0, slope_pct: 98.0, zero_ph: 7.0}\n"
                      "  - id: p-2\n    calibration: {offset_mv: -1.0, slope_pct: 99.0, zero_ph: 7.0}\n")
    rec = recording(1000)
    keep = rec.probe != "p-3"
    path = tmp_path / "raw.jsonl"
    with path.open("w") as f:
        for p, t, mv in zip(rec.probe[keep], rec.ts[keep], rec.mv[keep]):
            f.write(json.dumps({"probe": p, "ts": float(t), "mv": float(mv), "temp_c": 25.0}) + "\n")
    rules = tmp_path / "a.yaml"
    rules.write_text(json.dumps({"bands": [{"id": "tight", "probes": ["p-*"], "low": 6.8, "high": 8.2}]}))
    out = subprocess.run([sys.executable, "-m", "probeflow", "backtest", str(path), "--rules", str(rules),
                          "--config", str(config), "--json", "--no-progress"], capture_output=True,
                         text=True, check=False)
    assert out.returncode == 0, out.stderr
    got = json.loads(out.stdout)["sets"]["A"][0]["activations"]
    converter = Converter(load_config(config, sections=()).probes)
    bt = Backtest(parse_rules_config(json.loads(rules.read_text())))
    for chunk in iter_recording(path, converter.convert):
        bt.feed(chunk)
    assert got == bt.finish()["tight"].activations > 0
    no_config = subprocess.run([sys.executable, "-m", "probeflow", "backtest", str(path), "--rules",
                                str(rules), "--no-progress"], capture_output=True, text=True, check=False)
    assert no_config.returncode == 1 and "--config" in no_config.stderr


def test_rules_side_by_side_count_what_one_thread_counts():
    """Threads change the speed, not the result: same stats, same errors of a failing rule."""
    from probeflow.rules.backtest import RuleStats

    class Broken:   # a plugin rule that always raises
        kind, id = "broken", "always-fails"

        def evaluate(self, batch):
            raise RuntimeError("plugin bug")

        def tick(self, now):
            return []

    rec = recording()
    results = []
    for workers in (1, 3):
        bt = Backtest(parse_rules_config(RULES_A), ["p-1", "p-2", "p-3"], workers=workers)
        bt.rules.insert(1, Broken())
        bt.stats["always-fails"] = RuleStats("always-fails", "broken")
        for chunk in chunks(rec, [len(rec) // 3, 2 * len(rec) // 3]):
            bt.feed(chunk)
        results.append({rid: s.as_dict() for rid, s in bt.finish().items()})
    assert results[0] == results[1]
    assert results[0]["always-fails"]["errors"] == 3
    assert sum(s["activations"] for s in results[0].values()) > 10
