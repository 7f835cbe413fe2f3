"""The HTML report on a simulated day, made with the real simulator, replay and report commands.

The summary figures in the HTML are recomputed here independently, straight
from the store's rows with plain SQL and pandas:

* time within band: each good reading holds until the next reading (the last
  until the end of the period), at most 300 s (the stale default; common
  practice, no source); share of that time within the band's inner limits;
* alarms by rule: raise events in the period;
* chattering: raises no more than 60 s after the previous clear of the same
  alarm (common practice, no source), found with pandas.merge_asof.
"""

from __future__ import annotations

import base64
import re
import sqlite3
from collections.abc import Iterator
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from probeflow.calibration.acceptance import Verdict
from probeflow.calibration.model import Calibration
from probeflow.calibration.store import CalibrationStore
from tests.views.conftest import REPO, run_cli

SCENARIO = REPO / "simulators" / "scenarios" / "glenvarrow-hatchery.yaml"
START = datetime(2026, 4, 13, tzinfo=UTC).timestamp()   # the scenario's start
END = START + 86400.0
PROBES = ["intake-a", "intake-b", "raceway-1", "raceway-2", "brood-ph"]
BANDS = {  # rule -> (probe glob prefix, quantity, low, high), as in DAY_CONFIG below
    "raceway-ph": ("raceway-", "ph", 7.0, 7.35),
    "intake-neutral": ("intake-", "neutral_dev", 0.25, 0.5),
    "brood-temp": ("brood-", "temp_c", None, 8.2),
}

DAY_CONFIG = """\
site: Glenvarrow Trout Hatchery
probes:
  - {{id: intake-a, calibration: {{offset_mv: 3.0, slope_pct: 98.5}}}}
  - {{id: intake-b, calibration: {{offset_mv: -1.0, slope_pct: 97.0}}}}
  - {{id: raceway-1, calibration: {{offset_mv: 1.0, slope_pct: 99.0}}}}
  - {{id: raceway-2, calibration: {{offset_mv: 2.5, slope_pct: 98.0}}}}
  - {{id: brood-ph, calibration: {{offset_mv: -4.0, slope_pct: 96.5}}, rtd: {{r0: 100}}}}
stores:
  - type: sqlite
    path: {db}
rules:
  bands:
    - id: raceway-ph
      probes: ["raceway-*"]
      quantity: ph
      low: 7.0
      high: 7.35
    - id: intake-neutral
      probes: ["intake-*"]
      quantity: neutral_dev
      low: 0.25
      high: 0.5
      deadband: 0.02
      on_delay_s: 60
    - id: brood-temp
      probes: [brood-ph]
      quantity: temp_c
      high: 8.2
      deadband: 0.05
  diagnostics: {{}}
"""


@dataclass(frozen=True)
class Day:
    db: Path
    html: str
    png_dir: Path


def _add_calibrations_and_grabs(db: Path) -> None:
    """Calibration history and grab samples, as a technician would have entered them."""
    with CalibrationStore(db) as cal:
        for days_before, slope in ((60, 99.6), (30, 99.3)):
            cal.record_calibration("raceway-1", Calibration(1.2, slope), Verdict(True),
                                   ts=START - days_before * 86400.0, who="test")
        cal.record_calibration("raceway-1", Calibration(9.0, 88.0), Verdict(False, ("slope low",)),
                               ts=START + 5 * 3600.0, who="test")
        cal.record_calibration("raceway-1", Calibration(1.0, 99.0), Verdict(True),
                               ts=START + 6 * 3600.0, who="test")
        con = sqlite3.connect(db)
        online = con.execute("SELECT ph FROM readings WHERE probe = 'intake-a' AND ts <= ? "
                             "ORDER BY ts DESC LIMIT 1", (START + 10 * 3600.0,)).fetchone()[0]
        con.close()
        cal.record_grab("intake-a", START + 10 * 3600.0, 7.55, online_ph=online)


@pytest.fixture(scope="module")
def day(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Day]:
    work = tmp_path_factory.mktemp("report_day")
    recording = work / "day.jsonl"
    made = run_cli("simulate", "--scenario", str(SCENARIO), "--out", str(recording),
                   "--duration", "24h", "--speed", "0", "--seed", "1", "--no-progress")
    assert made.returncode == 0, made.stderr
    db = work / "day.sqlite"
    config = work / "day.yaml"
    config.write_text(DAY_CONFIG.format(db=db), encoding="utf-8")
    replayed = run_cli("replay", str(recording), "--config", str(config), "--speed", "0")
    assert replayed.returncode == 0, replayed.stderr
    _add_calibrations_and_grabs(db)
    out = work / "report.html"
    png_dir = work / "png"
    made = run_cli("report", "--config", str(config), "--since", "2026-04-13T00:00:00Z",
                   "--until", "2026-04-14T00:00:00Z", "--out", str(out), "--png", str(png_dir))
    assert made.returncode == 0, made.stderr
    yield Day(db=db, html=out.read_text(encoding="utf-8"), png_dir=png_dir)


def figures(html: str, name: str) -> dict[tuple[str, str], str]:
    """(probe, rule) -> cell text of every ``data-figure=name`` cell."""
    pattern = (rf"data-figure='{name}' data-probe='([^']+)' data-rule='([^']+)'>([^<]*)<")
    return {(p, r): v for p, r, v in re.findall(pattern, html)}


def test_report_embeds_one_plot_per_probe(day: Day) -> None:
    uris = re.findall(r"src='data:image/png;base64,([A-Za-z0-9+/=]+)'", day.html)
    assert len(uris) == len(PROBES)
    pngs = [base64.b64decode(u) for u in uris]
    assert all(p.startswith(b"\x89PNG\r\n\x1a\n") for p in pngs)
    # the --png files are the same pictures
    assert sorted(p.name for p in day.png_dir.iterdir()) == sorted(f"{p}.png" for p in PROBES)
    assert {(day.png_dir / f"{p}.png").read_bytes() for p in PROBES} == set(pngs)
    for probe in PROBES:
        assert f"Glenvarrow Trout Hatchery: probe {probe}</h2>" in day.html
    assert day.html.count("they are not a safety system") == 2  # top and bottom of the page


def readings(con: sqlite3.Connection, probe: str) -> pd.DataFrame:
    return pd.read_sql_query("SELECT ts, ph, neutral_dev, temp_c, quality FROM readings "
                             "WHERE probe = ? AND ts BETWEEN ? AND ? ORDER BY ts", con,
                             params=(probe, START, END))


def independent_time_in_band(frame: pd.DataFrame, quantity: str, low: float | None,
                             high: float | None) -> float:
    held = (frame["ts"].shift(-1).fillna(END) - frame["ts"]).clip(upper=300.0)
    value = frame[quantity]
    usable = (frame["quality"] == "good") & value.notna()
    inside = usable & (value >= (low if low is not None else -np.inf)) & \
        (value <= (high if high is not None else np.inf))
    return 100.0 * held[inside].sum() / held[usable].sum()


def test_time_in_band_equals_the_stores_rows(day: Day) -> None:
    shown = figures(day.html, "time-in-band")
    con = sqlite3.connect(day.db)
    expected = {}
    for probe in PROBES:
        frame = readings(con, probe)
        for rule, (prefix, quantity, low, high) in BANDS.items():
            if probe.startswith(prefix):
                expected[(probe, rule)] = independent_time_in_band(frame, quantity, low, high)
    con.close()
    assert set(shown) == set(expected)
    for key, value in expected.items():
        if np.isnan(value):
            assert shown[key] == "no data", key
        else:
            assert float(shown[key]) == pytest.approx(value, abs=0.005), key
    # the day is not trivial: some bands are left for part of the day
    assert any(0.0 < v < 100.0 for v in expected.values() if not np.isnan(v))


def test_alarm_and_chattering_counts_equal_the_stores_rows(day: Day) -> None:
    con = sqlite3.connect(day.db)
    raised = con.execute("SELECT probe, rule, COUNT(*) FROM alerts WHERE event = 'raise' "
                         "AND ts BETWEEN ? AND ? GROUP BY probe, rule", (START, END)).fetchall()
    events = pd.read_sql_query("SELECT id, alarm_id, probe, rule, event, ts FROM alerts "
                               "WHERE ts <= ? ORDER BY ts, id", con, params=(END,))
    con.close()
    assert {(p, r): str(n) for p, r, n in raised} == figures(day.html, "alarms")

    raises = events[(events["event"] == "raise") & (events["ts"] >= START)].sort_values("ts")
    clears = events[events["event"] == "clear"].sort_values("ts")
    paired = pd.merge_asof(raises, clears[["alarm_id", "ts"]].rename(columns={"ts": "clear_ts"}),
                           left_on="ts", right_on="clear_ts", by="alarm_id",
                           direction="backward", allow_exact_matches=True)
    chatter = paired[(paired["ts"] - paired["clear_ts"]) <= 60.0]
    expected = {(p, r): str(n) for (p, r), n in chatter.groupby(["probe", "rule"]).size().items()}
    shown = {k: v for k, v in figures(day.html, "chattering").items() if v != "0"}
    assert shown == expected
    assert sum(int(v) for v in expected.values()) > 0, "the simulated day should chatter"
    for probe in PROBES:
        total = sum(int(v) for (p, _), v in expected.items() if p == probe)
        assert f"data-figure='chattering-total' data-probe='{probe}'>{total}<" in day.html


def test_report_for_one_probe_and_calibration_health(day: Day, tmp_path: Path) -> None:
    config = day.db.parent / "day.yaml"
    out = tmp_path / "one.html"
    made = run_cli("report", "--config", str(config), "--since", "24h", "--until",
                   "2026-04-14T00:00:00Z", "--probe", "raceway-1", "--out", str(out))
    assert made.returncode == 0, made.stderr
    html = out.read_text(encoding="utf-8")
    assert html.count("data:image/png;base64,") == 1
    # the accepted calibration at 06:00 is the last one; the rejected attempt came before it
    assert "slope 99.0 %, offset +1.0 mV, 18.0 h old (buffer, 2026-04-13 06:00 UTC)" in html
    assert "<th>calibrations in this period</th><td>2</td>" in html
    # slope forecast: the least-squares line through the three accepted calibrations, from
    # numpy.polyfit as the reference, reaches the 90 % acceptance limit (common practice, no
    # source) on this date
    t = np.array([START - 60 * 86400.0, START - 30 * 86400.0, START + 6 * 3600.0])
    b, a = np.polyfit(t, np.array([99.6, 99.3, 99.0]), 1)
    when = datetime.fromtimestamp((90.0 - a) / b, UTC).strftime("%Y-%m-%d")
    assert f"slope reaches 90 % around {when}" in html


def test_report_refuses_an_unknown_probe(day: Day, tmp_path: Path) -> None:
    made = run_cli("report", "--config", str(day.db.parent / "day.yaml"), "--since", "24h",
                   "--probe", "no-such-probe", "--out", str(tmp_path / "x.html"))
    assert made.returncode == 1
    assert "no-such-probe: not in the config nor in the store" in made.stderr
