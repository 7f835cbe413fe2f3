"""File collector: replays a recording (JSON Lines, CSV or Parquet).

Rows keep their own timestamps.  ``speed`` sets the pace: 1 replays in real
time, 60 plays a minute of recording per second, 0 as fast as possible.
Rows are emitted in batches of at most ``batch_rows``; a row that is due is
never held back for a fuller batch.  Bad rows are quarantined with the reason
(source ``file:<path>``).

CSV: a header line naming the columns probe, ts, mv and optionally temp_c,
ohms; empty cells are absent values.  A CSV file is read line by line: a row
is one line (a line break inside quotes is not supported: reading values never
need one), so a stray or unclosed quote costs its own row, never the rows
after it.  A row longer than ``max_line_bytes`` or not valid UTF-8 is
quarantined (a too-long row keeps its first ``max_line_bytes`` bytes there).

Parquet: the same column names; ts may be a timestamp column, a number (epoch
s) or RFC 3339 text.  A value column stored as text is read cell by cell like
CSV cells; a cell that is not a number, or a column of another type, puts its
rows in quarantine with the reason.

Every format: a time before 2000-01-01 or at/after ``latest_time`` (default
2100-01-01T00:00:00Z, e.g. a corrupt 1e300 or year 9999) is quarantined.
"""

from __future__ import annotations

import csv
import math
import threading
import time
from collections.abc import Iterator
from datetime import UTC, datetime
from pathlib import Path
from typing import IO, Any, Literal

import numpy as np
import orjson
from pydantic import AwareDatetime, Field, field_validator

from probeflow.batch import ReadingBatch
from probeflow.collectors.base import CollectorConfigBase, CollectorContext
from probeflow.collectors.parse import (
    DEFAULT_MAX_RECORD_BYTES,
    EARLIEST_TS,
    LATEST_TS,
    ParsedReadings,
    RecordParser,
    timestamp_from_value,
)
from probeflow.errors import CollectorError, ParseError

__all__ = ["FileCollector", "FileCollectorConfig"]

_READ_CHUNK = 20000


class FileCollectorConfig(CollectorConfigBase):
    type: Literal["file"] = "file"
    path: str
    format: Literal["auto", "jsonl", "csv", "parquet"] = "auto"
    speed: float = Field(default=0.0, ge=0.0)
    batch_rows: int = Field(default=50_000, ge=1)   # large: a fast replay commits in big transactions
    max_line_bytes: int = Field(default=DEFAULT_MAX_RECORD_BYTES, ge=16)
    latest_time: AwareDatetime = datetime.fromtimestamp(LATEST_TS, UTC)
    """Rows stamped at or after this (RFC 3339 with a time zone) are quarantined
    as "too far in the future"; rows before 2000-01-01 always are."""

    @field_validator("latest_time")
    @classmethod
    def _after_earliest(cls, value: datetime) -> datetime:
        if value.timestamp() <= EARLIEST_TS:
            raise ValueError("latest_time must be after 2000-01-01T00:00:00Z "
                             "(every earlier time is refused anyway)")
        return value


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
                                   future_s=None, latest_ts=config.latest_time.timestamp())
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

    @property
    def clock_pace(self) -> float:
        """Recorded time runs at this pace (0: as fast as possible); the service's
        time-based rules then follow the recording's clock, not this computer's."""
        return float(self.config.speed)

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
        limit = self.config.max_line_bytes
        with open(self.path, "rb") as f:
            lines = _bounded_lines(f, limit)
            first = next(lines, None)
            if first is None:
                return
            if first[1] > limit:
                raise CollectorError(f"{self.path}: the CSV header line is longer than {limit} bytes")
            try:
                header = [h.strip() for h in _csv_cells(first[0].decode("utf-8-sig", "replace"))]
            except ParseError as exc:
                raise CollectorError(f"{self.path}: the CSV header line is unreadable: {exc.reason}") from None
            missing = {"probe", "ts", "mv"} - set(header)
            if missing:
                raise CollectorError(f"{self.path}: the CSV header lacks {', '.join(sorted(missing))}")
            width = len(header)
            record = self.parser.record
            out = ParsedReadings()
            for raw, length in lines:
                try:
                    if length > limit:
                        raise ParseError(f"too long: {length} bytes, the limit is {limit}")
                    try:
                        text = raw.decode("utf-8")
                    except UnicodeDecodeError as exc:
                        raise ParseError(f"not valid UTF-8 text: byte {exc.start + 1} of the row "
                                         "cannot be decoded") from None
                    row = _csv_cells(text)
                    if not any(cell.strip() for cell in row):
                        continue
                    if len(row) != width:
                        raise ParseError(f"wrong number of columns: {len(row)}, the header has {width}")
                    out.add(record(_csv_record(header, row)))
                except ParseError as exc:
                    out.rejects.append((exc.reason, raw))
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


def _bounded_lines(f: IO[bytes], limit: int) -> Iterator[tuple[bytes, int]]:
    """``(line, length)`` for each line of ``f``, without its line ending.  A
    line longer than ``limit`` bytes comes cut to its first ``limit`` bytes
    (with its full length): the rest is skipped without holding it in memory."""
    readline = f.readline
    size = limit + 2   # room for the line ending (CR LF)
    while True:
        line = readline(size)
        if not line:
            return
        if line[-1:] == b"\n" or len(line) < size:   # a whole line (the last may lack \n)
            line = line.rstrip(b"\r\n")
            yield line, len(line)
            continue
        length = len(line)
        tail = line[-2:]
        while True:
            more = readline(1 << 16)
            if not more:
                break
            length += len(more)
            tail = (tail + more)[-2:]
            if more[-1:] == b"\n":
                break
        if tail[-1:] == b"\n":   # the length of the row, without its line ending
            length -= 2 if tail == b"\r\n" else 1
        yield line[:limit], length


def _csv_cells(text: str) -> list[str]:
    """The cells of one CSV line.  Quotes follow the csv module (strict), within
    this line only: a row with an unclosed or stray quote is refused alone."""
    if '"' not in text:
        return text.split(",")
    try:
        rows = list(csv.reader((text,), strict=True))
    except csv.Error as exc:
        raise ParseError(f"not valid CSV: {exc}") from None
    if len(rows) != 1:
        raise ParseError("not valid CSV: a line break inside the row")
    return rows[0]


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
    else:   # RFC 3339 text (or values of another type, each refused with its reason)
        ts = np.full(n, np.nan)
        for i, value in enumerate(ts_col.to_pylist()):
            if value is None:
                continue
            try:
                ts[i] = timestamp_from_value(value)
            except ParseError as exc:
                reasons[i] = exc.reason
    cols = {}
    for name in ("mv", "temp_c", "ohms"):
        if name in table:
            col = table[name]
            if pa.types.is_floating(col.type) or pa.types.is_integer(col.type):
                cols[name] = col.to_numpy(zero_copy_only=False).astype(np.float64)
            else:
                cols[name] = _parquet_numbers_from(col, name, reasons)
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
    flag(np.isfinite(ts) & (ts < EARLIEST_TS), "ts is before the year 2000")
    flag(np.isfinite(ts) & (ts >= parser.latest()), "ts is too far in the future")
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


def _parquet_numbers_from(col: Any, name: str, reasons: list[str | None]) -> np.ndarray:
    """A Parquet value column that is not stored as numbers, as float64 (null
    or an empty cell: NaN).  Text cells are read like CSV cells; a cell that is
    not a number, or any value of a column of another type, gets its row a
    reason in ``reasons`` (the first reason a row gets is kept)."""
    import pyarrow as pa

    if pa.types.is_dictionary(col.type):
        col = col.dictionary_decode()
    values = np.full(len(col), np.nan)
    if pa.types.is_decimal(col.type):
        return col.cast(pa.float64()).to_numpy(zero_copy_only=False).astype(np.float64)
    if pa.types.is_string(col.type) or pa.types.is_large_string(col.type):
        for i, cell in enumerate(col.to_pylist()):
            if cell is None or not cell.strip():
                continue
            try:
                values[i] = float(cell)
            except ValueError:
                if reasons[i] is None:
                    reasons[i] = f"{name} is not a number: {cell[:40]!r}"
        return values
    valid = col.is_valid().to_numpy(zero_copy_only=False)
    for i in np.flatnonzero(valid).tolist():
        if reasons[i] is None:
            reasons[i] = f"{name} is stored as {col.type}, not as a number"
    return values


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
