"""Child process for test_signal_stop.py: a service on the main thread that is
sent SIGTERM at (nearly) every Python function call its main thread makes.

Raising the signal from a profile hook makes the handler run at the next
bytecode boundary, i.e. inside whatever the main thread is doing, including
the moments it holds a lock of its own (the service's wait for a stop).  A
handler that takes such a lock deadlocks here at once; one that only sets a
flag lets the service stop.  Prints how many signals were raised, then exits 0.

usage: python signal_storm_child.py CONFIG MAX_SIGNALS
"""

from __future__ import annotations

import io
import signal
import sys
from types import FrameType
from typing import Any

from probeflow.cli.common import stop_on_signals
from probeflow.config import load_config
from probeflow.service.log import Log
from probeflow.service.pipeline import build_service


def main(config_path: str, max_signals: int) -> None:
    service = build_service(load_config(config_path), log=Log(io.StringIO()))
    raised = 0

    def storm(_frame: FrameType, event: str, _arg: Any) -> None:
        nonlocal raised
        if event == "call" and raised < max_signals:
            raised += 1
            signal.raise_signal(signal.SIGTERM)

    with stop_on_signals(service):
        service.start()
        sys.setprofile(storm)
        try:
            stats = service.run()
        finally:
            sys.setprofile(None)
    print(f"signals={raised} stopping={service.stopping} readings={stats.readings_converted}", flush=True)


if __name__ == "__main__":
    main(sys.argv[1], int(sys.argv[2]))
