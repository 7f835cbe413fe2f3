"""Which buffer of a chosen set is the probe sitting in?

The reading (mV, °C) is turned into pH with the electrode's rough calibration
(its last calibration, or offset 0 mV / slope 100 % for a new electrode), and
compared with each candidate buffer's pH(S) at that temperature.  The nearest
buffer is the answer when it lies within ``tolerance_ph`` and no other candidate
does; otherwise the answer is "none" with the reason.

Default tolerance 0.5 pH (common practice, no source): wide enough for a worn
electrode read through a nominal calibration (an electrode with +8 mV offset and
96 % slope read as 0 mV / 100 % is off by 0.39 pH in Ca(OH)2 at 5 °C), narrow
enough that buffers of a set one pH or more apart cannot both match.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Protocol, runtime_checkable

from probeflow.buffers.buffer_set import BufferSet
from probeflow.buffers.standard import standard_buffer
from probeflow.buffers.table import BufferTable
from probeflow.chemistry.nernst import ph_from_potential

__all__ = ["DEFAULT_TOLERANCE_PH", "BufferMatch", "identify_buffer", "recognise_buffer"]

DEFAULT_TOLERANCE_PH = 0.5  # common practice, no source


@runtime_checkable
class _HasToPh(Protocol):
    def to_ph(self, mv: float, temp_c: float) -> float: ...


RoughCalibration = _HasToPh | tuple[float, float] | tuple[float, float, float]
Candidates = BufferSet | Iterable[str | BufferTable]


@dataclass(frozen=True)
class BufferMatch:
    """Outcome of buffer recognition: ``name`` is None when no buffer is recognised."""

    name: str | None
    measured_ph: float
    buffer_ph: float | None
    distance_ph: float | None
    reason: str


def _rough_ph(mv: float, temp_c: float, calibration: RoughCalibration) -> float:
    if isinstance(calibration, _HasToPh):
        return float(calibration.to_ph(mv, temp_c))
    offset, slope, *rest = calibration
    zero = rest[0] if rest else 7.0
    return float(ph_from_potential(mv, temp_c, offset, slope, zero))


def _tables(candidates: Candidates) -> list[BufferTable]:
    return [c if isinstance(c, BufferTable) else standard_buffer(c) for c in candidates]


def identify_buffer(
    mv: float,
    temp_c: float,
    calibration: RoughCalibration,
    candidates: Candidates,
    tolerance_ph: float = DEFAULT_TOLERANCE_PH,
) -> BufferMatch:
    """Recognise the buffer and say why (see module docstring for the rule)."""
    measured = _rough_ph(mv, temp_c, calibration)
    if not (math.isfinite(measured) and math.isfinite(temp_c)):
        return BufferMatch(None, measured, None, None, "the reading or temperature is not a number")
    scored: list[tuple[float, str, float]] = []
    skipped: list[str] = []
    for table in _tables(candidates):
        if not table.covers(temp_c):
            skipped.append(table.name)
            continue
        value = float(table.ph(temp_c))
        scored.append((abs(measured - value), table.name, value))
    if not scored:
        return BufferMatch(None, measured, None, None,
                           f"no candidate buffer has a pH value at {temp_c:g} °C")
    scored.sort()
    distance, name, value = scored[0]
    if distance > tolerance_ph:
        return BufferMatch(None, measured, value, distance,
                           f"reading pH {measured:.2f} is {distance:.2f} pH from the nearest buffer "
                           f"{name} (pH {value:.3f}), more than the {tolerance_ph:g} pH allowed")
    if len(scored) > 1 and scored[1][0] <= tolerance_ph:
        return BufferMatch(None, measured, value, distance,
                           f"reading pH {measured:.2f} fits both {name} and {scored[1][1]}: "
                           "choose a buffer set whose buffers lie further apart")
    return BufferMatch(name, measured, value, distance,
                       f"reading pH {measured:.2f} matches {name} (pH {value:.3f} at {temp_c:g} °C)")


def recognise_buffer(
    mv: float,
    temp_c: float,
    calibration: RoughCalibration,
    candidates: Candidates,
    tolerance_ph: float = DEFAULT_TOLERANCE_PH,
) -> str | None:
    """Name of the buffer of ``candidates`` the probe sits in, or None.

    mv [mV], temp_c [°C]; calibration is a Calibration (anything with
    ``to_ph(mv, temp_c)``) or a tuple (offset_mv, slope_pct[, zero_ph]);
    candidates a BufferSet or buffer names / BufferTable objects.
    """
    return identify_buffer(mv, temp_c, calibration, candidates, tolerance_ph).name
