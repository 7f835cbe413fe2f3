"""File outputs: readings and ground truth as JSON Lines (orjson) or Parquet (pyarrow).

Both are byte-identical for the same seed and arguments: nothing in them
depends on the wall clock, the host or the speed of the run.  Missing
temperatures are left out of JSON lines and are nulls in Parquet.
"""

from __future__ import annotations

import json
import queue
import threading
from pathlib import Path
from typing import Any

import numpy as np
import orjson
import pyarrow as pa
import pyarrow.parquet as pq

from probeflow.errors import ProbeflowError
from probeflow.simulate.encode import encode_lines
from probeflow.simulate.faults import fault_names
from probeflow.simulate.generator import Readings, Truth

__all__ = [
    "READING_SCHEMA",
    "TRUTH_SCHEMA",
    "JsonLinesOutput",
    "ParquetOutput",
    "TruthOutput",
    "file_format",
    "open_reading_file",
]

_PROBE = pa.dictionary(pa.int32(), pa.string())
READING_SCHEMA = pa.schema([
    ("probe", _PROBE), ("ts", pa.float64()), ("mv", pa.float64()),
    ("temp_c", pa.float64()), ("ohms", pa.float64()),
])
TRUTH_SCHEMA = pa.schema([
    ("probe", _PROBE), ("ts", pa.float64()), ("ph", pa.float64()), ("seen_ph", pa.float64()),
    ("temp_c", pa.float64()), ("offset_mv", pa.float64()), ("slope_pct", pa.float64()),
    ("zero_ph", pa.float64()), ("fault_mask", pa.uint16()), ("faults", _PROBE),
])


def file_format(path: str | Path) -> str:
    """``jsonl`` or ``parquet`` from the file name; ProbeflowError otherwise."""
    suffix = Path(path).suffix.lower()
    if suffix in (".jsonl", ".ndjson"):
        return "jsonl"
    if suffix in (".parquet", ".pq"):
        return "parquet"
    raise ProbeflowError(f"{path}: the file name must end in .jsonl or .parquet")


def _open(path: str | Path) -> Any:
    try:
        return open(path, "wb")
    except OSError as exc:
        raise ProbeflowError(f"{path}: cannot create the output file ({exc.strerror})") from exc


def _probe_array(names: tuple[str, ...], code: np.ndarray) -> pa.DictionaryArray:
    return pa.DictionaryArray.from_arrays(pa.array(code, pa.int32()), pa.array(names, pa.string()))


def _nullable(x: np.ndarray) -> pa.Array:
    return pa.array(x, pa.float64(), from_pandas=True)


class JsonLinesOutput:
    """One JSON reading per line; garbled readings are written with their corrupted bytes."""

    def __init__(self, path: str | Path) -> None:
        self.path = Path(path)
        self._fh = _open(self.path)

    def write(self, readings: Readings) -> None:
        if len(readings):
            self._fh.write(b"\n".join(encode_lines(readings, "json")) + b"\n")

    def close(self) -> None:
        self._fh.close()


class ParquetOutput:
    """Columns probe (dictionary), ts, mv, temp_c, ohms; garbling does not apply to columns.

    ``compression``: lz4 (default: the cheapest in CPU per row of the codecs every
    Parquet reader knows), zstd (about half the size, more CPU), snappy or none.
    Compression and encoding run on a writer thread (pyarrow releases the GIL), so
    the next chunk is generated while the previous one is written.  Rows are cut
    into row groups of exactly ``ROW_GROUP`` rows (the last may be shorter) whatever
    the sizes of the writes, so the file's bytes depend only on the readings.
    """

    ROW_GROUP = 1 << 20

    def __init__(self, path: str | Path, metadata: dict[str, str] | None = None,
                 compression: str = "lz4") -> None:
        self.path = Path(path)
        self._fh = _open(self.path)
        schema = READING_SCHEMA.with_metadata(metadata or {})
        self._writer = pq.ParquetWriter(self._fh, schema, compression=compression,
                                        use_dictionary=["probe"], write_statistics=["ts"])
        self._pending: list[pa.Table] = []
        self._pending_rows = 0
        self._queue: queue.Queue[pa.Table | None] = queue.Queue(maxsize=2)
        self._error: BaseException | None = None
        self._thread = threading.Thread(target=self._drain, name="parquet-writer", daemon=True)
        self._thread.start()

    def _drain(self) -> None:
        while True:
            table = self._queue.get()
            if table is None:
                return
            if self._error is None:
                try:
                    self._writer.write_table(table, row_group_size=table.num_rows)
                except Exception as exc:  # noqa: BLE001 -- reported by the next write or close
                    self._error = exc

    def _check(self) -> None:
        if self._error is not None:
            raise ProbeflowError(f"{self.path}: writing the Parquet file failed: {self._error}")

    def write(self, readings: Readings) -> None:
        self._check()
        if not len(readings):
            return
        table = pa.Table.from_arrays([
            _probe_array(readings.probes, readings.code), pa.array(readings.ts),
            pa.array(readings.mv), _nullable(readings.temp_c), _nullable(readings.ohms),
        ], schema=self._writer.schema)
        self._pending.append(table)
        self._pending_rows += table.num_rows
        while self._pending_rows >= self.ROW_GROUP:
            joined = pa.concat_tables(self._pending)
            self._queue.put(joined.slice(0, self.ROW_GROUP))
            rest = joined.slice(self.ROW_GROUP)
            self._pending, self._pending_rows = [rest], rest.num_rows

    def _flush(self) -> None:
        if self._pending_rows:
            self._queue.put(pa.concat_tables(self._pending))
        self._pending, self._pending_rows = [], 0

    def close(self) -> None:
        self._flush()
        self._queue.put(None)
        self._thread.join()
        self._writer.close()
        self._fh.close()
        self._check()


class TruthOutput:
    """Ground truth per generated sample: JSON Lines or Parquet (chosen by the file name).

    The fault schedule goes in the Parquet key-value metadata (``fault_schedule``, JSON)
    and, for JSON Lines, in a first line ``{"kind": "fault_schedule", "faults": [...]}``.
    """

    def __init__(self, path: str | Path, metadata: dict[str, str]) -> None:
        self.path = Path(path)
        self.format = file_format(path)
        self._fh = _open(self.path)
        self._writer: pq.ParquetWriter | None = None
        if self.format == "parquet":
            self._writer = pq.ParquetWriter(self._fh, TRUTH_SCHEMA.with_metadata(metadata),
                                            use_dictionary=["probe", "faults"])
        else:
            schedule = json.loads(metadata.get("fault_schedule", "[]"))
            self._fh.write(orjson.dumps({"kind": "fault_schedule", "faults": schedule}) + b"\n")

    def write(self, truth: Truth) -> None:
        if not len(truth):
            return
        masks, inverse = np.unique(truth.fault_mask, return_inverse=True)
        names = tuple(fault_names(int(m)) for m in masks)
        if self._writer is not None:
            table = pa.Table.from_arrays([
                _probe_array(truth.probes, truth.code), pa.array(truth.ts), pa.array(truth.ph),
                pa.array(truth.seen_ph), pa.array(truth.temp_c), pa.array(truth.offset_mv),
                pa.array(truth.slope_pct), pa.array(truth.zero_ph), pa.array(truth.fault_mask),
                _probe_array(names, inverse.astype(np.int32)),
            ], schema=self._writer.schema)
            self._writer.write_table(table)
            return
        rows = zip(truth.code.tolist(), truth.ts.tolist(), truth.ph.tolist(), truth.seen_ph.tolist(),
                   truth.temp_c.tolist(), truth.offset_mv.tolist(), truth.slope_pct.tolist(),
                   truth.zero_ph.tolist(), truth.fault_mask.tolist(), inverse.tolist())
        out = []
        for c, t, ph, seen, temp, off, slope, zero, mask, inv in rows:
            out.append(orjson.dumps({
                "probe": truth.probes[c], "ts": t, "ph": ph, "seen_ph": seen, "temp_c": temp,
                "offset_mv": off, "slope_pct": slope, "zero_ph": zero, "fault_mask": mask,
                "faults": names[inv],
            }))
        self._fh.write(b"\n".join(out) + b"\n")

    def close(self) -> None:
        if self._writer is not None:
            self._writer.close()
        self._fh.close()


def open_reading_file(path: str | Path, metadata: dict[str, str] | None = None,
                      compression: str = "lz4") -> JsonLinesOutput | ParquetOutput:
    """The file output for ``path`` by its extension (.jsonl or .parquet)."""
    if file_format(path) == "jsonl":
        return JsonLinesOutput(path)
    return ParquetOutput(path, metadata, compression)
