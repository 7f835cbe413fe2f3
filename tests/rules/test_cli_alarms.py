"""probeflow alarms / ack on a saved rule-state file, run as real subprocesses."""

from __future__ import annotations

import json
import subprocess
import sys

from rules_support import batch_of

from probeflow.rules import build_rule_engine, parse_rules_config


def cli(*args):
    return subprocess.run([sys.executable, "-m", "probeflow", *args], capture_output=True, text=True, check=False)


def saved_state(tmp_path):
    eng = build_rule_engine(parse_rules_config({"bands": [{"id": "outfall", "probes": ["out-*"],
                                                           "high": 8.5, "low": 6.5}]}))
    eng.process(batch_of([("out-1", 0, 9.0), ("out-2", 0, 7.0), ("out-2", 5, 6.0), ("out-2", 9, 7.0)]))
    path = tmp_path / "rules-state.json"
    path.write_text(json.dumps(eng.state()))
    return path


def test_list_ack_shelve_and_maintenance(tmp_path):
    path = saved_state(tmp_path)
    out = cli("alarms", "--state", str(path), "--json")
    assert out.returncode == 0, out.stderr
    rows = {r["alarm_id"]: r["state"] for r in json.loads(out.stdout)}
    assert rows == {"outfall/out-1/high": "unack_active", "outfall/out-2/low": "unack_returned"}

    out = cli("ack", "outfall/out-1/high", "--state", str(path))
    assert out.returncode == 0, out.stderr
    rec = json.loads(out.stdout)
    assert (rec["kind"], rec["event"], rec["state"]) == ("alert", "ack", "ack_active")

    out = cli("ack", "outfall/out-2/low", "--state", str(path))
    assert json.loads(out.stdout)["state"] == "normal"

    text = cli("alarms", "--state", str(path)).stdout
    assert "outfall/out-1/high" in text and "ack_active" in text and "out-2" not in text

    out = cli("alarms", "--state", str(path), "--shelve", "outfall/out-1/high", "--minutes", "30")
    assert json.loads(out.stdout)["state"] == "shelved"
    out = cli("alarms", "--state", str(path), "--unshelve", "outfall/out-1/high")
    assert json.loads(out.stdout)["state"] == "unack_active"    # still active: annunciated again

    out = cli("alarms", "--state", str(path), "--maintenance", "out-1", "on")
    assert json.loads(out.stdout)["event"] == "suppress"
    assert "in maintenance: out-1" in cli("alarms", "--state", str(path)).stdout


def test_errors_are_clear(tmp_path):
    path = saved_state(tmp_path)
    out = cli("ack", "outfall/out-9/high", "--state", str(path))
    assert out.returncode == 1 and "no alarm with id" in out.stderr
    out = cli("alarms", "--state", str(tmp_path / "missing.json"))
    assert out.returncode == 1 and "does not exist" in out.stderr
    out = cli("alarms", "--state", str(path), "--shelve", "outfall/out-1/high")
    assert out.returncode == 1 and "--minutes" in out.stderr
