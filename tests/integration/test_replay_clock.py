"""Replaying an old recording through ``probeflow run``: time-based rules follow the
recording's clock, so an old recording raises no stale alarm on every probe, while
a real gap inside the recording still raises one at the right recorded time.
"""

from __future__ import annotations

import json
import math

from .conftest import Site

START = 1_748_736_000.0        # 2025-06-01T00:00:00Z, long before the test runs
STEP_S = 10.0
DURATION_S = 2400.0
GAP = (1000.0, 1300.0)         # tank-b is silent in this part of the recording [s from START]
STALE_AFTER_S = 60.0


def write_recording(path) -> int:
    rows = []
    for i in range(int(DURATION_S / STEP_S)):
        t = i * STEP_S
        mv = 5.0 * math.sin(i / 3.0)   # varying, so flatline/noise stay quiet
        rows.append({"probe": "tank-a", "ts": START + t, "mv": mv, "temp_c": 21.0})
        if not GAP[0] < t < GAP[1]:
            rows.append({"probe": "tank-b", "ts": START + t, "mv": mv, "temp_c": 21.0})
    path.write_text("".join(json.dumps(r) + "\n" for r in rows))
    return len(rows)


def test_run_over_an_old_recording_uses_the_recording_clock(make_site):
    # speed 600: 40 recorded minutes take about 4 s, so the service ticks several times
    site: Site = make_site(collectors="  - type: file\n    path: recording.jsonl\n    speed: 600")
    site.config.write_text(site.config.read_text().replace(
        "rules:\n", f"rules:\n  diagnostics:\n    stale: {{after_s: {STALE_AFTER_S:g}}}\n"
                    "    flatline: {enabled: false}\n    noise: {enabled: false}\n"))
    count = write_recording(site.dir / "recording.jsonl")
    done = site.cli("run", "--config", str(site.config))
    assert done.returncode == 0, done.stderr
    assert len(site.readings()) == count

    stale = [a for a in site.alerts() if a["alarm_id"].endswith("/stale")]
    assert {a["alarm_id"].split("/")[1] for a in stale} == {"tank-b"}, stale
    raised = [a for a in stale if a["event"] == "raise"]
    cleared = [a for a in stale if a["event"] == "clear"]
    assert len(raised) == 1 and len(cleared) == 1
    last_before_gap = START + math.floor(GAP[0] / STEP_S) * STEP_S
    first_after_gap = START + math.ceil(GAP[1] / STEP_S) * STEP_S
    assert last_before_gap + STALE_AFTER_S <= raised[0]["ts"] < first_after_gap
    assert cleared[0]["ts"] == first_after_gap
    assert "tick_failed" not in done.stderr
