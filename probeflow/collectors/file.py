"""File collector: replays a recording (JSON Lines, CSV or Parquet).

Rows keep their own timestamps.  ``speed`` sets the pace: 1 replays in real
time, 60 plays a minute of recording per second, 0 as fast as possible.
Rows are emitted in batches of at most ``batch_rows``; a row that is due is
never held back for a fuller batch.  Bad rows are quarantined with the reason
(source ``file:<path>``).

CSV: a header line naming the columns probe, ts, mv and optionally temp_c,
ohms; empty cells are absent values.  Parquet: the same column names; ts may
be a timestamp column, a number (epoch s) or RFC 3339 text.
"""

from __future__ import annotations

import csv
import math
import threading
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any, Literal

import numpy as np
import orjson
from pydantic import Field

from probeflow.batch import ReadingBatch
from probeflow.collectors.base import CollectorConfigBase, CollectorContext
from probeflow.collectors.parse import DEFAULT_MAX_RECORD_BYTES, ParsedReadings, RecordParser
from probeflow.errors import CollectorError, ParseError

__all__ = ["FileCollector", "FileCollectorConfig"]

_READ_CHUNK = 20000


class FileCollectorConfig(CollectorConfigBase):
    type: Literal["file"] = "file"
    path: str
    format: Literal["auto", "jsonl", "csv", "parquet"] = "auto"
    speed: float = Field(default=0.0, ge=0.0)
    batch_rows: int = Field(default=5000, ge=1)
    max_line_bytes: int = DEFAULT_MAX_RECORD_BYTES


def _format_of(path: Path, given: str) -> str:
    if given != "auto":
        return given
    suffix = path.suffix.lower()
    if suffix in (".parquet", ".pq"):
        return "parquet"
    if suffix == ".csv":
        return "csv"
    return "jsonl"


class FileCollector:
    """Replays one recording file, then reports ``done``."""

    Config = FileCollectorConfig

    def __init__(self, config: FileCollectorConfig, context: CollectorContext) -> None:
        self.config = config
        self.context = context
        self.path = Path(config.path)
        self.format = _format_of(self.path, config.format)
        self.parser = RecordParser(context.known_probes, max_bytes=config.max_line_bytes,
                                   future_s=None)
        self.source = f"file:{self.path}"
        self._done = threading.Event()
        self._thread = threading.Thread(target=self._run, name=f"file-{self.path.name}", daemon=True)

    def start(self) -> None:
        if not self.path.is_file():
            raise CollectorError(f"the recording {self.path} does not exist or is not a file")
        self._thread.start()

    def stop(self, timeout: float = 5.0) -> None:
        self.context.stop_event.set()
        self._thread.join(timeout)

    @property
    def done(self) -> bool:
        return self._done.is_set()

    # -- reading ------------------------------------------------------------------
    def _run(self) -> None:
        try:
            pacer = _Pacer(self.config.speed, self.context.stop_event)
            for parsed in self._chunks():
                for reason, raw in parsed.rejects:
                    self.context.quarantine(reason, raw)
                if len(parsed):
                    self._emit(parsed.batch(), pacer)
                if self.context.stop_event.is_set():
                    break
        except (OSError, CollectorError) as exc:
            self.context.counters.last_error = str(exc)
            if self.context.log is not None:
                self.context.log.error("recording_unreadable", path=str(self.path), error=str(exc))
        finally:
            self._done.set()

    def _emit(self, batch: ReadingBatch, pacer: _Pacer) -> None:
        size = self.config.batch_rows
        start = 0
        n = len(batch)
        while start < n and not self.context.stop_event.is_set():
            end = pacer.due_until(batch.ts, start, size)
            self.context.emit(_slice(batch, start, end))
            start = end

    def _chunks(self) -> Iterator[ParsedReadings]:
        if self.format == "jsonl":
            yield from self._jsonl()
        elif self.format == "csv":
            yield from self._csv()
        else:
            yield from self._parquet()

    def _jsonl(self) -> Iterator[ParsedReadings]:
        with open(self.path, "rb") as f:
            while True:
                lines = f.readlines(1 << 22)
                if not lines:
                    return
                yield self.parser.lines([ln.rstrip(b"\r\n") for ln in lines])

    def _csv(self) -> Iterator[ParsedReadings]:
        with open(self.path, encoding="utf-8", errors="surrogateescape", newline="") as f:
            reader = csv.reader(f)
            header = next(reader, None)
            if header is None:
                return
            header = [h.strip() for h in header]
            missing = {"probe", "ts", "mv"} - set(header)
            if missing:
                raise CollectorError(f"{self.path}: the CSV header lacks {', '.join(sorted(missing))}")
            out = ParsedReadings()
            for row in reader:
                if not row or not any(cell.strip() for cell in row):
                    continue
                raw = ",".join(row)
                try:
                    if len(row) != len(header):
                        raise ParseError(f"wrong number of columns: {len(row)}, the header has {len(header)}")
                    out.add(self.parser.record(_csv_record(header, row)))
                except ParseError as exc:
                    out.rejects.append((exc.reason, raw.encode("utf-8", "surrogateescape")))
                if len(out) + len(out.rejects) >= _READ_CHUNK:
                    yield out
                    out = ParsedReadings()
            yield out

    def _parquet(self) -> Iterator[ParsedReadings]:
        import pyarrow.parquet as pq

        try:
            pf = pq.ParquetFile(self.path)
        except Exception as exc:  # pyarrow raises several types for a bad file
            raise CollectorError(f"{self.path} is not a readable Parquet file: {exc}") from exc
        names = set(pf.schema_arrow.names)
        missing = {"probe", "ts", "mv"} - names
        if missing:
            raise CollectorError(f"{self.path}: the Parquet file lacks columns {', '.join(sorted(missing))}")
        columns = [c for c in ("probe", "ts", "mv", "temp_c", "ohms") if c in names]
        for record_batch in pf.iter_batches(batch_size=65536, columns=columns):
            yield _parquet_chunk(record_batch, self.parser)


def _csv_record(header: list[str], row: list[str]) -> dict[str, Any]:
    rec: dict[str, Any] = {}
    for key, cell in zip(header, row):
        cell = cell.strip()
        if key == "probe":
            rec[key] = cell
        elif key in ("ts", "mv", "temp_c", "ohms"):
            if cell == "":
                continue
            try:
                rec[key] = float(cell)
            except ValueError:
                if key == "ts":
                    rec[key] = cell  # RFC 3339 text
                else:
                    raise ParseError(f"{key} is not a number: {cell[:40]!r}") from None
    return rec


def _parquet_chunk(record_batch: Any, parser: RecordParser) -> ParsedReadings:
    import pyarrow as pa

    table = {name: record_batch.column(i) for i, name in enumerate(record_batch.schema.names)}
    n = record_batch.num_rows
    probe = np.array(table["probe"].to_pylist(), dtype=object)
    ts_col = table["ts"]
    out = ParsedReadings()
    bad = np.zeros(n, dtype=bool)
    reasons: list[str | None] = [None] * n
    if pa.types.is_timestamp(ts_col.type):
        ts = ts_col.cast(pa.timestamp("us", tz="UTC")).cast(pa.int64()).to_numpy(zero_copy_only=False)
        ts = ts.astype(np.float64) / 1e6
    elif pa.types.is_integer(ts_col.type) or pa.types.is_floating(ts_col.type):
        ts = ts_col.to_numpy(zero_copy_only=False).astype(np.float64)
    else:
        ts = np.full(n, np.nan)
        for i, value in enumerate(ts_col.to_pylist()):
            try:
                ts[i] = parser.record({"probe": "-", "ts": value, "mv": 0.0})[1] if value is not None else np.nan
            except ParseError as exc:
                reasons[i] = exc.reason
    cols = {}
    for name in ("mv", "temp_c", "ohms"):
        if name in table:
            col = table[name]
            if not (pa.types.is_floating(col.type) or pa.types.is_integer(col.type)):
                raise CollectorError(f"Parquet column {name} is {col.type}, not a number")
            cols[name] = col.to_numpy(zero_copy_only=False).astype(np.float64)
        else:
            cols[name] = np.full(n, np.nan)

    def flag(mask: np.ndarray, reason: str) -> None:
        for i in np.flatnonzero(mask & ~bad).tolist():
            if reasons[i] is None:
                reasons[i] = reason
        bad[mask] = True

    flag(np.array([r is not None for r in reasons], dtype=bool), "")
    not_text = np.array([type(p) is not str for p in probe], dtype=bool)
    flag(not_text, "missing probe")
    known = parser.known_probes
    if known is not None:
        flag(np.array([p not in known for p in probe], dtype=bool) & ~not_text, "unknown probe")
    flag(~np.isfinite(ts), "ts is missing or not a finite number")
    with np.errstate(invalid="ignore"):
        flag(np.isfinite(ts) & (ts < 946684800.0), "ts is before the year 2000")
    flag(~np.isfinite(cols["mv"]), "mv is missing or not a finite number")
    flag(np.isinf(cols["temp_c"]), "temp_c is not a finite number")
    flag(np.isinf(cols["ohms"]), "ohms is not a finite number")
    good = ~bad
    out.probe = probe[good].tolist()
    out.ts = ts[good].tolist()
    out.mv = cols["mv"][good].tolist()
    out.temp_c = cols["temp_c"][good].tolist()
    out.ohms = cols["ohms"][good].tolist()
    if bad.any():
        rows = record_batch.to_pylist()
        for i in np.flatnonzero(bad).tolist():
            reason = reasons[i] or "invalid row"
            if reason == "unknown probe":
                reason = f"unknown probe: {probe[i]}"
            out.rejects.append((reason, orjson.dumps(rows[i], default=str)))
    return out


def _slice(batch: ReadingBatch, start: int, end: int) -> ReadingBatch:
    if start == 0 and end == len(batch):
        return batch
    return ReadingBatch(batch.probe[start:end], batch.ts[start:end], batch.mv[start:end],
                        batch.temp_c[start:end], batch.ohms[start:end])


class _Pacer:
    """Maps recording time to wall time: row with ts t is due at
    wall0 + (t - t0) / speed."""

    def __init__(self, speed: float, stop: threading.Event) -> None:
        self.speed = speed
        self.stop = stop
        self.t0: float | None = None
        self.wall0 = 0.0

    def due_until(self, ts: np.ndarray, start: int, size: int) -> int:
        """End index (exclusive) of the rows from ``start`` that are due, waiting if none is."""
        end = min(len(ts), start + size)
        if self.speed <= 0:
            return end
        if self.t0 is None:
            self.t0 = float(ts[start])
            self.wall0 = time.monotonic()
        while True:
            now_rec = self.t0 + (time.monotonic() - self.wall0) * self.speed
            due = int(np.searchsorted(ts[start:end], now_rec, side="right"))
            if due > 0:
                return start + due
            if self.stop.is_set():
                return start + 1
            wait = (float(ts[start]) - now_rec) / self.speed
            self.stop.wait(min(max(wait, 0.0), 0.5) if math.isfinite(wait) else 0.5)
