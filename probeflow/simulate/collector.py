"""The simulator as an ordinary collector: the service's demo source, in-process.

YAML section::

    collectors:
      - type: simulator
        scenario: simulators/scenarios/larkmoor-dairy.yaml
        speed: 1          # 0: as fast as possible, 1: real time, 60: a minute per second
        duration: 2h      # default: the scenario's duration (none there: run until stopped)
        seed: 5
        start: 2026-03-02T06:00:00Z   # optional; default: the scenario's start when
                                      # speed is 0, the present moment otherwise

Readings go to the pipeline as ReadingBatch columns; a garbled reading is
handed to quarantine with its corrupted bytes, as a real collector would do
with a line it cannot parse.
"""

from __future__ import annotations

import threading
import time
from typing import Any, ClassVar, Literal

from pydantic import Field, field_validator

from probeflow.batch import ReadingBatch
from probeflow.collectors.base import CollectorConfigBase, CollectorContext
from probeflow.simulate.durations import parse_duration_ms, parse_instant
from probeflow.simulate.encode import encode_lines
from probeflow.simulate.generator import Readings, Simulation
from probeflow.simulate.pacing import Pacer
from probeflow.simulate.scenario import load_scenario

__all__ = ["SimulatorCollector"]


class SimulatorConfig(CollectorConfigBase):
    """The ``type: simulator`` collector section."""

    type: Literal["simulator"] = "simulator"
    scenario: str
    speed: float = Field(default=1.0, ge=0)
    duration: int | None = None       # ms, written as "2h", "90min"; None: the scenario's
    seed: int = 0
    start: float | None = None        # epoch s; written as RFC 3339

    @field_validator("duration", mode="before")
    @classmethod
    def _duration(cls, value: Any) -> Any:
        return None if value is None else parse_duration_ms(value)

    @field_validator("start", mode="before")
    @classmethod
    def _start(cls, value: Any) -> Any:
        return None if value is None else parse_instant(value)


def start_time(scenario_start: float, speed: float, start: float | None,
               duration_ms: int | None = None) -> float:
    """The run's first timestamp: ``start`` if given; else the scenario's start for a fast
    run (speed 0), the present second for a real-time one (speed 1), and for an
    accelerated one (speed > 1) the present second minus the run's duration, so
    that simulated time catches up with the clock at the end of the run and no
    reading is ever stamped in the future."""
    if start is not None:
        return start
    if speed == 0:
        return scenario_start
    now = float(int(time.time()))
    if speed > 1 and duration_ms:
        return now - duration_ms / 1000.0
    return now


class SimulatorCollector:
    """Runs a scenario on a background thread and emits its readings."""

    Config: ClassVar[type[SimulatorConfig]] = SimulatorConfig
    MAX_BATCH = 10_000

    def __init__(self, config: SimulatorConfig, context: CollectorContext) -> None:
        self.config = config
        self.context = context
        scenario = load_scenario(config.scenario)       # ConfigError names file and key
        duration_ms = scenario.duration if config.duration is None else config.duration
        start = start_time(scenario.start, config.speed, config.start, duration_ms)
        self.simulation = Simulation(scenario, config.seed, start=start, duration_ms=config.duration)
        self._thread: threading.Thread | None = None
        self._done = threading.Event()

    @property
    def done(self) -> bool:
        return self._done.is_set()

    @property
    def clock_pace(self) -> float:
        """Simulated time runs at ``speed`` (0: as fast as possible); time-based rules follow it."""
        return float(self.config.speed)

    def start(self) -> None:
        if self._thread is not None:
            return
        self.context.counters.connected = True
        self._thread = threading.Thread(target=self._run, name=f"simulator:{self.context.name}",
                                        daemon=True)
        self._thread.start()

    def stop(self, timeout: float = 5.0) -> None:
        self.context.stop_event.set()
        if self._thread is not None:
            self._thread.join(timeout)
        self.context.counters.connected = False

    def _run(self) -> None:
        stop = self.context.stop_event
        pacer = Pacer(self.config.speed, self.simulation.start, stop)
        try:
            for chunk in self.simulation.chunks():
                for piece in pacer.pieces(chunk.readings):
                    for i in range(0, len(piece), self.MAX_BATCH):
                        self._emit(piece.select(slice(i, i + self.MAX_BATCH)))
                if stop.is_set():
                    break
        except Exception as exc:  # noqa: BLE001 -- a collector never raises out of its thread
            self.context.counters.last_error = f"simulator stopped: {exc}"
            if self.context.log is not None:
                self.context.log.error("simulator stopped: %s", exc)
        finally:
            self._done.set()

    def _emit(self, readings: Readings) -> None:
        if readings.garble is not None and readings.garble.any():
            bad = readings.garble != 0
            for raw in encode_lines(readings.select(bad), "json"):
                self.context.quarantine("garbled line: not valid UTF-8 text", raw)
            readings = readings.select(~bad)
        if len(readings):
            self.context.emit(ReadingBatch(
                probe=readings.probe_ids(), ts=readings.ts, mv=readings.mv,
                temp_c=readings.temp_c, ohms=readings.ohms,
            ))
