"""Strict, fast validation of reading records (shared by every JSON source).

A reading record is a JSON object::

    {"probe": "tank-3", "ts": 1764633600.25, "mv": -12.34, "temp_c": 41.7}

* ``probe``  text, one of the configured probe ids (unless the parser accepts any);
* ``ts``     epoch seconds (number) or an RFC 3339 string with a time zone;
* ``mv``     a finite number [mV];
* ``temp_c`` optional finite number [°C] (absent or null: no temperature);
* ``ohms``   optional finite number [Ω] from an RTD;
other keys are ignored.  Anything else raises :class:`ParseError` with a
reason whose part before the first ``:`` is a stable kind (used to rate-limit
logs).  Lines are decoded with orjson and appended straight into column lists,
so no object is created per reading beyond the dict orjson returns.
"""

from __future__ import annotations

import math
import time
from collections.abc import Iterable
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

import numpy as np
import orjson

from probeflow.batch import ReadingBatch
from probeflow.errors import ParseError

__all__ = [
    "DEFAULT_MAX_RECORD_BYTES",
    "EARLIEST_TS",
    "ParsedReadings",
    "RecordParser",
    "reason_kind",
]

DEFAULT_MAX_RECORD_BYTES = 65536
"""Longest accepted line or payload [bytes]; larger input is quarantined unparsed."""

EARLIEST_TS = 946684800.0
"""2000-01-01T00:00:00Z: an earlier timestamp is taken as a clock fault."""

_NAN = math.nan


def reason_kind(reason: str) -> str:
    """The stable part of a quarantine reason (before the first ``:``)."""
    return reason.split(":", 1)[0]


@dataclass
class ParsedReadings:
    """Columns of the accepted readings plus ``(reason, raw)`` of each reject."""

    probe: list[str] = field(default_factory=list)
    ts: list[float] = field(default_factory=list)
    mv: list[float] = field(default_factory=list)
    temp_c: list[float] = field(default_factory=list)
    ohms: list[float] = field(default_factory=list)
    rejects: list[tuple[str, bytes | str]] = field(default_factory=list)

    def __len__(self) -> int:
        return len(self.ts)

    def add(self, row: tuple[str, float, float, float, float]) -> None:
        self.probe.append(row[0])
        self.ts.append(row[1])
        self.mv.append(row[2])
        self.temp_c.append(row[3])
        self.ohms.append(row[4])

    def batch(self, on_committed: tuple[Any, ...] = ()) -> ReadingBatch:
        return ReadingBatch(
            probe=np.array(self.probe, dtype=object),
            ts=np.array(self.ts, dtype=np.float64),
            mv=np.array(self.mv, dtype=np.float64),
            temp_c=np.array(self.temp_c, dtype=np.float64),
            ohms=np.array(self.ohms, dtype=np.float64),
            on_committed=on_committed,
        )


def _number(value: Any, name: str) -> float:
    kind = type(value)
    if kind is float:
        if value - value == 0.0:
            return value  # type: ignore[no-any-return]
        raise ParseError(f"{name} is not a finite number: {value!r}")
    if kind is int:
        return float(value)
    raise ParseError(f"{name} is not a number: {_short(value)}")


def _optional(value: Any, name: str) -> float:
    if value is None:
        return _NAN
    return _number(value, name)


def _short(value: Any) -> str:
    text = orjson.dumps(value, default=str).decode() if not isinstance(value, bytes) else repr(value)
    return text if len(text) <= 40 else text[:37] + "..."


def _timestamp(value: Any) -> float:
    kind = type(value)
    if kind is float or kind is int:
        if value - value == 0:
            return float(value)
        raise ParseError(f"ts is not a finite number: {value!r}")
    if kind is str:
        try:
            parsed = datetime.fromisoformat(value)
        except ValueError:
            raise ParseError(f"ts is not epoch seconds or an RFC 3339 time: {_short(value)}") from None
        if parsed.tzinfo is None:
            raise ParseError(f"ts has no time zone (add Z or +00:00): {_short(value)}")
        return parsed.timestamp()
    raise ParseError(f"ts is not epoch seconds or an RFC 3339 time: {_short(value)}")


class RecordParser:
    """Validates reading records for one source.

    known_probes  accepted probe ids (None: any id)
    max_bytes     longest accepted raw line or payload
    future_s      how far a timestamp may lie ahead of this computer's clock [s]
                  (None: no limit, e.g. for recordings)
    """

    def __init__(self, known_probes: frozenset[str] | None = None, *,
                 max_bytes: int = DEFAULT_MAX_RECORD_BYTES,
                 future_s: float | None = 86400.0) -> None:
        self.known_probes = known_probes
        self.max_bytes = max_bytes
        self.future_s = future_s

    def _latest(self) -> float:
        return math.inf if self.future_s is None else time.time() + self.future_s

    def record(self, obj: Any, default_probe: str | None = None,
               latest: float | None = None) -> tuple[str, float, float, float, float]:
        """``(probe, ts, mv, temp_c, ohms)`` of one decoded record, or ParseError."""
        if type(obj) is not dict:
            raise ParseError("not a JSON object: a reading must be {\"probe\": ..., \"ts\": ..., \"mv\": ...}")
        probe = obj.get("probe", default_probe)
        if type(probe) is not str:
            raise ParseError("missing probe" if probe is None else f"probe is not text: {_short(probe)}")
        known = self.known_probes
        if known is not None and probe not in known:
            raise ParseError(f"unknown probe: {_short(probe)}")
        try:
            ts = obj["ts"]
            mv = obj["mv"]
        except KeyError as exc:
            raise ParseError(f"missing {exc.args[0]}") from None
        t = _timestamp(ts)
        if t < EARLIEST_TS:
            raise ParseError(f"ts is before the year 2000: {t!r}")
        if t > (self._latest() if latest is None else latest):
            raise ParseError(f"ts is too far in the future: {t!r}")
        return (probe, t, _number(mv, "mv"), _optional(obj.get("temp_c"), "temp_c"),
                _optional(obj.get("ohms"), "ohms"))

    def one(self, raw: bytes | str, default_probe: str | None = None) -> tuple[str, float, float, float, float]:
        """Decode and validate one JSON record."""
        if len(raw) > self.max_bytes:
            raise ParseError(f"too long: {len(raw)} bytes, the limit is {self.max_bytes}")
        try:
            obj = orjson.loads(raw)
        except orjson.JSONDecodeError as exc:
            raise ParseError(f"not valid JSON: {exc}") from None
        return self.record(obj, default_probe)

    def payload(self, raw: bytes, default_probe: str | None = None,
                out: ParsedReadings | None = None) -> ParsedReadings:
        """One payload holding a record or a JSON array of records (MQTT)."""
        out = ParsedReadings() if out is None else out
        if len(raw) > self.max_bytes:
            out.rejects.append((f"too long: {len(raw)} bytes, the limit is {self.max_bytes}", raw))
            return out
        try:
            obj = orjson.loads(raw)
        except orjson.JSONDecodeError as exc:
            out.rejects.append((f"not valid JSON: {exc}", raw))
            return out
        latest = self._latest()
        items = obj if type(obj) is list else (obj,)
        for item in items:
            try:
                out.add(self.record(item, default_probe, latest))
            except ParseError as exc:
                out.rejects.append((exc.reason, raw if len(items) == 1 else orjson.dumps(item)))
        return out

    def lines(self, lines: Iterable[bytes], out: ParsedReadings | None = None) -> ParsedReadings:
        """JSON Lines (without their newlines); blank lines are skipped."""
        out = ParsedReadings() if out is None else out
        loads = orjson.loads
        decode_error = orjson.JSONDecodeError
        record = self.record
        limit = self.max_bytes
        latest = self._latest()
        P, T, M, C, O = out.probe, out.ts, out.mv, out.temp_c, out.ohms
        rejects = out.rejects
        for raw in lines:
            if len(raw) > limit:
                rejects.append((f"too long: {len(raw)} bytes, the limit is {limit}", raw))
                continue
            try:
                obj = loads(raw)
            except decode_error as exc:
                if raw.strip():
                    rejects.append((f"not valid JSON: {exc}", raw))
                continue
            try:
                p, t, m, c, o = record(obj, None, latest)
            except ParseError as exc:
                rejects.append((exc.reason, raw))
                continue
            P.append(p)
            T.append(t)
            M.append(m)
            C.append(c)
            O.append(o)
        return out
