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

Fast paths: a chunk of JSON lines is first decoded line by line with msgspec
into a typed record (:class:`_TypedRecord`: numbers must be numbers, the probe
text or absent, other keys skipped, all in C), then range-checked a column at
a time with numpy.  When any line fails that, or for the records of one MQTT
payload, the records decoded by orjson are checked column by column (the set
of value types per field, then numpy range checks).  When any record fails
either, the chunk goes through the per-record path, which gives each reject
its reason.  All give the same readings (tested in tests/perf).
"""

from __future__ import annotations

import math
import operator
import time
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from itertools import repeat
from typing import Any

import msgspec
import numpy as np
import orjson

from probeflow.batch import ReadingBatch
from probeflow.errors import ParseError

__all__ = [
    "DEFAULT_MAX_RECORD_BYTES",
    "EARLIEST_TS",
    "LATEST_TS",
    "ParsedReadings",
    "RecordParser",
    "reason_kind",
    "timestamp_from_value",
]

DEFAULT_MAX_RECORD_BYTES = 65536
"""Longest accepted line or payload [bytes]; larger input is quarantined unparsed."""

EARLIEST_TS = 946684800.0
"""2000-01-01T00:00:00Z: an earlier timestamp is taken as a clock fault."""

LATEST_TS = 4102444800.0
"""2100-01-01T00:00:00Z: a timestamp at or after this is taken as a clock or data
fault by default (``RecordParser(latest_ts=...)``; a recording's collector sets
it from its ``latest_time`` key).  Beyond year 9999 a time has no RFC 3339 form."""

_NAN = math.nan
_NUMBER_TYPES = frozenset({float, int})
_OPTIONAL_TYPES = frozenset({float, int, type(None)})
_FLOAT_ONLY = frozenset({float})
_NONE_ONLY = frozenset({type(None)})


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
    """At most 40 characters showing ``value`` in a reason.  Text that is not
    valid Unicode (surrogate escapes of undecodable bytes) is shown escaped."""
    if isinstance(value, bytes):
        text = repr(value)
    else:
        try:
            text = orjson.dumps(value, default=str).decode()
        except orjson.JSONEncodeError:
            text = ascii(value)
    return text if len(text) <= 40 else text[:37] + "..."


def _timestamp(value: Any) -> float:
    """Epoch seconds of a JSON ``ts`` value (a finite number, or RFC 3339 text
    with a time zone), else ParseError.  Range checks are the caller's."""
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


timestamp_from_value = _timestamp


def _number_column(values: list[Any], optional: bool) -> list[float] | None:
    """``values`` as floats when each is a finite JSON number (or null, if
    ``optional``: taken as NaN), else None.  Used by the columnar fast path."""
    kinds = set(map(type, values))
    if not kinds <= (_OPTIONAL_TYPES if optional else _NUMBER_TYPES):
        return None
    if kinds == _NONE_ONLY:
        return [_NAN] * len(values)   # the field is absent or null everywhere
    try:
        arr = np.array(values, dtype=np.float64)
    except (OverflowError, TypeError, ValueError):
        return None
    if kinds == _FLOAT_ONLY:
        return values if np.isfinite(arr).all() else None
    if np.isinf(arr).any() or (not optional and np.isnan(arr).any()):
        return None
    return arr.tolist()  # type: ignore[no-any-return]


class _TypedRecord(msgspec.Struct, gc=False):
    """A reading record as the msgspec fast path decodes it.  A string ``ts``
    (RFC 3339), a wrong type or a malformed line fails the decode and sends the
    chunk to the other paths, which know every rule and reason."""

    ts: float
    mv: float
    probe: str | None = None
    temp_c: float | None = None
    ohms: float | None = None


_decode_typed = msgspec.json.Decoder(_TypedRecord).decode
_typed_fields = [operator.attrgetter(name) for name in ("probe", "ts", "mv", "temp_c", "ohms")]


class RecordParser:
    """Validates reading records for one source.

    known_probes  accepted probe ids (None: any id)
    max_bytes     longest accepted raw line or payload
    future_s      how far a timestamp may lie ahead of this computer's clock [s]
                  (None: no limit relative to the clock, e.g. for recordings)
    latest_ts     a timestamp at or after this is refused whatever the clock
                  says [epoch s] (default :data:`LATEST_TS`, 2100-01-01)
    Timestamps before :data:`EARLIEST_TS` are always refused.
    """

    def __init__(self, known_probes: frozenset[str] | None = None, *,
                 max_bytes: int = DEFAULT_MAX_RECORD_BYTES,
                 future_s: float | None = 86400.0,
                 latest_ts: float = LATEST_TS) -> None:
        self.known_probes = known_probes
        self.max_bytes = max_bytes
        self.future_s = future_s
        self.latest_ts = latest_ts

    def latest(self) -> float:
        """Timestamps at or after this are refused now [epoch s]."""
        if self.future_s is None:
            return self.latest_ts
        return min(time.time() + self.future_s, self.latest_ts)

    _latest = latest

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
        if t >= (self._latest() if latest is None else latest):
            raise ParseError(f"ts is too far in the future: {t!r}")
        return (probe, t, _number(mv, "mv"), _optional(obj.get("temp_c"), "temp_c"),
                _optional(obj.get("ohms"), "ohms"))

    def columns(self, objs: Sequence[Any], default_probe: str | None = None,
                latest: float | None = None) -> tuple[list[str], list[float], list[float],
                                                      list[float], list[float]] | None:
        """Columns ``(probe, ts, mv, temp_c, ohms)`` of decoded records when
        *every* one is valid, checked a column at a time; None when any is not
        (the caller then takes the per-record path, which names each reason).
        Same values as :meth:`record` on each item (tested)."""
        if not objs or set(map(type, objs)) != {dict}:
            return None
        get = dict.get
        n = len(objs)
        probes = list(map(get, objs, repeat("probe", n), repeat(default_probe, n)))
        if set(map(type, probes)) != {str}:
            return None
        raw_ts = list(map(get, objs, repeat("ts", n)))
        ts = _number_column(raw_ts, optional=False)
        if ts is None:
            return None   # missing, RFC 3339 text or bad: the per-record path decides
        if not self._known_and_in_time(probes, ts, self._latest() if latest is None else latest):
            return None
        mv = _number_column(list(map(get, objs, repeat("mv", n))), optional=False)
        if mv is None:
            return None
        temp = _number_column(list(map(get, objs, repeat("temp_c", n))), optional=True)
        if temp is None:
            return None
        ohms = _number_column(list(map(get, objs, repeat("ohms", n))), optional=True)
        if ohms is None:
            return None
        return probes, ts, mv, temp, ohms

    def _extend(self, out: ParsedReadings, objs: Sequence[Any], default_probe: str | None,
                latest: float) -> bool:
        cols = self.columns(objs, default_probe, latest)
        if cols is None:
            return False
        out.probe.extend(cols[0])
        out.ts.extend(cols[1])
        out.mv.extend(cols[2])
        out.temp_c.extend(cols[3])
        out.ohms.extend(cols[4])
        return True

    def _known_and_in_time(self, probes: list[str], ts: list[float], latest: float) -> bool:
        """Column checks shared by both fast paths: every probe accepted, every
        time in [EARLIEST_TS, latest) (NaN fails too)."""
        known = self.known_probes
        if known is not None and not known.issuperset(probes):
            return False
        ts_arr = np.asarray(ts, dtype=np.float64)
        return bool(ts_arr.min() >= EARLIEST_TS and ts_arr.max() < latest)

    def _typed_lines(self, out: ParsedReadings, lines: list[bytes], latest: float) -> bool:
        """The msgspec fast path of :meth:`lines` (see the module docstring):
        False, with ``out`` untouched, unless every line is a valid record."""
        try:
            objs = list(map(_decode_typed, lines))
        except msgspec.DecodeError:   # also ValidationError, its subclass
            return False
        probe_of, ts_of, mv_of, temp_of, ohms_of = _typed_fields
        probes = list(map(probe_of, objs))
        if None in probes:
            return False   # missing or null probe: a JSON source names it in each record
        ts = list(map(ts_of, objs))
        if not self._known_and_in_time(probes, ts, latest):
            return False
        mv = list(map(mv_of, objs))
        if not np.isfinite(np.array(mv, dtype=np.float64)).all():
            return False
        temp = np.array(list(map(temp_of, objs)), dtype=np.float64)   # None -> NaN
        ohms = np.array(list(map(ohms_of, objs)), dtype=np.float64)
        if np.isinf(temp).any() or np.isinf(ohms).any():
            return False
        out.probe.extend(probes)
        out.ts.extend(ts)
        out.mv.extend(mv)
        out.temp_c.extend(temp.tolist())
        out.ohms.extend(ohms.tolist())
        return True

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
        if not items:
            out.rejects.append(("empty array: a payload must hold at least one reading", raw))
            return out
        if len(items) > 1 and self._extend(out, items, default_probe, latest):
            return out
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
        if not isinstance(lines, list):
            lines = list(lines)
        if lines and max(map(len, lines)) <= limit:
            if self._typed_lines(out, lines, latest):
                return out
            try:
                objs = list(map(loads, lines))
            except decode_error:
                objs = None   # a bad or blank line: the per-line path below
            if objs is not None and self._extend(out, objs, None, latest):
                return out
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
