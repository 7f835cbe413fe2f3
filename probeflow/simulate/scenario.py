"""The scenario file: an invented site, its process streams and the probes on them.

A scenario is YAML checked once, up front, into typed objects.  Every error
names the file, the key path (``probes[2].faults[0].at``) and what is wrong,
and is raised as :class:`probeflow.errors.ConfigError`.

Times inside a scenario (``at``, ``duration``, ``interval`` ...) are durations
after the scenario's start: ``"90s"``, ``"15min"``, ``"1h30m"``, ``"2d"``.
See ``simulators/README.md`` for a worked example of every key.
"""

from __future__ import annotations

import math
import re
from functools import reduce
from pathlib import Path
from typing import Annotated, Any, Literal

import yaml
from pydantic import BaseModel, BeforeValidator, Field, ValidationError

from probeflow.errors import ConfigError
from probeflow.simulate.durations import format_duration, parse_duration_ms, parse_instant

__all__ = [
    "FAULT_KINDS",
    "ElectrodeSpec",
    "EventSpec",
    "FaultSpec",
    "ProbeSpec",
    "ProcessSpec",
    "Scenario",
    "StreamSpec",
    "TemperatureSensorSpec",
    "load_scenario",
    "scenario_from_mapping",
]


def _duration(value: Any) -> int:
    return parse_duration_ms(value)


def _instant(value: Any) -> float:
    return parse_instant(value)


Millis = Annotated[int, BeforeValidator(_duration)]
"""A duration written as text ("15min") or seconds, held in whole milliseconds."""

Instant = Annotated[float, BeforeValidator(_instant)]

_ID = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")


class _Strict(BaseModel):
    model_config = {"extra": "forbid", "frozen": True, "allow_inf_nan": False}


# --- process: true pH and temperature of a stream ---------------------------------


class DisturbanceSpec(_Strict):
    """A slow random wander (Ornstein-Uhlenbeck): spread ``sigma`` and time scale ``tau``."""

    sigma: float = Field(ge=0)
    tau: Millis = Field(gt=0)


class WaveSpec(_Strict):
    """A regular swing: ``amplitude * sin(2 pi t / period + phase)``."""

    amplitude: float
    period: Millis = Field(gt=0)
    phase_deg: float = 0.0


class StepEvent(_Strict):
    """A dosing step: the level moves by ``delta`` at ``at`` (for ``duration``, or for good)."""

    kind: Literal["step"]
    at: Millis
    delta: float
    duration: Millis | None = None


class ExcursionEvent(_Strict):
    """The level is pulled to ``to`` (e.g. pH 11.5 during a caustic slug) and back:
    ramps up over ``rise``, holds for ``hold``, returns over ``fall``."""

    kind: Literal["excursion"]
    at: Millis
    to: float
    rise: Millis = Field(default=60_000, gt=0)
    hold: Millis = Field(default=300_000, ge=0)
    fall: Millis = Field(default=300_000, gt=0)


class UpsetEvent(_Strict):
    """A slow upset: a ramp of ``delta`` over ``ramp``, held for ``hold``, then a recovery
    over ``recover`` (no ``recover``: the new level stays)."""

    kind: Literal["upset"]
    at: Millis
    delta: float
    ramp: Millis = Field(gt=0)
    hold: Millis = Field(default=0, ge=0)
    recover: Millis | None = Field(default=None, gt=0)


EventSpec = Annotated[StepEvent | ExcursionEvent | UpsetEvent, Field(discriminator="kind")]


class ProcessSpec(_Strict):
    """One process variable (pH or temperature [°C]) over time."""

    set_point: float
    disturbance: DisturbanceSpec | None = None
    waves: list[WaveSpec] = []
    events: list[EventSpec] = []


class StreamSpec(_Strict):
    """A process stream: one true pH and one true temperature, shared by every probe on it."""

    description: str = ""
    ph: ProcessSpec
    temperature: ProcessSpec


# --- electrode and temperature sensor --------------------------------------------


class ElectrodeSpec(_Strict):
    """The glass electrode: E = E0(t) - s(t) k(T) (pH_seen - pH0) + noise [mV]."""

    offset_mv: float = 0.0
    offset_drift_mv_per_day: float = 0.0
    slope_pct: float = Field(default=100.0, gt=0, le=110)
    slope_loss_pct_per_month: float = Field(default=0.0, ge=0)
    zero_ph: float = 7.0
    response: Millis = Field(default=5_000, ge=0)     # first-order time constant
    noise_mv: float = Field(default=0.2, ge=0)


class TemperatureSensorSpec(_Strict):
    """The probe's temperature element.  ``output``: celsius (a reading in °C), ohms (a raw
    Pt100 resistance) or none (the probe reports no temperature)."""

    output: Literal["celsius", "ohms", "none"] = "celsius"
    noise_c: float = Field(default=0.02, ge=0)
    response: Millis = Field(default=20_000, ge=0)
    bias_c: float = 0.0


# --- faults ---------------------------------------------------------------------


class _Window(_Strict):
    at: Millis
    duration: Millis | None = None      # none: until the end of the run


class CoatedFault(_Window):
    """Fouled glass: slow response (time constant ``response``) and a slope falling
    linearly by ``slope_loss_pct`` over the window; cleaned at the window's end."""

    kind: Literal["coated"]
    response: Millis = Field(default=180_000, gt=0)
    slope_loss_pct: float = Field(default=20.0, ge=0, lt=100)


class BrokenMembraneFault(_Window):
    """Cracked glass: the mV sits near the zero point (``residual_mv`` from the offset)
    and no longer follows pH."""

    kind: Literal["broken_membrane"]
    residual_mv: float = 3.0


class FlatlineFault(_Window):
    """A frozen transmitter: mV and temperature repeat the last value exactly."""

    kind: Literal["flatline"]


class TempOpenFault(_Window):
    """Open temperature element: no temperature (celsius output) or a very high resistance."""

    kind: Literal["temp_open"]


class TempShortFault(_Window):
    """Shorted temperature element: near-zero resistance, an absurd temperature."""

    kind: Literal["temp_short"]


class DropoutFault(_Window):
    """Communication lost: no readings at all during the window."""

    kind: Literal["dropout"]


class GarbledFault(_Window):
    """Line noise: a share ``fraction`` of the readings arrive with corrupted bytes
    (text outputs; the in-process source hands them to quarantine)."""

    kind: Literal["garbled"]
    fraction: float = Field(default=0.3, gt=0, le=1)


class DuplicateFault(_Window):
    """A share ``fraction`` of the readings is delivered twice."""

    kind: Literal["duplicate"]
    fraction: float = Field(default=0.2, gt=0, le=1)


class OutOfOrderFault(_Window):
    """A share ``fraction`` of the readings is delivered ``delay`` late, after newer ones."""

    kind: Literal["out_of_order"]
    fraction: float = Field(default=0.3, gt=0, le=1)
    delay: Millis = Field(default=3_000, gt=0)


FaultSpec = Annotated[
    CoatedFault | BrokenMembraneFault | FlatlineFault | TempOpenFault | TempShortFault | DropoutFault | GarbledFault | DuplicateFault | OutOfOrderFault,
    Field(discriminator="kind"),
]

FAULT_KINDS: tuple[str, ...] = (
    "coated", "broken_membrane", "flatline", "temp_open", "temp_short",
    "dropout", "garbled", "duplicate", "out_of_order",
)
"""Every fault name, in the bit order of the truth's fault mask."""

_EVENT_KINDS = ("step", "excursion", "upset")


class ProbeSpec(_Strict):
    """One probe (electrode + temperature element + transmitter) on one stream."""

    id: str
    stream: str
    interval: Millis = Field(default=1_000, gt=0)
    electrode: ElectrodeSpec = ElectrodeSpec()
    temperature_sensor: TemperatureSensorSpec = TemperatureSensorSpec()
    faults: list[FaultSpec] = []


class Scenario(_Strict):
    """An invented site: streams, probes and their faults."""

    site: str
    site_id: str
    description: str = ""
    start: Instant
    duration: Millis | None = None
    streams: dict[str, StreamSpec]
    probes: list[ProbeSpec]
    source: str = "<scenario>"

    @property
    def tick_ms(self) -> int:
        """The process grid step: the greatest common divisor of the probe intervals."""
        return reduce(math.gcd, (p.interval for p in self.probes))

    def probe(self, probe_id: str) -> ProbeSpec:
        for p in self.probes:
            if p.id == probe_id:
                return p
        raise KeyError(probe_id)

    def fault_schedule(self, start: float | None = None) -> list[dict[str, Any]]:
        """Every scheduled fault as ``{probe, kind, start, end}`` in epoch seconds
        (``end`` is None for a fault that lasts to the end of the run)."""
        t0 = self.start if start is None else start
        rows = []
        for p in self.probes:
            for f in p.faults:
                begin = t0 + f.at / 1000
                end = None if f.duration is None else begin + f.duration / 1000
                rows.append({"probe": p.id, "kind": f.kind, "start": begin, "end": end})
        return rows


# --- loading ----------------------------------------------------------------------


def _key_path(loc: tuple[Any, ...]) -> str:
    out = ""
    prev_index = False
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
            prev_index = True
            continue
        if prev_index and part in FAULT_KINDS + _EVENT_KINDS:
            prev_index = False
            continue           # the union tag pydantic puts in the location
        prev_index = False
        out += ("." if out else "") + str(part)
    return out or "(top level)"


def _message(err: Any) -> str:
    msg = str(err["msg"])
    msg = msg.removeprefix("Value error, ")
    if err["type"] == "missing":
        return "is required but missing"
    if err["type"] == "extra_forbidden":
        return "is not a known key (check the spelling)"
    if err["type"] == "union_tag_invalid":
        return msg
    return msg


def _cross_checks(sc: Scenario) -> list[tuple[str, str]]:
    problems: list[tuple[str, str]] = []
    if not _ID.match(sc.site_id):
        problems.append(("site_id", f'"{sc.site_id}" must be letters, digits, "-", "_" or "."'))
    if not sc.probes:
        problems.append(("probes", "the scenario needs at least one probe"))
    seen: set[str] = set()
    for i, p in enumerate(sc.probes):
        if not _ID.match(p.id):
            problems.append((f"probes[{i}].id", (f'"{p.id}" must be letters, digits, "-", "_" or "." '
                                                 "(it becomes a topic level and a file value)")))
        if p.id in seen:
            problems.append((f"probes[{i}].id", f'"{p.id}" is used by two probes'))
        seen.add(p.id)
        if p.stream not in sc.streams:
            known = ", ".join(sorted(sc.streams)) or "none"
            problems.append((f"probes[{i}].stream", f'no stream "{p.stream}" (streams: {known})'))
        for j, f in enumerate(p.faults):
            if f.duration is not None and f.duration <= 0:
                problems.append((f"probes[{i}].faults[{j}].duration", "must be longer than zero"))
    return problems


def scenario_from_mapping(data: Any, source: str = "<scenario>") -> Scenario:
    """Check a parsed scenario mapping; raise ConfigError naming ``source`` and the keys."""
    if not isinstance(data, dict):
        raise ConfigError(f"{source}: a scenario must be a mapping of keys (site, streams, probes ...)",
                          path=source, problems=[("(top level)", "not a mapping")])
    try:
        sc = Scenario.model_validate({**data, "source": source})
    except ValidationError as exc:
        problems = [(_key_path(tuple(e["loc"])), _message(e)) for e in exc.errors()]
        raise _config_error(source, problems) from None
    problems = _cross_checks(sc)
    if problems:
        raise _config_error(source, problems)
    return sc


def _config_error(source: str, problems: list[tuple[str, str]]) -> ConfigError:
    lines = "\n".join(f"  {key}: {msg}" for key, msg in problems)
    noun = "problem" if len(problems) == 1 else "problems"
    return ConfigError(f"{source}: {len(problems)} {noun} in the scenario:\n{lines}",
                       path=source, problems=problems)


def load_scenario(path: str | Path) -> Scenario:
    """Read and check a scenario YAML file."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except OSError as exc:
        raise ConfigError(f"{p}: cannot read the scenario file ({exc.strerror})", path=str(p),
                          problems=[("(file)", str(exc.strerror))]) from exc
    try:
        data = yaml.safe_load(text)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f"line {mark.line + 1}, column {mark.column + 1}" if mark else "unknown place"
        raise ConfigError(f"{p}: not valid YAML at {where}: {getattr(exc, 'problem', exc)}",
                          path=str(p), problems=[(where, "not valid YAML")]) from exc
    return scenario_from_mapping(data, str(p))


def describe(sc: Scenario) -> str:
    """A few lines about a scenario, for the command line."""
    dur = "open-ended" if sc.duration is None else format_duration(sc.duration)
    return f"{sc.site} ({sc.site_id}): {len(sc.streams)} streams, {len(sc.probes)} probes, {dur}"
