"""Drive a simulation into outputs, paced on the wall clock."""

from __future__ import annotations

import json
import threading
from collections.abc import Callable, Sequence

from probeflow.simulate.generator import Simulation
from probeflow.simulate.outputs.base import Output
from probeflow.simulate.outputs.files import TruthOutput
from probeflow.simulate.pacing import Pacer

__all__ = ["RunSummary", "file_metadata", "run_simulation"]


class RunSummary:
    """What a run produced."""

    def __init__(self) -> None:
        self.generated = 0     # samples generated (truth rows)
        self.delivered = 0     # readings handed to outputs (duplicates counted twice)
        self.end_ts = 0.0
        self.stopped = False


def file_metadata(sim: Simulation) -> dict[str, str]:
    """Key-value metadata for Parquet files: scenario, seed, start, duration, fault schedule."""
    sc = sim.scenario
    return {
        "probeflow.simulator": "1",
        "site": sc.site,
        "site_id": sc.site_id,
        "seed": str(sim.seed),
        "start": repr(sim.start),
        "duration_ms": "" if sim.duration_ms is None else str(sim.duration_ms),
        "fault_schedule": json.dumps(sc.fault_schedule(sim.start), sort_keys=True),
    }


def run_simulation(sim: Simulation, outputs: Sequence[Output], *, speed: float = 0.0,
                   truth: TruthOutput | None = None, stop: threading.Event | None = None,
                   progress: Callable[[int, float], None] | None = None,
                   pacer: Pacer | None = None) -> RunSummary:
    """Generate the whole run (or until ``stop``) into ``outputs``; outputs are not closed here.

    ``progress(readings, end_ts)`` is called after each chunk.  ``pacer`` replaces the
    one built from ``speed`` and ``stop`` (tests pass one with a fake clock).
    """
    pacer = pacer or Pacer(speed, sim.start, stop)
    summary = RunSummary()
    for chunk in sim.chunks():
        if truth is not None:
            truth.write(chunk.truth())
        summary.generated += chunk.generated
        readings = chunk.readings
        for piece in pacer.pieces(readings):
            for out in outputs:
                out.write(piece)
            summary.delivered += len(piece)
        summary.end_ts = chunk.end_ts
        if progress is not None:
            progress(len(readings), chunk.end_ts)
        if pacer.stop.is_set():
            summary.stopped = True
            break
    return summary
