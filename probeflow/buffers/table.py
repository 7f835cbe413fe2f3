"""One buffer: its pH(S) against temperature, interpolated smoothly, refused outside its table."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike

from probeflow.buffers.spline import TableSpline
from probeflow.errors import BufferRangeError, ChemistryError

__all__ = ["BufferTable"]


def _out(value: np.ndarray) -> float | np.ndarray:
    return float(value) if np.ndim(value) == 0 else value


@dataclass(frozen=True)
class BufferTable:
    """A buffer's tabulated pH(S) [-] at temperatures temps_c [°C].

    Between tabulated temperatures the value comes from the not-a-knot cubic
    spline through the table (see :mod:`probeflow.buffers.spline`), which
    reproduces every tabulated value exactly.  Temperatures outside the table
    raise :class:`BufferRangeError`; a NaN temperature gives NaN.
    """

    name: str
    nominal_ph: float
    temps_c: tuple[float, ...]
    ph_values: tuple[float, ...]
    source: str = ""
    description: str = ""
    _spline: TableSpline = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        t = np.asarray(self.temps_c, dtype=np.float64)
        v = np.asarray(self.ph_values, dtype=np.float64)
        if t.size != v.size or t.size < 2:
            raise ChemistryError(f"buffer {self.name!r}: need at least two (temperature, pH) pairs")
        if not (np.all(np.isfinite(t)) and np.all(np.isfinite(v))):
            raise ChemistryError(f"buffer {self.name!r}: table holds a non-finite number")
        if np.any(np.diff(t) <= 0):
            raise ChemistryError(f"buffer {self.name!r}: temperatures must rise strictly")
        object.__setattr__(self, "_spline", TableSpline.through(t, v))

    @classmethod
    def from_pairs(
        cls, name: str, nominal_ph: float, pairs: Sequence[tuple[float, float]], **kw: str
    ) -> BufferTable:
        ordered = sorted(pairs)
        return cls(name, nominal_ph, tuple(p[0] for p in ordered), tuple(p[1] for p in ordered), **kw)

    @property
    def range_c(self) -> tuple[float, float]:
        """The (lowest, highest) tabulated temperature [°C]."""
        return (self.temps_c[0], self.temps_c[-1])

    def covers(self, temp_c: ArrayLike) -> np.ndarray | bool:
        """True where temp_c lies inside the table (NaN counts as covered: it gives NaN)."""
        t = np.asarray(temp_c, dtype=np.float64)
        inside = ~self._spline.outside(t)
        return bool(inside) if inside.ndim == 0 else inside

    def ph(self, temp_c: ArrayLike) -> float | np.ndarray:
        """pH(S) [-] at temp_c [°C]; raises BufferRangeError outside the table."""
        t = np.asarray(temp_c, dtype=np.float64)
        bad = self._spline.outside(t)
        if np.any(bad):
            worst = t[bad] if t.ndim else t
            lo, hi = self.range_c
            shown = float(np.max(worst)) if np.max(worst) > hi else float(np.min(worst))
            raise BufferRangeError(
                f"Buffer {self.name!r} has no pH value at {shown:g} °C: its table covers "
                f"{lo:g} to {hi:g} °C. Bring the buffer into that range or choose another buffer."
            )
        return _out(self._spline(t))
