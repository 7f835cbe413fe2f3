"""A stop signal must never deadlock the service.

Python runs a signal handler on the main thread between two bytecodes, so the
handler can interrupt the main thread while it holds a lock.  If the handler
then takes that same lock (as ``threading.Event.set`` does while the main
thread sits in ``Event.wait``), the process hangs for good and ignores every
later SIGTERM: seen once in CI as a service that had to be killed.  The child
sends SIGTERM at every function call of the main loop, which hits every such
window (the old Event-based stop hung here every time).  The timeout below only
keeps a hung child from hanging the suite; it is not a speed check.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

CHILD = Path(__file__).with_name("signal_storm_child.py")


def test_sigterm_at_every_call_of_the_main_loop_still_stops_the_service(config_file, cli_env, tmp_path):
    db = tmp_path / "storm.sqlite"
    config = config_file(f"stores:\n  - type: sqlite\n    path: {db}\n")
    proc = subprocess.Popen([sys.executable, str(CHILD), str(config), "5000"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=cli_env)
    try:
        out, err = proc.communicate(timeout=60)
    except subprocess.TimeoutExpired:
        proc.kill()
        out, err = proc.communicate()
        raise AssertionError("the service hung after SIGTERM (deadlock in the stop path)\n"
                             + err.decode(errors="replace")[-2000:]) from None
    assert proc.returncode == 0, err.decode(errors="replace")
    fields = dict(part.split("=") for part in out.decode().split())
    assert int(fields["signals"]) > 1 and fields["stopping"] == "True", out
    assert db.exists()   # the store was opened and closed by the same run
