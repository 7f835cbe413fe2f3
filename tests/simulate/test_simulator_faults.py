"""Each scheduled fault shows in the stream at its time, and in the ground truth."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import orjson
import pytest
from sim_scenarios import BASE, scenario_from_mapping

from probeflow.simulate.electrode import OPEN_ELEMENT_OHMS, SHORTED_ELEMENT_OHMS
from probeflow.simulate.faults import FAULT_BITS
from probeflow.simulate.generator import Simulation
from probeflow.simulate.outputs.files import JsonLinesOutput
from probeflow.simulate.run import run_simulation

START = 1772431200.0   # 2026-03-02T06:00:00Z
MIN = 60.0


def _scenario():
    data = {**BASE}
    data["streams"] = {
        "warm": {"ph": {"set_point": 7.2, "disturbance": {"sigma": 0.1, "tau": "10min"},
                        "events": [{"kind": "step", "at": "80min", "delta": 1.0, "duration": "10min"}]},
                 "temperature": {"set_point": 45.0, "disturbance": {"sigma": 1.0, "tau": "20min"}}},
        "cool": {"ph": {"set_point": 6.8, "disturbance": {"sigma": 0.05, "tau": "5min"},
                        "events": [{"kind": "step", "at": "50min", "delta": -1.0}]},
                 "temperature": {"set_point": 12.0}},
    }
    data["probes"] = [
        {"id": "w-1", "stream": "warm", "electrode": {"offset_mv": 3.0, "slope_pct": 97.0},
         "faults": [
             {"kind": "flatline", "at": "20min", "duration": "10min"},
             {"kind": "temp_short", "at": "50min", "duration": "5min"},
             {"kind": "temp_open", "at": "60min", "duration": "5min"},
             {"kind": "coated", "at": "70min", "duration": "30min", "response": "3min",
              "slope_loss_pct": 20},
         ]},
        {"id": "w-2", "stream": "warm", "interval": "2s", "temperature_sensor": {"output": "ohms"},
         "faults": [
             {"kind": "dropout", "at": "10min", "duration": "3min"},
             {"kind": "temp_open", "at": "30min", "duration": "5min"},
             {"kind": "temp_short", "at": "40min", "duration": "5min"},
         ]},
        {"id": "c-1", "stream": "cool", "electrode": {"offset_mv": -5.0, "noise_mv": 0.3},
         "temperature_sensor": {"output": "none"},
         "faults": [
             {"kind": "garbled", "at": "5min", "duration": "10min", "fraction": 0.5},
             {"kind": "duplicate", "at": "20min", "duration": "10min", "fraction": 0.3},
             {"kind": "out_of_order", "at": "35min", "duration": "5min", "fraction": 0.3,
              "delay": "3s"},
             {"kind": "broken_membrane", "at": "45min", "residual_mv": 2.0},
         ]},
    ]
    return scenario_from_mapping(data, "<faults>")


@pytest.fixture(scope="module")
def run():
    sim = Simulation(_scenario(), 11, duration_ms=2 * 3_600_000)
    chunks = list(sim.chunks())
    readings = [c.readings for c in chunks]
    truth = [c.truth() for c in chunks]
    from probeflow.simulate.generator import Readings, Truth

    def cat(items, cls):
        first = items[0]
        fields = [f for f in cls.__slots__ if f != "probes"]
        cols = {f: (None if getattr(first, f) is None else
                    np.concatenate([getattr(x, f) for x in items])) for f in fields}
        return cls(probes=first.probes, **cols)

    return sim, cat(readings, Readings), cat(truth, Truth)


def _probe(r, probe):
    return r.code == r.probes.index(probe)


def _window(ts, a_min, b_min):
    return (ts >= START + a_min * MIN) & (ts < START + b_min * MIN)


def test_flatline_spread_is_zero_in_window_only(run) -> None:
    _, r, _ = run
    m = _probe(r, "w-1")
    ts, mv, temp = r.ts[m], r.mv[m], r.temp_c[m]
    w = _window(ts, 20, 30)
    assert w.sum() == 600
    assert np.ptp(mv[w]) == 0.0 and np.ptp(temp[w]) == 0.0
    # the frozen value is the last live one
    before = np.flatnonzero(w)[0] - 1
    assert mv[w][0] == mv[before]
    # outside the window the noise (0.2 mV) keeps consecutive values moving
    live = _window(ts, 0, 20)
    assert np.std(np.diff(mv[live])) > 0.2


def test_broken_membrane_sits_near_zero_point_and_ignores_ph(run) -> None:
    _, r, t = run
    m, tm = _probe(r, "c-1"), _probe(t, "c-1")
    w = _window(r.ts[m], 46, 120)
    near = r.mv[m][w] - (-5.0 + 2.0)                   # offset + residual
    assert np.max(np.abs(near)) < 5 * 0.3 + 0.01
    # the process pH stepped by -1 at 50 min: a live glass would move by ~56 mV
    before = _window(r.ts[m], 46, 50)
    after = _window(r.ts[m], 52, 56)
    assert abs(r.mv[m][after].mean() - r.mv[m][before].mean()) < 0.1
    tw = _window(t.ts[tm], 46, 120)
    assert np.all(t.slope_pct[tm][tw] == 0.0)
    assert np.all(t.fault_mask[tm][tw] & FAULT_BITS["broken_membrane"])


def test_dropout_leaves_a_gap_of_the_right_length(run) -> None:
    _, r, t = run
    ts = r.ts[_probe(r, "w-2")]
    gaps = np.diff(ts)
    assert np.max(gaps) == pytest.approx(3 * MIN + 2.0)         # 3 min plus one 2 s interval
    i = int(np.argmax(gaps))
    assert ts[i] == START + 10 * MIN - 2.0 and ts[i + 1] == START + 13 * MIN
    assert np.sum(gaps > 2.0) == 1
    # the truth keeps the samples the transport lost, marked
    tm = _probe(t, "w-2")
    lost = _window(t.ts[tm], 10, 13)
    assert lost.sum() == 90 and np.all(t.fault_mask[tm][lost] & FAULT_BITS["dropout"])


def test_temperature_element_open_and_short(run) -> None:
    _, r, _ = run
    w1, w2 = _probe(r, "w-1"), _probe(r, "w-2")
    # w-2 reports ohms: open reads huge, short reads near zero, healthy ~117 Ω at ~45 °C
    ohms, ts = r.ohms[w2], r.ts[w2]
    assert np.all(ohms[_window(ts, 30, 35)] == OPEN_ELEMENT_OHMS)
    assert np.all(ohms[_window(ts, 40, 45)] == SHORTED_ELEMENT_OHMS)
    healthy = ohms[_window(ts, 0, 10)]
    assert np.all((healthy > 110) & (healthy < 125))
    assert np.all(np.isnan(r.temp_c[w2]))
    # w-1 reports °C: a short reads absurdly cold, an open element reports nothing
    temp, ts = r.temp_c[w1], r.ts[w1]
    assert np.all(temp[_window(ts, 50, 55)] < -200)
    assert np.all(np.isnan(temp[_window(ts, 60, 65)]))
    ok = np.concatenate([temp[_window(ts, 30, 50)], temp[_window(ts, 65, 120)]])
    assert np.all((ok > 35) & (ok < 55))


def test_coated_electrode_is_slow_and_loses_slope(run) -> None:
    _, _, t = run
    for probe, tau_s in (("w-1", 180.0), ("w-2", 5.0)):
        tm = _probe(t, probe)
        ts, seen, ph = t.ts[tm], t.seen_ph[tm], t.ph[tm]
        # pH stepped by +1 at 80 min; three minutes later a first-order lag has covered
        # 1 - exp(-180 s / tau) of the step
        i0 = np.searchsorted(ts, START + 80 * MIN)
        i3 = np.searchsorted(ts, START + 83 * MIN)
        covered = (seen[i3] - seen[i0 - 1]) / (ph[i3] - ph[i0 - 1])
        assert covered == pytest.approx(1 - np.exp(-180.0 / tau_s), abs=0.08)
    tm = _probe(t, "w-1")
    w = _window(t.ts[tm], 70, 100)
    slope = t.slope_pct[tm][w]
    assert slope[0] == pytest.approx(97.0) and slope[-1] == pytest.approx(77.0, abs=0.02)
    assert np.all(np.diff(slope) < 0)
    assert t.slope_pct[tm][_window(t.ts[tm], 100, 120)][0] == pytest.approx(97.0)


def test_duplicates_and_late_readings_only_in_their_windows(run) -> None:
    _, r, t = run
    m = _probe(r, "c-1")
    ts = r.ts[m]
    same = np.flatnonzero(np.diff(ts) == 0)
    dup_ts = ts[same]
    assert np.all(_window(dup_ts, 20, 30))
    assert 0.2 * 600 < len(dup_ts) < 0.4 * 600
    assert np.array_equal(r.mv[m][same], r.mv[m][same + 1])   # an exact copy
    back = np.flatnonzero(np.diff(ts) < 0)
    assert len(back) > 0.15 * 300
    assert np.all(_window(ts[back], 35, 40.1))
    assert np.all(ts[back] - ts[back + 1] <= 3.0)
    # every sample of c-1 outside the drop-outs is delivered, late or not
    assert np.array_equal(np.unique(ts), t.ts[_probe(t, "c-1")])


def test_garbled_lines_fail_to_parse_only_in_their_window(run, tmp_path: Path) -> None:
    sim = Simulation(_scenario(), 11, duration_ms=int(20 * MIN * 1000))
    out = JsonLinesOutput(tmp_path / "r.jsonl")
    run_simulation(sim, [out])
    out.close()
    lines = (tmp_path / "r.jsonl").read_bytes().split(b"\n")[:-1]
    good, bad_ts = 0, []
    c1_ts = []
    for line in lines:
        try:
            rec = orjson.loads(line)
        except orjson.JSONDecodeError:
            bad_ts.append(len(c1_ts))
            c1_ts.append(None)
            continue
        good += 1
        if rec["probe"] == "c-1":
            c1_ts.append(rec["ts"])
    assert 0.4 * 600 < len(bad_ts) < 0.6 * 600
    # the unparseable lines sit between c-1's readings of 5 and 15 minutes
    known = [x for x in c1_ts if x is not None]
    missing = sorted(set(START + np.arange(1200.0)) - set(known))
    assert len(missing) == len(bad_ts)
    assert min(missing) >= START + 5 * MIN and max(missing) < START + 15 * MIN


def test_truth_fault_mask_matches_the_schedule(run) -> None:
    sim, _, t = run
    schedule = sim.scenario.fault_schedule(sim.start)
    assert len(schedule) == 11
    for f in schedule:
        tm = _probe(t, f["probe"])
        end = f["end"] if f["end"] is not None else np.inf
        inside = (t.ts[tm] >= f["start"]) & (t.ts[tm] < end)
        has = (t.fault_mask[tm] & FAULT_BITS[f["kind"]]) != 0
        assert inside.any() and np.array_equal(inside, has), f
