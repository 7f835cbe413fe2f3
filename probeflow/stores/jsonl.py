"""JSON Lines stores: processed records and alert events to a file or stdout.

Each reading becomes ``{"kind": "reading", "probe", "ts" (RFC 3339 UTC), "mv",
"temp_c", "ph", "neutral_ph", "neutral_dev", "quality"}``; each alert event
its ``AlertEvent.to_record()`` (``{"kind": "alert", ...}``).  NaN is written
as null, and so is a time that has no calendar form (not finite, or beyond
the range numpy's datetime64[us] holds): "NaT" is never written.  The
collectors quarantine such times, so this is only a last line of defence.
Lines are built from the columns in bulk: timestamps formatted by numpy,
records encoded by orjson.
"""

from __future__ import annotations

import functools
import os
import sys
import threading
from collections.abc import Sequence
from pathlib import Path
from typing import IO, Any, Literal

import numpy as np
import orjson

from probeflow.batch import QUALITY_NAMES, ProcessedBatch, QuarantineItem, factorize_probe_ids
from probeflow.errors import StoreError
from probeflow.events import AlertEvent, rfc3339
from probeflow.pipes import widen_pipe
from probeflow.stores.base import StoreConfigBase, StoreContext

__all__ = ["JsonLinesStore", "StdoutStore", "encode_alerts", "encode_quarantine", "encode_readings",
           "encoded_readings", "reading_records", "rfc3339_column", "rfc3339_stamps"]


_DATETIME64_US_LIMIT_S = 9.2e12
"""Just inside the range of datetime64[us] (2**63 microseconds, about 9.22e12 s)."""


def rfc3339_column(ts: np.ndarray) -> list[str | None]:
    """Epoch seconds -> RFC 3339 UTC strings with microseconds (same text as
    ``events.rfc3339``); None (JSON null) for a time that is not finite or is
    beyond datetime64[us], which numpy would print as "NaT"."""
    with np.errstate(invalid="ignore"):
        fits = np.abs(ts) < _DATETIME64_US_LIMIT_S   # False for NaN and infinities
    all_fit = bool(fits.all())
    us = np.round((ts if all_fit else np.where(fits, ts, 0.0)) * 1e6).astype("datetime64[us]")
    out: list[str | None] = [s + "Z" for s in np.datetime_as_string(us, unit="us").tolist()]
    if not all_fit:
        for i in np.flatnonzero(~fits).tolist():
            out[i] = None
    return out


def _nulls(values: np.ndarray) -> list[float | None]:
    out: list[float | None] = values.tolist()
    if np.isnan(values).any():
        for i in np.flatnonzero(np.isnan(values)).tolist():
            out[i] = None
    return out


_QUALITY_JSON = [orjson.dumps(name) for name in QUALITY_NAMES]
_READING_PIECES = (b'{"kind":"reading","probe":', b',"ts":"', b'","mv":', b'"temp_c":', b'"ph":',
                   b'"neutral_ph":', b'"neutral_dev":', b'"quality":', b"}\n")
"""The literal text around the eight values of a reading line (each number
column carries its own trailing comma, see :func:`_number_texts`)."""

_US_PER_DAY = 86_400_000_000
_STAMP_BYTES = 27   # 2025-12-02T00:00:00.000500Z
_COMMA = ord(",")


def _put_digits(out: np.ndarray, column: int, values: np.ndarray, width: int) -> None:
    """Write ``values`` (non-negative ints) as ``width`` ASCII digits from ``column`` on."""
    for k in range(width - 1, -1, -1):
        values, digit = np.divmod(values, 10)
        out[:, column + k] = digit + 48


def _stamp_matrix(ts: np.ndarray) -> np.ndarray | None:
    """RFC 3339 UTC stamps as an (n, 27) uint8 matrix of ASCII, or None when a
    time is not finite or its year is outside 0001-9999 (callers then use
    :func:`rfc3339_column`).  The date text is made once per distinct day;
    hours to microseconds are integer digits.  Rounds to the microsecond as
    :func:`rfc3339_column` does."""
    n = int(ts.shape[0])
    if not np.isfinite(ts).all():
        return None
    us = np.round(ts * 1e6).astype(np.int64)
    days, of_day = np.divmod(us, _US_PER_DAY)
    first = int(days.min())
    span = int(days.max()) - first + 1
    if span <= max(n, 64):
        day_index = days - first
        day_values = np.arange(first, first + span, dtype=np.int64)
    else:
        day_values, day_index = np.unique(days, return_inverse=True)
    date_text = np.datetime_as_string(day_values.astype("datetime64[D]"), unit="D").tolist()
    if any(len(d) != 10 for d in date_text):
        return None
    out = np.empty((n, _STAMP_BYTES), dtype=np.uint8)
    out[:, :10] = np.array(date_text, dtype="S10").view(np.uint8).reshape(-1, 10)[day_index]
    hours, rest = np.divmod(of_day, 3_600_000_000)
    minutes, rest = np.divmod(rest, 60_000_000)
    seconds, micros = np.divmod(rest, 1_000_000)
    for column, char in ((10, "T"), (13, ":"), (16, ":"), (19, "."), (26, "Z")):
        out[:, column] = ord(char)
    _put_digits(out, 11, hours, 2)
    _put_digits(out, 14, minutes, 2)
    _put_digits(out, 17, seconds, 2)
    _put_digits(out, 20, micros, 6)
    return out


def rfc3339_stamps(ts: np.ndarray) -> list[bytes]:
    """Epoch seconds -> RFC 3339 UTC timestamps as bytes, vectorised; equal to
    ``[s.encode() for s in rfc3339_column(ts)]`` (tested)."""
    if ts.shape[0] == 0:
        return []
    matrix = _stamp_matrix(ts)
    if matrix is None:
        return [s.encode() if s is not None else None  # type: ignore[misc]
                for s in rfc3339_column(ts)]
    return matrix.view(f"S{_STAMP_BYTES}").ravel().tolist()  # type: ignore[no-any-return]


def _binary_column(data: np.ndarray | bytes, offsets: np.ndarray) -> Any:
    """An Arrow large-binary column over ``data`` cut at ``offsets`` (int64, n + 1).

    Every Arrow object of the encoder is made from buffers like this (and its
    scalars by indexing such a column): ``pa.array`` and ``pa.scalar`` make
    pyarrow import pandas, 0.2 s at the start of every ``filter``."""
    import pyarrow as pa

    return pa.Array.from_buffers(pa.large_binary(), offsets.shape[0] - 1,
                                 [None, pa.py_buffer(offsets), pa.py_buffer(data)])


def _texts_column(texts: Sequence[bytes]) -> Any:
    offsets = np.zeros(len(texts) + 1, dtype=np.int64)
    np.cumsum(np.fromiter(map(len, texts), dtype=np.int64, count=len(texts)), out=offsets[1:])
    return _binary_column(b"".join(texts), offsets)


def _index_column(codes: np.ndarray) -> Any:
    import pyarrow as pa

    codes = np.ascontiguousarray(codes, dtype=np.int64)
    return pa.Array.from_buffers(pa.int64(), codes.shape[0], [None, pa.py_buffer(codes)])


_PROBE_JSON: dict[str, bytes] = {}
_PROBE_JSON_MAX = 65_536


def _probe_json_texts(ids: list[str]) -> list[bytes]:
    """Each probe id as JSON text, remembered across batches (a site has a fixed
    set of probes; the memory is dropped whole if it ever holds 65,536 ids).
    Raises orjson.JSONEncodeError for an id orjson cannot encode."""
    known = _PROBE_JSON
    texts = list(map(known.get, ids))
    if None in texts:
        if len(known) > _PROBE_JSON_MAX:
            known.clear()
        for i, text in enumerate(texts):
            if text is None:
                texts[i] = known[ids[i]] = orjson.dumps(ids[i])
    return texts  # type: ignore[return-value]


def _number_texts(values: np.ndarray) -> Any:
    """Arrow binary column of each float as JSON (null for NaN) *followed by a
    comma*: one ``orjson.dumps`` of the array, cut at its commas, without a
    Python object per number."""
    raw = np.frombuffer(orjson.dumps(values, option=orjson.OPT_SERIALIZE_NUMPY), dtype=np.uint8)
    data = raw[1:].copy()          # drop "[", turn the closing "]" into the last comma
    data[-1] = _COMMA
    offsets = np.empty(values.shape[0] + 1, dtype=np.int64)
    offsets[0] = 0
    offsets[1:] = np.flatnonzero(data == _COMMA) + 1
    return _binary_column(data, offsets)


@functools.cache
def _constant_columns() -> tuple[tuple[Any, ...], Any]:
    """Made once: the literal pieces of a line (and the empty separator) as Arrow
    scalars, and the quality names as a column to ``take`` from."""
    pieces = _texts_column([*_READING_PIECES, b""])
    return tuple(pieces[i] for i in range(len(pieces))), _texts_column(_QUALITY_JSON)


def _encode_readings_arrow(batch: ProcessedBatch) -> memoryview | None:
    """The columnar encoder behind :func:`encode_readings` (None: use the
    straightforward one).  Every column becomes an Arrow binary column, and
    ``binary_join_element_wise`` lays the lines out end to end in one buffer."""
    import pyarrow.compute as pc

    n = len(batch)
    stamps = _stamp_matrix(batch.ts)
    if stamps is None:
        return None
    found = factorize_probe_ids(batch.probe, sort=False)
    if found is None:
        return None   # ids that are not all strings: the straightforward path
    codes, distinct = found
    try:
        probe_texts = _probe_json_texts(distinct)
    except orjson.JSONEncodeError:
        return None   # e.g. a lone surrogate: the straightforward path raises it
    pieces, quality_texts = _constant_columns()
    columns = [
        _texts_column(probe_texts).take(_index_column(codes)),
        _binary_column(stamps.ravel(), np.arange(n + 1, dtype=np.int64) * _STAMP_BYTES),
        _number_texts(batch.mv),
        _number_texts(batch.temp_c),
        _number_texts(batch.ph),
        _number_texts(batch.neutral_ph),
        _number_texts(batch.neutral_dev),
        quality_texts.take(_index_column(batch.quality)),
    ]
    args: list[Any] = []
    for literal, column in zip(pieces, columns):
        args += [literal, column]
    args += [pieces[len(columns)], pieces[len(columns) + 1]]   # closing piece, empty separator
    lines = pc.binary_join_element_wise(*args)
    _validity, offsets_buffer, data_buffer = lines.buffers()
    offsets = np.frombuffer(offsets_buffer, dtype=np.int64, count=n + 1 + lines.offset)[lines.offset:]
    # a view of Arrow's buffer (it keeps the buffer alive): a batch's few MB are not copied
    return memoryview(data_buffer).toreadonly()[int(offsets[0]):int(offsets[-1])]


def encode_readings(batch: ProcessedBatch) -> bytes:
    """The batch as JSON lines (each ending in a newline), built in bulk.

    Each float column is encoded by one ``orjson.dumps`` of the numpy array
    (NaN becomes null) and cut into numbers in numpy; probe ids are JSON-encoded
    once per distinct id; timestamps come from :func:`_stamp_matrix`; Arrow
    joins the pieces row by row in C.  The result equals ``orjson.dumps`` of
    each record of :func:`reading_records` (tested), which is used directly
    for the rare batch the columnar path does not take (non-finite times,
    probe ids that are not strings).
    """
    return bytes(encoded_readings(batch))


def encoded_readings(batch: ProcessedBatch) -> bytes | memoryview:
    """:func:`encode_readings` without the final copy: the columnar path returns
    a read-only view of the encoder's buffer, which a stream can write as it is."""
    if not len(batch):
        return b""
    fast = _encode_readings_arrow(batch)
    if fast is not None:
        return fast
    return b"".join(orjson.dumps(r) + b"\n" for r in reading_records(batch))


def reading_records(batch: ProcessedBatch) -> list[dict[str, object]]:
    """The batch as record dicts (the straightforward form of :func:`encode_readings`)."""
    names = QUALITY_NAMES
    return [
        {"kind": "reading", "probe": p, "ts": t, "mv": m, "temp_c": c, "ph": h,
         "neutral_ph": n, "neutral_dev": d, "quality": names[q]}
        for p, t, m, c, h, n, d, q in zip(
            batch.probe.tolist(), rfc3339_column(batch.ts), _nulls(batch.mv),
            _nulls(batch.temp_c), _nulls(batch.ph), _nulls(batch.neutral_ph),
            _nulls(batch.neutral_dev), batch.quality.tolist())
    ]


def encode_alerts(alerts: Sequence[AlertEvent]) -> bytes:
    return b"".join(orjson.dumps(a.to_record()) + b"\n" for a in alerts)


def encode_quarantine(items: Sequence[QuarantineItem]) -> bytes:
    return b"".join(
        orjson.dumps({"kind": "quarantine", "source": i.source, "reason": i.reason, "raw": i.raw,
                      "received_ts": rfc3339(i.received_ts)}) + b"\n"
        for i in items)


class _StreamStore:
    durable = False

    def __init__(self) -> None:
        self._lock = threading.Lock()

    def _out(self) -> IO[bytes]:
        raise NotImplementedError  # pragma: no cover - subclasses define it

    def _quarantine_out(self) -> IO[bytes] | None:
        raise NotImplementedError  # pragma: no cover

    def _put(self, stream: IO[bytes] | None, *pieces: bytes | memoryview) -> None:
        """Write ``pieces`` one after the other, under the lock (nothing of another
        write comes between them)."""
        if stream is None or not any(pieces):
            return
        with self._lock:
            try:
                for data in pieces:
                    if data:
                        stream.write(data)
            except (OSError, ValueError) as exc:
                raise StoreError(f"writing JSON lines failed: {exc}") from exc

    def write(self, batch: ProcessedBatch, alerts: Sequence[AlertEvent]) -> None:
        self._put(self._out(), encoded_readings(batch), encode_alerts(alerts))

    def write_quarantine(self, items: Sequence[QuarantineItem]) -> None:
        self._put(self._quarantine_out(), encode_quarantine(items))

    def flush(self) -> None:
        with self._lock:
            for stream in (self._out(), self._quarantine_out()):
                if stream is not None:
                    try:
                        stream.flush()
                    except (OSError, ValueError) as exc:
                        raise StoreError(f"flushing JSON lines failed: {exc}") from exc


class JsonLinesStoreConfig(StoreConfigBase):
    type: Literal["jsonl"] = "jsonl"
    path: str
    quarantine_path: str | None = None   # default: <path>.quarantine.jsonl


def _open_private(path: Path) -> IO[bytes]:
    path.parent.mkdir(parents=True, exist_ok=True)
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_APPEND, 0o600)
    return os.fdopen(fd, "ab", buffering=1 << 16)


class JsonLinesStore(_StreamStore):
    """Appends records to a JSON Lines file (and rejects to a second file)."""

    Config = JsonLinesStoreConfig

    def __init__(self, config: JsonLinesStoreConfig, context: StoreContext | None = None) -> None:
        super().__init__()
        base = Path(context.base_dir if context is not None else ".")
        path = Path(config.path)
        self.path = path if path.is_absolute() else base / path
        qpath = Path(config.quarantine_path) if config.quarantine_path else Path(
            str(self.path) + ".quarantine.jsonl")
        self.quarantine_path = qpath if qpath.is_absolute() else base / qpath
        try:
            self._file = _open_private(self.path)
        except OSError as exc:
            raise StoreError(f"cannot open the JSON lines file {self.path}: {exc.strerror}") from exc
        self._qfile: IO[bytes] | None = None

    def _out(self) -> IO[bytes]:
        return self._file

    def _quarantine_out(self) -> IO[bytes] | None:
        return self._qfile

    def write_quarantine(self, items: Sequence[QuarantineItem]) -> None:
        if items and self._qfile is None:
            try:
                self._qfile = _open_private(self.quarantine_path)
            except OSError as exc:
                raise StoreError(f"cannot open {self.quarantine_path}: {exc.strerror}") from exc
        super().write_quarantine(items)

    def flush(self) -> None:
        super().flush()
        with self._lock:
            for f in (self._file, self._qfile):
                if f is not None:
                    os.fsync(f.fileno())

    def close(self) -> None:
        self.flush()
        for f in (self._file, self._qfile):
            if f is not None:
                f.close()


class StdoutStoreConfig(StoreConfigBase):
    type: Literal["stdout"] = "stdout"
    quarantine_path: str | None = None   # default: standard error


class StdoutStore(_StreamStore):
    """Records to standard output; rejects as ``{"kind": "quarantine", ...}``
    JSON lines to standard error (or ``quarantine_path``), so the output
    stream stays clean."""

    Config = StdoutStoreConfig

    def __init__(self, config: StdoutStoreConfig | None = None,
                 context: StoreContext | None = None) -> None:
        super().__init__()
        self._stdout = sys.stdout.buffer
        try:
            widen_pipe(self._stdout.fileno())   # speed only; see probeflow/pipes.py
        except (OSError, ValueError):   # io.UnsupportedOperation is both
            pass   # no file descriptor behind stdout (an embedding program's stream)
        self._qfile: IO[bytes] | None = None
        if config is not None and config.quarantine_path:
            base = Path(context.base_dir if context is not None else ".")
            qpath = Path(config.quarantine_path)
            qpath = qpath if qpath.is_absolute() else base / qpath
            try:
                self._qfile = _open_private(qpath)
            except OSError as exc:
                raise StoreError(f"cannot open {qpath}: {exc.strerror}") from exc

    def _out(self) -> IO[bytes]:
        return self._stdout

    def _quarantine_out(self) -> IO[bytes] | None:
        return self._qfile if self._qfile is not None else sys.stderr.buffer

    def close(self) -> None:
        try:
            self.flush()
        except StoreError:
            pass  # a closed pipe downstream: nothing left to write to
        if self._qfile is not None:
            self._qfile.close()
