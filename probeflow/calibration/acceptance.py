"""Judging a calibration against acceptance limits.

The default limits are common practice, no source: slope 90-105 % of the ideal
Nernst slope, offset within ±30 mV at the zero point, and (for three or more
points) no buffer more than 0.05 pH off the fitted line.  Sites set their own.

A verdict supports the technician's judgement; it does not replace the site's
procedures.  pH readings feed dosing and discharge decisions: probeflow is not a
safety system.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, fields
from typing import Any

from probeflow.calibration.model import Calibration
from probeflow.errors import ConfigError

__all__ = ["AcceptanceLimits", "Verdict", "judge"]


@dataclass(frozen=True)
class AcceptanceLimits:
    """Limits a calibration must meet to be applied (defaults: common practice, no source)."""

    slope_min_pct: float = 90.0     # common practice, no source
    slope_max_pct: float = 105.0    # common practice, no source
    offset_max_abs_mv: float = 30.0  # common practice, no source
    residual_max_ph: float = 0.05   # common practice, no source

    def __post_init__(self) -> None:
        problems: list[tuple[str, str]] = []
        for f in fields(self):
            v = getattr(self, f.name)
            if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v) or v <= 0:
                problems.append((f.name, f"must be a positive number, got {v!r}"))
        if not problems and self.slope_min_pct >= self.slope_max_pct:
            problems.append(("slope_min_pct", (f"{self.slope_min_pct} must be below slope_max_pct "
                                              f"{self.slope_max_pct}")))
        if problems:
            raise ConfigError("Calibration acceptance limits are wrong: "
                              + "; ".join(f"{k}: {m}" for k, m in problems), problems=problems)

    @classmethod
    def from_mapping(cls, raw: Mapping[str, Any], path: str | None = None,
                     key: str = "acceptance") -> AcceptanceLimits:
        """Limits from a config mapping; ConfigError names the file and key path."""
        names = {f.name for f in fields(cls)}
        unknown = sorted(set(raw) - names)
        if unknown:
            raise ConfigError(f"{path or 'config'}: unknown key(s) under {key}: {unknown}",
                              path=path, problems=[(f"{key}.{u}", "unknown key") for u in unknown])
        try:
            return cls(**dict(raw))
        except ConfigError as exc:
            raise ConfigError(f"{path or 'config'}: {exc}", path=path,
                              problems=[(f"{key}.{k}", m) for k, m in exc.problems]) from None


@dataclass(frozen=True)
class Verdict:
    """Outcome of :func:`judge`: accepted or not, with reasons a technician can act on."""

    accepted: bool
    reasons: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()

    @property
    def status(self) -> str:
        return "accepted" if self.accepted else "rejected"


def judge(calibration: Calibration, limits: AcceptanceLimits | None = None) -> Verdict:
    """Check slope, offset and residuals against limits; reasons say what to do."""
    lim = limits or AcceptanceLimits()
    reasons: list[str] = []
    notes: list[str] = []
    slope, offset = calibration.slope_pct, calibration.offset_mv
    if slope < lim.slope_min_pct:
        reasons.append(
            f"Slope {slope:.1f} % is below the minimum {lim.slope_min_pct:g} %: the electrode responds "
            "too weakly. Clean the glass bulb, check the buffers are fresh, recalibrate; replace the "
            "electrode if the slope stays low.")
    elif slope > lim.slope_max_pct:
        reasons.append(
            f"Slope {slope:.1f} % is above the maximum {lim.slope_max_pct:g} %: usually a wrong or "
            "contaminated buffer, or a buffer temperature that differs from the one measured. Check "
            "buffers and temperature probe, then recalibrate.")
    if abs(offset) > lim.offset_max_abs_mv:
        reasons.append(
            f"Offset {offset:+.1f} mV is beyond ±{lim.offset_max_abs_mv:g} mV: the reference side of "
            "the electrode may be poisoned, clogged or low on electrolyte. Service or replace the "
            "electrode.")
    residuals = calibration.residuals_ph
    for i, r in enumerate(residuals):
        if len(residuals) >= 3 and not abs(r) <= lim.residual_max_ph:
            point = calibration.points[i] if i < len(calibration.points) else None
            name = f" ({point.buffer})" if point is not None and point.buffer else ""
            reasons.append(
                f"Point {i + 1}{name} lies {r:+.3f} pH off the fitted line, more than "
                f"{lim.residual_max_ph:g} pH: that buffer may be contaminated or its reading was not "
                "stable. Repeat that point with fresh buffer.")
    if len(calibration.points) == 1:
        notes.append(f"One-point calibration: offset adjusted, slope kept at {slope:.1f} %.")
    if calibration.iso_ph is not None:
        notes.append(f"Offset stated at {calibration.reference_temp_c:g} °C (isothermal intersection "
                     f"at pH {calibration.iso_ph:g}).")
    return Verdict(not reasons, tuple(reasons), tuple(notes))
