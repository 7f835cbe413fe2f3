"""docs/README-tour.md says which alarms the demo raises and when; a replay of the demo agrees.

The demo scenario (simulators/scenarios/larkmoor-dairy.yaml, seed 7, as in configs/demo.yaml) is
simulated and replayed through the demo's own rules into a real SQLite store; the tour's table
must list exactly the alarm ids raised, each at its minute (to 0.1 min, the table's precision).
"""

from __future__ import annotations

import re
import sqlite3
from datetime import UTC
from pathlib import Path

import yaml

from tests.views.conftest import REPO, run_cli

TOUR = REPO / "docs" / "README-tour.md"
DEMO_CONFIG = REPO / "configs" / "demo.yaml"


def tour_table() -> list[tuple[float, str]]:
    rows = re.findall(r"^\| ([\d.]+) \| `([^`]+/[^`]+/[^`]+)` \|", TOUR.read_text(encoding="utf-8"),
                      flags=re.MULTILINE)
    return [(float(m), a) for m, a in rows]


def test_tour_lists_the_alarms_the_demo_raises(tmp_path: Path) -> None:
    demo = yaml.safe_load(DEMO_CONFIG.read_text(encoding="utf-8"))
    sim = demo["collectors"][0]
    scenario = REPO / sim["scenario"]
    recording = tmp_path / "demo.jsonl"
    made = run_cli("simulate", "--scenario", str(scenario), "--out", str(recording), "--speed", "0",
                   "--seed", str(sim["seed"]), "--no-progress")
    assert made.returncode == 0, made.stderr
    db = tmp_path / "demo.sqlite"
    demo["stores"] = [{"type": "sqlite", "path": str(db)}]
    demo.pop("collectors")
    config = tmp_path / "demo.yaml"
    config.write_text(yaml.safe_dump(demo), encoding="utf-8")
    replayed = run_cli("replay", str(recording), "--config", str(config), "--speed", "0")
    assert replayed.returncode == 0, replayed.stderr

    start_at = yaml.safe_load(scenario.read_text(encoding="utf-8"))["start"]
    if start_at.tzinfo is None:  # PyYAML gives naive UTC datetimes for "...Z" timestamps
        start_at = start_at.replace(tzinfo=UTC)
    start = start_at.timestamp()
    con = sqlite3.connect(db)
    # first raise of each alarm, in minutes from the scenario's start
    raised = con.execute("SELECT alarm_id, MIN(ts) FROM alerts WHERE event = 'raise' "
                         "GROUP BY alarm_id ORDER BY MIN(ts), alarm_id").fetchall()
    con.close()
    table = tour_table()
    assert len(table) >= 5
    assert sorted(a for _, a in table) == sorted(a for a, _ in raised)
    first = {a: (ts - start) / 60.0 for a, ts in raised}
    for minute, alarm in table:
        assert abs(first[alarm] - minute) <= 0.051, (alarm, first[alarm], minute)
