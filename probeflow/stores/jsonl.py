"""JSON Lines stores: processed records and alert events to a file or stdout.

Each reading becomes ``{"kind": "reading", "probe", "ts" (RFC 3339 UTC), "mv",
"temp_c", "ph", "neutral_ph", "neutral_dev", "quality"}``; each alert event
its ``AlertEvent.to_record()`` (``{"kind": "alert", ...}``).  NaN is written
as null.  Lines are built from the columns in bulk: timestamps formatted by
numpy, records encoded by orjson.
"""

from __future__ import annotations

import os
import sys
import threading
from collections.abc import Sequence
from pathlib import Path
from typing import IO, Literal

import numpy as np
import orjson

from probeflow.batch import QUALITY_NAMES, ProcessedBatch, QuarantineItem
from probeflow.errors import StoreError
from probeflow.events import AlertEvent, rfc3339
from probeflow.stores.base import StoreConfigBase, StoreContext

__all__ = ["JsonLinesStore", "StdoutStore", "encode_alerts", "encode_quarantine", "encode_readings",
           "reading_records", "rfc3339_column"]


def rfc3339_column(ts: np.ndarray) -> list[str]:
    """Epoch seconds -> RFC 3339 UTC strings with microseconds (same text as ``events.rfc3339``)."""
    us = np.round(ts * 1e6).astype("datetime64[us]")
    return [s + "Z" for s in np.datetime_as_string(us, unit="us").tolist()]


def _nulls(values: np.ndarray) -> list[float | None]:
    out: list[float | None] = values.tolist()
    if np.isnan(values).any():
        for i in np.flatnonzero(np.isnan(values)).tolist():
            out[i] = None
    return out


_QUALITY_JSON = [orjson.dumps(name) for name in QUALITY_NAMES]
_READING_LINE = (b'{"kind":"reading","probe":%s,"ts":"%sZ","mv":%s,"temp_c":%s,"ph":%s,'
                 b'"neutral_ph":%s,"neutral_dev":%s,"quality":%s}')


def _json_numbers(values: np.ndarray) -> list[bytes]:
    """One JSON number (or null for NaN) per element, encoded by orjson in one call."""
    return orjson.dumps(values, option=orjson.OPT_SERIALIZE_NUMPY)[1:-1].split(b",")


def encode_readings(batch: ProcessedBatch) -> bytes:
    """The batch as JSON lines (each ending in a newline), built in bulk.

    Each float column is encoded by one ``orjson.dumps`` of the numpy array
    (NaN becomes null) and split into its numbers; probe ids are JSON-encoded
    once per distinct id; timestamps come from :func:`rfc3339_column`.  The
    result equals ``orjson.dumps`` of each record dict (tested).
    """
    n = len(batch)
    if not n:
        return b""
    probes = batch.probe.tolist()
    probe_json = {p: orjson.dumps(p) for p in set(probes)}
    us = np.round(batch.ts * 1e6).astype("datetime64[us]")
    stamps = np.datetime_as_string(us, unit="us").astype("S").tolist()
    quality = [_QUALITY_JSON[q] for q in batch.quality.tolist()]
    rows = zip([probe_json[p] for p in probes], stamps, _json_numbers(batch.mv),
               _json_numbers(batch.temp_c), _json_numbers(batch.ph), _json_numbers(batch.neutral_ph),
               _json_numbers(batch.neutral_dev), quality)
    line = _READING_LINE
    return b"\n".join([line % row for row in rows]) + b"\n"


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

    def _put(self, stream: IO[bytes] | None, data: bytes) -> None:
        if stream is None or not data:
            return
        with self._lock:
            try:
                stream.write(data)
            except (OSError, ValueError) as exc:
                raise StoreError(f"writing JSON lines failed: {exc}") from exc

    def write(self, batch: ProcessedBatch, alerts: Sequence[AlertEvent]) -> None:
        self._put(self._out(), encode_readings(batch) + encode_alerts(alerts))

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
