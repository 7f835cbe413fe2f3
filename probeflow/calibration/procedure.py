"""From measured points to a stored, judged calibration.

A point is given as ``VALUE,MV,TEMP_C`` where VALUE is

* a pH number (the buffer's pH at that temperature, as the technician knows it);
* a buffer name of the chosen set or of :data:`probeflow.buffers.BUFFER_NAMES`,
  whose pH at TEMP_C comes from its table (:func:`probeflow.buffers.buffer_ph`);
* ``auto``: the buffer of the chosen set the reading is recognised as
  (:func:`probeflow.buffers.identify_buffer`, read through the calibration in
  effect, or an ideal electrode for a new probe).

:func:`calibrate` fits the points (keeping the previous slope for one point),
judges the result against the acceptance limits and stores it: accepted only
when the limits allow *and* the technician accepts; otherwise stored as
rejected and never applied.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml

from probeflow.buffers import BUFFER_NAMES, BUFFER_SETS, BufferSet, identify_buffer, load_buffer_set
from probeflow.buffers.standard import STANDARD_BUFFERS
from probeflow.calibration.acceptance import AcceptanceLimits, Verdict, judge
from probeflow.calibration.fitting import fit_calibration
from probeflow.calibration.model import Calibration, CalibrationPoint
from probeflow.calibration.store import CalibrationStore, PointDetail
from probeflow.errors import CalibrationError, ChemistryError, ConfigError

__all__ = ["CalibrationOutcome", "PointSpec", "PointsFile", "buffer_set_named", "calibrate",
           "load_points_file", "parse_point_spec", "resolve_point"]

DEFAULT_RECOGNITION_SET = "primary_wide"


@dataclass(frozen=True)
class PointSpec:
    """A point as typed: VALUE (pH, buffer name or 'auto'), mV, temperature."""

    value: str
    mv: float
    temp_c: float
    stable: bool | None = None
    drift_mv_per_min: float | None = None


def _number(text: str, what: str, spec: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise CalibrationError(f"Point {spec!r}: the {what} {text.strip()!r} is not a number.") from None
    if not math.isfinite(v):
        raise CalibrationError(f"Point {spec!r}: the {what} must be a finite number.")
    return v


def parse_point_spec(spec: str) -> PointSpec:
    """'phthalate_0.05,171.3,21.5' or '4.01,171.3,21.5' or 'auto,171.3,21.5'."""
    parts = [p.strip() for p in spec.split(",")]
    if len(parts) != 3 or not all(parts):
        raise CalibrationError(
            f"Point {spec!r} must be VALUE,MV,TEMP_C (VALUE a pH number, a buffer name or auto), "
            "e.g. phthalate_0.05,171.3,21.5")
    return PointSpec(parts[0], _number(parts[1], "mV value", spec),
                     _number(parts[2], "temperature", spec))


def buffer_set_named(name: str | None) -> BufferSet:
    """A shipped set from BUFFER_SETS, a YAML file of a user set, or every shipped buffer."""
    if name is None:
        return BufferSet.standard(DEFAULT_RECOGNITION_SET, BUFFER_SETS[DEFAULT_RECOGNITION_SET])
    if name in BUFFER_SETS:
        return BufferSet.standard(name, BUFFER_SETS[name])
    if name == "all":
        return BufferSet.standard("all", BUFFER_NAMES)
    if Path(name).suffix.lower() in (".yaml", ".yml") or Path(name).exists():
        return load_buffer_set(name)
    raise ConfigError(f"Unknown buffer set {name!r}: give one of {', '.join(BUFFER_SETS)}, 'all', "
                      "or a YAML file of your own set.", problems=[("buffer_set", "unknown")])


def resolve_point(spec: PointSpec, buffers: BufferSet, rough: Calibration | None) -> CalibrationPoint:
    """The CalibrationPoint for a typed point (see module docstring)."""
    value = spec.value
    try:
        if value.lower() == "auto":
            guess: Any = rough if rough is not None else (0.0, 100.0, 7.0)
            match = identify_buffer(spec.mv, spec.temp_c, guess, buffers)
            if match.name is None:
                raise CalibrationError(f"Buffer not recognised at {spec.mv:g} mV, {spec.temp_c:g} °C: "
                                       f"{match.reason}. Name the buffer instead of 'auto'.")
            return CalibrationPoint(float(buffers.ph(match.name, spec.temp_c)), spec.mv, spec.temp_c,
                                    match.name)
        if value in buffers.names:
            return CalibrationPoint(float(buffers.ph(value, spec.temp_c)), spec.mv, spec.temp_c, value)
        if value in STANDARD_BUFFERS:
            return CalibrationPoint(float(STANDARD_BUFFERS[value].ph(spec.temp_c)), spec.mv,
                                    spec.temp_c, value)
    except ChemistryError as exc:
        raise CalibrationError(f"Point {value},{spec.mv:g},{spec.temp_c:g}: {exc}") from exc
    try:
        ph = float(value)
    except ValueError:
        raise CalibrationError(
            f"{value!r} is neither a pH number nor a known buffer. Buffers: "
            f"{', '.join(dict.fromkeys((*buffers.names, *BUFFER_NAMES)))}.") from None
    return CalibrationPoint(ph, spec.mv, spec.temp_c, None)


@dataclass(frozen=True)
class PointsFile:
    """A points file: the points and optional who / serial / note / buffer set."""

    points: tuple[PointSpec, ...]
    who: str | None = None
    electrode_serial: str | None = None
    note: str | None = None
    buffer_set: str | None = None


def load_points_file(path: str | Path) -> PointsFile:
    """Read a points file::

        points:
          - {buffer: phthalate_0.05, mv: 171.3, temp_c: 21.5}
          - {ph: 6.88, mv: 3.1, temp_c: 21.6}
          - {value: auto, mv: -124.0, temp_c: 21.4}
        who: J. Okafor          # optional
        serial: EL-20931        # optional
        note: after cleaning    # optional
        buffer_set: primary_4_7_9   # optional
    """
    p = Path(path)
    try:
        doc: Any = yaml.safe_load(p.read_text(encoding="utf-8"))
    except OSError as exc:
        raise ConfigError(f"Cannot read the points file {p}: {exc.strerror}", path=str(p)) from exc
    except yaml.YAMLError as exc:
        raise ConfigError(f"The points file {p} is not valid YAML: {exc}", path=str(p)) from exc
    problems: list[tuple[str, str]] = []
    if not isinstance(doc, dict):
        raise ConfigError(f"{p}: expected a mapping with a 'points' list", path=str(p),
                          problems=[("(top level)", "not a mapping")])
    unknown = set(doc) - {"points", "who", "serial", "note", "buffer_set"}
    if unknown:
        problems.append(("(top level)", f"unknown key(s) {sorted(unknown)}"))
    raw_points = doc.get("points")
    specs: list[PointSpec] = []
    if not isinstance(raw_points, list) or not raw_points:
        problems.append(("points", "missing or empty: list the measured points"))
        raw_points = []
    for i, raw in enumerate(raw_points):
        key = f"points[{i}]"
        if not isinstance(raw, dict):
            problems.append((key, "expected a mapping with buffer (or ph or value), mv, temp_c"))
            continue
        given = [k for k in ("buffer", "ph", "value") if k in raw]
        if len(given) != 1:
            problems.append((key, "give exactly one of buffer, ph or value"))
            continue
        extra = set(raw) - {"buffer", "ph", "value", "mv", "temp_c", "stable", "drift_mv_per_min"}
        if extra:
            problems.append((key, f"unknown key(s) {sorted(extra)}"))
        nums = {}
        for name in ("mv", "temp_c"):
            v = raw.get(name)
            if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
                problems.append((f"{key}.{name}", f"missing or not a number: {v!r}"))
            else:
                nums[name] = float(v)
        if len(nums) == 2:
            specs.append(PointSpec(str(raw[given[0]]), nums["mv"], nums["temp_c"],
                                   raw.get("stable"), raw.get("drift_mv_per_min")))
    if problems:
        listing = "; ".join(f"{k}: {m}" for k, m in problems)
        raise ConfigError(f"Points file {p} has {len(problems)} problem(s): {listing}",
                          path=str(p), problems=problems)
    text = {k: (None if doc.get(k) is None else str(doc.get(k)))
            for k in ("who", "serial", "note", "buffer_set")}
    return PointsFile(tuple(specs), text["who"], text["serial"], text["note"], text["buffer_set"])


@dataclass(frozen=True)
class CalibrationOutcome:
    """What :func:`calibrate` did: the fit, the verdict, and whether it was applied."""

    id: int
    probe: str
    ts: float
    applies_from: float
    calibration: Calibration
    limits_verdict: Verdict          # the verdict of the limits alone
    verdict: Verdict                 # what was stored (also rejected if the technician said no)
    details: tuple[PointDetail, ...] = field(default=())

    @property
    def accepted(self) -> bool:
        return self.verdict.accepted

    def to_record(self) -> dict[str, Any]:
        cal = self.calibration
        residuals = list(cal.residuals_ph)
        return {
            "id": self.id, "probe": self.probe, "ts": self.ts, "applies_from": self.applies_from,
            "offset_mv": cal.offset_mv, "slope_pct": cal.slope_pct, "zero_ph": cal.zero_ph,
            "verdict": self.verdict.status, "reasons": list(self.verdict.reasons),
            "notes": list(self.verdict.notes), "residuals": residuals,
            "points": [d.to_record(residuals[i] if i < len(residuals) else None)
                       for i, d in enumerate(self.details)],
            "applied": self.accepted,
        }


def calibrate(store: CalibrationStore, probe: str, details: Sequence[PointDetail], *,
              limits: AcceptanceLimits, previous: Calibration | None, technician_accepts: bool,
              ts: float, applies_from: float | None = None, who: str | None = None,
              electrode_serial: str | None = None, note: str | None = None,
              kind: str = "buffer") -> CalibrationOutcome:
    """Fit, judge and store; see module docstring.  CalibrationError if the points cannot be fitted."""
    cal = fit_calibration([d.point for d in details], previous=previous)
    limits_verdict = judge(cal, limits)
    verdict = limits_verdict
    if limits_verdict.accepted and not technician_accepts:
        verdict = Verdict(False, ("Not accepted by the technician.",), limits_verdict.notes)
    unstable = [i + 1 for i, d in enumerate(details) if d.stable is False]
    if unstable:
        warning = f"Point(s) {unstable} were taken before the reading was stable."
        verdict = Verdict(verdict.accepted, verdict.reasons, (*verdict.notes, warning))
    applies = ts if applies_from is None else applies_from
    cal_id = store.record_calibration(probe, cal, verdict, kind=kind, ts=ts, applies_from=applies,
                                      points=details, who=who, electrode_serial=electrode_serial,
                                      note=note)
    return CalibrationOutcome(cal_id, probe, ts, applies, cal, limits_verdict, verdict, tuple(details))
