"""Reading recordings for the backtest: JSON Lines or Parquet, in chunks of columns.

A recording holds either processed records (``{"kind": "reading", "probe",
"ts", "mv", "temp_c", "ph", "neutral_ph", "neutral_dev", "quality"}``, as the
service writes them; alert lines in the same file are skipped) or raw
readings (``{"probe", "ts", "mv", "temp_c"}``), which need a converter built
from the site config.  ``ts`` is epoch seconds or an RFC 3339 string.
Files are read with pyarrow in blocks, so memory stays bounded.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from pathlib import Path

import numpy as np
import orjson
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.json as pj
import pyarrow.parquet as pq

from probeflow.batch import QUALITY_NAMES, ProcessedBatch, ReadingBatch
from probeflow.errors import ProbeflowError

__all__ = ["Convert", "iter_recording", "recording_is_processed"]

Convert = Callable[[ReadingBatch], ProcessedBatch]
_QUALITY_CODE = {name: i for i, name in enumerate(QUALITY_NAMES)}
_PROCESSED = ("ph", "neutral_ph", "neutral_dev", "quality")


def _first_record(path: Path) -> dict[str, object]:
    with path.open("rb") as f:
        for line in f:
            if line.strip():
                try:
                    rec = orjson.loads(line)
                except orjson.JSONDecodeError as exc:
                    raise ProbeflowError(f"{path}: the first line is not JSON ({exc})") from exc
                if isinstance(rec, dict) and rec.get("kind", "reading") == "reading":
                    return rec
    raise ProbeflowError(f"{path}: the recording holds no readings")


def recording_is_processed(path: str | Path) -> bool:
    """True for processed records (with pH), False for raw readings."""
    p = Path(path)
    if p.suffix.lower() in (".parquet", ".pq"):
        return all(c in pq.ParquetFile(p).schema_arrow.names for c in ("ph", "quality"))
    return "ph" in _first_record(p)


def _epoch(col: pa.ChunkedArray | pa.Array) -> np.ndarray:
    if pa.types.is_string(col.type) or pa.types.is_large_string(col.type):
        stamps = pd.to_datetime(pd.Series(col.to_pandas()), utc=True, format="ISO8601")
        ns = stamps.dt.tz_convert(None).to_numpy().astype("datetime64[ns]").astype(np.int64)
        return ns // 1000 / 1e6  # whole microseconds, as rfc3339() writes them
    if pa.types.is_timestamp(col.type):
        return col.cast(pa.timestamp("us")).cast(pa.int64()).to_numpy(zero_copy_only=False) / 1e6
    return np.asarray(col.to_numpy(zero_copy_only=False), dtype=np.float64)


def _floats(table: pa.Table, name: str) -> np.ndarray:
    if name not in table.column_names:
        return np.full(table.num_rows, np.nan)
    col = table.column(name).cast(pa.float64())
    return col.to_numpy(zero_copy_only=False).astype(np.float64)


def _quality(table: pa.Table) -> np.ndarray:
    col = table.column("quality")
    if pa.types.is_integer(col.type):
        return col.to_numpy(zero_copy_only=False).astype(np.uint8)
    names = pd.Series(col.to_pandas())
    codes = names.map(_QUALITY_CODE)
    if codes.isna().any():
        bad = sorted(set(names[codes.isna()].astype(str)))[:3]
        raise ProbeflowError(f"unknown quality names in the recording: {', '.join(bad)}")
    return codes.to_numpy().astype(np.uint8)


def _table_to_batch(table: pa.Table, convert: Convert | None, path: Path) -> ProcessedBatch | None:
    if "kind" in table.column_names:  # records without a kind are readings
        is_reading = pc.fill_null(pc.equal(table.column("kind"), "reading"), True)
        table = table.filter(is_reading)
    if table.num_rows == 0:
        return None
    for need in ("probe", "ts"):
        if need not in table.column_names:
            raise ProbeflowError(f"{path}: records have no {need!r} field")
    probe = np.asarray(table.column("probe").to_pandas(), dtype=object)
    ts = _epoch(table.column("ts"))
    if all(c in table.column_names for c in _PROCESSED):
        return ProcessedBatch(probe, ts, _floats(table, "mv"), _floats(table, "temp_c"),
                              _floats(table, "ph"), _floats(table, "neutral_ph"),
                              _floats(table, "neutral_dev"), _quality(table))
    if convert is None:
        raise ProbeflowError(f"{path} holds raw readings (no pH); give --config with the probes' "
                             "calibrations so they can be converted")
    raw = ReadingBatch.from_columns(probe, ts, _floats(table, "mv"), _floats(table, "temp_c"),
                                    _floats(table, "ohms"))
    return convert(raw)


def iter_recording(path: str | Path, convert: Convert | None = None,
                   block_bytes: int = 32 << 20, progress: Callable[[int], None] | None = None
                   ) -> Iterator[ProcessedBatch]:
    """Chunks of the recording as processed batches; ``progress(n)`` gets bytes (JSONL) or rows."""
    p = Path(path)
    if not p.exists():
        raise ProbeflowError(f"recording {p} does not exist")
    if p.suffix.lower() in (".parquet", ".pq"):
        pf = pq.ParquetFile(p)
        for rb in pf.iter_batches(batch_size=1_000_000):
            table = pa.Table.from_batches([rb])
            batch = _table_to_batch(table, convert, p)
            if progress:
                progress(rb.num_rows)
            if batch is not None:
                yield batch
        return
    first = _first_record(p)
    fields = {"probe": pa.string(), "kind": pa.string()}
    fields["ts"] = pa.string() if isinstance(first.get("ts"), str) else pa.float64()
    for name in ("mv", "temp_c", "ohms", "ph", "neutral_ph", "neutral_dev"):
        if name in first:
            fields[name] = pa.float64()
    if "quality" in first:
        fields["quality"] = pa.string() if isinstance(first["quality"], str) else pa.int64()
    schema = pa.schema(list(fields.items()))
    reader = pj.open_json(
        p, read_options=pj.ReadOptions(block_size=block_bytes),
        parse_options=pj.ParseOptions(explicit_schema=schema, unexpected_field_behavior="ignore"),
    )
    done = 0
    try:
        for rb in reader:
            table = pa.Table.from_batches([rb])
            batch = _table_to_batch(table, convert, p)
            if progress:
                # pyarrow does not report the byte position; spread by rows read
                done += rb.num_rows
                progress(rb.num_rows)
            if batch is not None:
                yield batch
    except pa.ArrowInvalid as exc:
        raise ProbeflowError(f"{p}: cannot read the recording: {exc}") from exc
