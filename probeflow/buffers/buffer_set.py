"""A chosen set of buffers (shipped or user-defined), and loading user sets from YAML.

YAML layout (one file = one set)::

    name: riverside-lab            # the set's name
    buffers:
      - standard: phthalate_0.05   # a shipped buffer, by name
      - name: lab-red-4            # a user buffer
        nominal_ph: 4.01           # the label value, pH at 25 °C or as printed
        source: supplier certificate, lot 2291   # optional, free text
        table:                     # temperature [°C]: pH, at least two rows
          10: 4.00
          20: 4.00
          30: 4.01

``table`` may also be a list of ``[temp_c, ph]`` pairs.  Every problem found is
reported at once in one ConfigError naming the file and the key path.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Iterable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import yaml
from numpy.typing import ArrayLike

from probeflow.buffers.standard import BUFFER_NAMES, STANDARD_BUFFERS, standard_buffer
from probeflow.buffers.table import BufferTable
from probeflow.errors import ChemistryError, ConfigError

__all__ = ["BufferSet", "load_buffer_set"]

_PH_PLAUSIBLE = (-2.0, 16.0)  # a table value outside this is a typing error (common practice, no source)


@dataclass(frozen=True)
class BufferSet:
    """An ordered, named set of buffers a technician calibrates with."""

    name: str
    buffers: tuple[BufferTable, ...]

    @classmethod
    def standard(cls, name: str, members: Iterable[str]) -> BufferSet:
        return cls(name, tuple(standard_buffer(m) for m in members))

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(b.name for b in self.buffers)

    def __iter__(self) -> Iterator[BufferTable]:
        return iter(self.buffers)

    def __len__(self) -> int:
        return len(self.buffers)

    def get(self, name: str) -> BufferTable:
        for b in self.buffers:
            if b.name == name:
                return b
        raise ChemistryError(
            f"Buffer {name!r} is not in buffer set {self.name!r} ({', '.join(self.names)})."
        )

    def ph(self, name: str, temp_c: ArrayLike) -> float | np.ndarray:
        """pH [-] of member name at temp_c [°C] (BufferRangeError outside its table)."""
        return self.get(name).ph(temp_c)


def _number(value: Any) -> float | None:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    f = float(value)
    return f if math.isfinite(f) else None


def _table_pairs(raw: Any, key: str, problems: list[tuple[str, str]]) -> list[tuple[float, float]]:
    if isinstance(raw, dict):
        items = list(raw.items())
    elif isinstance(raw, list):
        items = []
        for i, row in enumerate(raw):
            if not (isinstance(row, (list, tuple)) and len(row) == 2):
                problems.append((f"{key}[{i}]", f"expected [temp_c, ph], got {row!r}"))
                continue
            items.append((row[0], row[1]))
    else:
        problems.append((key, "expected a mapping 'temp_c: ph' or a list of [temp_c, ph] pairs"))
        return []
    pairs: list[tuple[float, float]] = []
    for t_raw, ph_raw in items:
        t, ph = _number(t_raw), _number(ph_raw)
        if t is None:
            problems.append((f"{key}.{t_raw}", f"temperature {t_raw!r} is not a number"))
            continue
        if ph is None:
            problems.append((f"{key}.{t_raw}", f"pH {ph_raw!r} is not a number"))
            continue
        if not _PH_PLAUSIBLE[0] <= ph <= _PH_PLAUSIBLE[1]:
            problems.append((f"{key}.{t_raw}", f"pH {ph} is outside {_PH_PLAUSIBLE[0]}..{_PH_PLAUSIBLE[1]}"))
            continue
        pairs.append((t, ph))
    temps = sorted(p[0] for p in pairs)
    dupes = {t for a, t in itertools.pairwise(temps) if a == t}
    if dupes:
        problems.append((key, f"temperature(s) {sorted(dupes)} appear more than once"))
        return []
    if len(pairs) < 2 and not any(k.startswith(key) for k, _ in problems):
        problems.append((key, "needs at least two rows (temp_c: ph)"))
    return pairs


def _parse_buffer(raw: Any, key: str, problems: list[tuple[str, str]]) -> BufferTable | None:
    if not isinstance(raw, dict):
        problems.append((key, "expected a mapping with 'name', 'nominal_ph', 'table' (or 'standard')"))
        return None
    if "standard" in raw:
        name = raw["standard"]
        extra = set(raw) - {"standard"}
        if extra:
            problems.append((key, f"'standard' entries take no other keys, found {sorted(extra)}"))
        if name not in STANDARD_BUFFERS:
            problems.append((f"{key}.standard", f"unknown buffer {name!r}; known: {', '.join(BUFFER_NAMES)}"))
            return None
        return STANDARD_BUFFERS[name]
    unknown = set(raw) - {"name", "nominal_ph", "table", "source", "description"}
    if unknown:
        problems.append((key, f"unknown key(s) {sorted(unknown)}"))
    name = raw.get("name")
    if not isinstance(name, str) or not name.strip():
        problems.append((f"{key}.name", "missing or empty: give the buffer a name"))
    nominal = _number(raw.get("nominal_ph"))
    if nominal is None:
        problems.append((f"{key}.nominal_ph", f"missing or not a number: {raw.get('nominal_ph')!r}"))
    if "table" not in raw:
        problems.append((f"{key}.table", "missing: give at least two rows 'temp_c: ph'"))
        return None
    before = len(problems)
    pairs = _table_pairs(raw["table"], f"{key}.table", problems)
    if len(problems) > before or nominal is None or not isinstance(name, str):
        return None
    return BufferTable.from_pairs(
        name.strip(), nominal, pairs,
        source=str(raw.get("source", "user table")), description=str(raw.get("description", "")),
    )


def load_buffer_set(path: str | Path) -> BufferSet:
    """Read a user buffer set from YAML; ConfigError names the file and every bad key."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except OSError as exc:
        raise ConfigError(f"Cannot read buffer set file {p}: {exc.strerror}", path=str(p)) from exc
    try:
        doc = yaml.safe_load(text)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}" if mark is not None else ""
        raise ConfigError(f"Buffer set file {p} is not valid YAML{where}: {exc}", path=str(p),
                          problems=[("", f"YAML syntax error{where}")]) from exc
    problems: list[tuple[str, str]] = []
    if not isinstance(doc, dict):
        problems.append(("", "expected a mapping with 'name' and 'buffers'"))
        doc = {}
    set_name = doc.get("name")
    if not isinstance(set_name, str) or not set_name.strip():
        problems.append(("name", "missing or empty: give the buffer set a name"))
    raw_buffers = doc.get("buffers")
    buffers: list[BufferTable] = []
    if not isinstance(raw_buffers, list) or not raw_buffers:
        problems.append(("buffers", "missing or empty: list at least one buffer"))
    else:
        for i, raw in enumerate(raw_buffers):
            b = _parse_buffer(raw, f"buffers[{i}]", problems)
            if b is not None:
                buffers.append(b)
    names = [b.name for b in buffers]
    for n in sorted({n for n in names if names.count(n) > 1}):
        problems.append(("buffers", f"buffer name {n!r} is used more than once"))
    unknown_top = set(doc) - {"name", "buffers"}
    if unknown_top:
        problems.append(("", f"unknown key(s) {sorted(unknown_top)}"))
    if problems:
        listing = "; ".join(f"{k or '(top level)'}: {m}" for k, m in problems)
        raise ConfigError(f"Buffer set file {p} has {len(problems)} problem(s): {listing}",
                          path=str(p), problems=problems)
    return BufferSet(str(set_name).strip(), tuple(buffers))
