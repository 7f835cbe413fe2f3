"""Operator actions on a saved rule-state file (the JSON ``Engine.state()`` writes).

Used by ``probeflow alarms`` and ``probeflow ack`` until the running service
offers its own local interface.  Acting on the file of a *running* service is
unsafe: the service rewrites the file and the action would be lost, so stop
the service first (or use its interface once it exists).
"""

from __future__ import annotations

import json
import os
import tempfile
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

from probeflow.errors import ProbeflowError
from probeflow.events import AlertEvent
from probeflow.rules.lifecycle import AlarmBook

__all__ = ["act_on_state_file", "read_alarms"]


def _load(path: Path) -> dict[str, Any]:
    try:
        with path.open(encoding="utf-8") as f:
            state = json.load(f)
    except FileNotFoundError as exc:
        raise ProbeflowError(f"rule state file {path} does not exist (has the service run yet?)") from exc
    except (OSError, json.JSONDecodeError) as exc:
        raise ProbeflowError(f"rule state file {path} cannot be read: {exc}") from exc
    if not isinstance(state, dict) or "alarms" not in state:
        raise ProbeflowError(f"{path} is not a probeflow rule state file")
    return state


def read_alarms(path: str | Path) -> AlarmBook:
    book = AlarmBook()
    book.restore(_load(Path(path))["alarms"])
    return book


def act_on_state_file(path: str | Path, action: Callable[[AlarmBook, float], list[AlertEvent]],
                      now: float | None = None) -> list[AlertEvent]:
    """Apply ``action(book, now)`` to the alarms in the file and write it back atomically."""
    p = Path(path)
    state = _load(p)
    book = AlarmBook()
    book.restore(state["alarms"])
    events = action(book, time.time() if now is None else now)
    state["alarms"] = book.state()
    fd, tmp = tempfile.mkstemp(dir=p.parent, prefix=p.name, suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as f:
            json.dump(state, f)
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, p)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return events
