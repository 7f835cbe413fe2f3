"""``probeflow status --once`` on a store with known contents, run as a real subprocess.

Check values are the store's own contents (written by the fixture) rounded as
displayed: pH and neutral pH to 0.01, temperature to 0.1 °C, slope to 0.1 %,
offset to 0.1 mV.  Neutral pH comes from the iapws package (IAPWS R11-07 via
iapws._iapws._Kw), not from probeflow.
"""

from __future__ import annotations

import os
import re
import select
import signal
import subprocess
import sys
import time
from datetime import UTC, datetime

import pytest

from tests.views.conftest import REPO, KnownStore, neutral_ph_reference


def probe_block(output: str, probe: str) -> tuple[list[str], list[str]]:
    """The table cells of ``probe``'s line and the indented lines below it."""
    lines = output.splitlines()
    for i, line in enumerate(lines):
        if line.startswith(probe + " "):
            below = []
            for extra in lines[i + 1:]:
                if not extra.startswith("    "):
                    break
                below.append(extra.strip())
            return re.split(r"\s{2,}", line.strip()), below
    raise AssertionError(f"no line for {probe} in:\n{output}")


def test_status_once_prints_each_probes_values(known_store: KnownStore, cli) -> None:
    result = cli("status", "--config", str(known_store.config), "--once")
    assert result.returncode == 0, result.stderr
    out = result.stdout

    cells, below = probe_block(out, "tank-a")
    # newest reading: pH 7.1234 at 25.04 °C (written by the fixture)
    neutral_a = neutral_ph_reference(25.04)
    assert cells[1:6] == ["7.12", "25.0", f"{neutral_a:.2f}", f"{7.1234 - neutral_a:+.2f}", "good"]
    # calibration: the accepted one of 3 days ago, not the later rejected attempt
    assert cells[7:10] == ["3 d ago", "97.3", "-4.2"]
    # grab sample: online 7.12 - lab 7.05 = +0.07 pH, two hours ago
    assert cells[10] == "+0.07 (2.0 h ago)"
    assert any(b.startswith("RETURNED unacknowledged: tank-ph/low") for b in below), below
    assert not any("tank-ph/high" in b for b in below), "an alarm back to normal is not shown"
    assert any("REJECTED 1.0 d ago" in b or "REJECTED 24.0 h ago" in b for b in below), below

    cells, below = probe_block(out, "tank-b")
    neutral_b = neutral_ph_reference(15.96)
    assert cells[1:6] == ["8.68", "16.0", f"{neutral_b:.2f}", f"{8.6789 - neutral_b:+.2f}",
                          "maintenance"]
    assert cells[7:10] == ["from config", "98.2", "+1.5"]
    assert cells[10] == "-"
    alarms = [b for b in below if b.startswith(("ACTIVE", "RETURNED"))]
    assert len(alarms) == 2, below
    assert any(b.startswith("ACTIVE unacknowledged: tank-ph/high [medium]") for b in alarms)
    assert any(b.startswith("ACTIVE acknowledged: diagnostics/noise") for b in alarms)
    # an acknowledged alarm shows when it was raised (500 s before now), not when it was acked
    raised = datetime.fromtimestamp(known_store.now - 500, UTC).strftime("%Y-%m-%d %H:%M:%S UTC")
    assert any(f"diagnostics/noise [medium] raised {raised}" in b for b in alarms), alarms

    cells, below = probe_block(out, "tank-c")
    assert cells[1:3] == ["-", "-"] and "no readings" in cells
    assert below == []
    assert "2 alarm(s) active" in out
    assert "not a safety system" in out


def test_status_names_a_missing_store_clearly(tmp_path, cli) -> None:
    config = tmp_path / "c.yaml"
    config.write_text(f"probes: [{{id: p1}}]\nstores:\n  - type: sqlite\n    path: {tmp_path}/none.sqlite\n")
    result = cli("status", "--config", str(config), "--once")
    assert result.returncode == 1
    assert "none.sqlite does not exist yet" in result.stderr


@pytest.mark.skipif(sys.platform != "linux", reason="uses a Linux pseudo-terminal")
def test_status_refreshes_in_place_on_a_terminal(known_store: KnownStore) -> None:
    """On a real pseudo-terminal the view clears the screen and redraws until Ctrl-C."""
    master, slave = os.openpty()
    env = dict(os.environ, PYTHONPATH=str(REPO))
    proc = subprocess.Popen([sys.executable, "-m", "probeflow", "status", "--config",
                             str(known_store.config), "--every", "0.2"],
                            stdin=slave, stdout=slave, stderr=slave, cwd=REPO, env=env,
                            # A test run started in the background by a shell without job
                            # control ignores SIGINT, and a child inherits that: give the
                            # view the terminal's default, as a user's shell does.
                            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    os.close(slave)
    seen = b""
    deadline = time.monotonic() + 60
    try:
        while seen.count(b"\x1b[H\x1b[2J") < 2 and time.monotonic() < deadline:
            seen += os.read(master, 65536)
        proc.send_signal(signal.SIGINT)
        # Keep reading, as a terminal does: a full pseudo-terminal buffer would
        # block the view's last writes and keep it from exiting.
        end = time.monotonic() + 30
        while proc.poll() is None and time.monotonic() < end:
            ready, _, _ = select.select([master], [], [], 0.1)
            if ready:
                try:
                    seen += os.read(master, 65536)
                except OSError:   # EIO: the view closed its side
                    break
        assert proc.wait(timeout=30) == 0
    finally:
        if proc.poll() is None:
            proc.kill()
        os.close(master)
    assert seen.count(b"\x1b[H\x1b[2J") >= 2
    assert b"tank-a" in seen and b"refreshing every 0.2 s" in seen
