"""Bad input at the edges the findings left open: CSV quoting and size limits,
Parquet columns of other types, the recording time window, empty MQTT arrays,
times the JSON Lines encoder cannot print, and YAML aliases.

Reference for every epoch value below: the standard library's
``datetime(..., tzinfo=UTC).timestamp()`` (computed in the test, not typed in).
"""

from __future__ import annotations

import decimal
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import orjson
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from reliability_harness import Recorder, wait_until

from probeflow.batch import ProcessedBatch
from probeflow.collectors.file import FileCollector, FileCollectorConfig
from probeflow.collectors.parse import LATEST_TS, RecordParser, reason_kind
from probeflow.config import load_config_text
from probeflow.errors import ConfigError
from probeflow.stores.jsonl import encode_readings

T0 = datetime(2025, 12, 2, tzinfo=UTC).timestamp()


def replay(path: Path, **config: object) -> tuple[Recorder, FileCollector]:
    recorder = Recorder()
    collector = FileCollector(FileCollectorConfig(path=str(path), **config),  # type: ignore[arg-type]
                              recorder.context(f"file:{path.name}"))
    collector.start()
    wait_until(lambda: collector.done, f"the replay of {path.name}", poll_s=0.005)
    collector.stop(timeout=5.0)
    return recorder, collector


# -- CSV ----------------------------------------------------------------------------------
def test_a_lone_quote_costs_its_own_row_only(tmp_path: Path) -> None:
    bad = f'tank-3,"{T0 + 1},-1.0'.encode()
    path = tmp_path / "rec.csv"
    path.write_bytes(b"probe,ts,mv\n" + f"tank-3,{T0},-2.0\n".encode() + bad + b"\n"
                     + f"tank-4,{T0 + 2},-3.0\ntank-3,{T0 + 3},-4.0\n".encode())
    recorder, collector = replay(path)
    assert recorder.rows() == [("tank-3", T0, -2.0), ("tank-4", T0 + 2, -3.0), ("tank-3", T0 + 3, -4.0)]
    assert [(reason_kind(q.reason), q.raw) for q in recorder.quarantined] == [("not valid CSV", bad.decode())]
    assert collector.context.counters.quarantined == 1


def test_quoted_cells_crlf_and_a_byte_order_mark_are_read(tmp_path: Path) -> None:
    path = tmp_path / "rec.csv"
    path.write_bytes(b'\xef\xbb\xbf"probe","ts","mv"\r\n'
                     + f'"tank-3","{T0}","-1.5"\r\ntank-4,{T0 + 1},2.5\r\n'.encode())
    recorder, _ = replay(path)
    assert recorder.quarantined == []
    assert recorder.rows() == [("tank-3", T0, -1.5), ("tank-4", T0 + 1, 2.5)]


def test_an_oversize_csv_row_keeps_its_head_in_quarantine(tmp_path: Path) -> None:
    head = f"tank-3,{T0},".encode()
    path = tmp_path / "rec.csv"
    path.write_bytes(b"probe,ts,mv\n" + head + b"7" * 5000 + b"\n" + f"tank-3,{T0 + 1},-2.0".encode())
    recorder, _ = replay(path, max_line_bytes=100)
    assert recorder.rows() == [("tank-3", T0 + 1, -2.0)]   # the last line has no newline
    [item] = recorder.quarantined
    assert item.reason == f"too long: {len(head) + 5000} bytes, the limit is 100"
    assert item.raw == (head + b"7" * (100 - len(head))).decode()


def test_a_row_exactly_at_the_limit_is_read(tmp_path: Path) -> None:
    line = f"tank-3,{T0},-2.0".encode()
    path = tmp_path / "rec.csv"
    path.write_bytes(b"probe,ts,mv\r\n" + line + b"\r\n")
    recorder, _ = replay(path, max_line_bytes=len(line))
    assert recorder.rows() == [("tank-3", T0, -2.0)] and recorder.quarantined == []


def test_invalid_utf8_anywhere_in_a_csv_row_is_quarantined(tmp_path: Path) -> None:
    bad = f"tank-3,{T0},-1.0,2\xff".encode("latin-1")
    path = tmp_path / "rec.csv"
    path.write_bytes(b"probe,ts,mv,temp_c\n" + bad + b"\n" + f"tank-3,{T0 + 1},-2.0,\n".encode())
    recorder, _ = replay(path)
    assert recorder.rows() == [("tank-3", T0 + 1, -2.0)]
    assert [reason_kind(q.reason) for q in recorder.quarantined] == ["not valid UTF-8 text"]


# -- the recording time window ----------------------------------------------------------
@pytest.mark.parametrize("suffix", ["jsonl", "csv", "parquet"])
def test_latest_time_is_configurable_in_every_format(tmp_path: Path, suffix: str) -> None:
    limit = datetime(2030, 1, 1, tzinfo=UTC)
    times = [limit.timestamp() - 1.0, limit.timestamp(), datetime(9999, 12, 31, tzinfo=UTC).timestamp()]
    path = tmp_path / f"rec.{suffix}"
    if suffix == "jsonl":
        path.write_bytes(b"".join(orjson.dumps({"probe": "tank-3", "ts": t, "mv": 1.0}) + b"\n" for t in times))
    elif suffix == "csv":
        path.write_text("probe,ts,mv\n" + "".join(f"tank-3,{t!r},1.0\n" for t in times))
    else:
        pq.write_table(pa.table({"probe": ["tank-3"] * 3, "ts": times, "mv": [1.0] * 3}), path)
    recorder, _ = replay(path, latest_time=limit)
    assert recorder.rows() == [("tank-3", times[0], 1.0)]
    assert [reason_kind(q.reason) for q in recorder.quarantined] == ["ts is too far in the future"] * 2


def test_the_default_window_ends_at_2100() -> None:
    assert LATEST_TS == datetime(2100, 1, 1, tzinfo=UTC).timestamp()
    assert FileCollectorConfig(path="x").latest_time.timestamp() == LATEST_TS


def test_a_live_parser_keeps_the_ceiling_however_far_ahead_it_allows() -> None:
    parser = RecordParser(frozenset({"tank-3"}), future_s=1e12)
    good = parser.payload(orjson.dumps({"probe": "tank-3", "ts": LATEST_TS - 1, "mv": 1.0}))
    bad = parser.payload(orjson.dumps({"probe": "tank-3", "ts": LATEST_TS, "mv": 1.0}))
    assert len(good) == 1 and good.rejects == []
    assert len(bad) == 0 and [reason_kind(r) for r, _ in bad.rejects] == ["ts is too far in the future"]


def test_a_latest_time_not_after_2000_is_a_config_error(tmp_path: Path) -> None:
    text = ("probes: [{id: tank-3}]\ncollectors:\n  - type: file\n    path: rec.jsonl\n"
            "    latest_time: '1999-12-31T00:00:00Z'\n")
    with pytest.raises(ConfigError) as caught:
        load_config_text(text, "window.yaml")
    [(key, message)] = caught.value.problems
    assert key == "collectors[0].latest_time" and "after 2000" in message
    assert "window.yaml:5" in str(caught.value)


# -- Parquet ------------------------------------------------------------------------------
def test_parquet_text_values_are_read_cell_by_cell(tmp_path: Path) -> None:
    path = tmp_path / "rec.parquet"
    pq.write_table(pa.table({"probe": ["tank-3", "tank-4", "tank-3"], "ts": [T0, T0 + 1, T0 + 2],
                             "mv": ["-12.5", "n/a", None]}), path)
    recorder, _ = replay(path)
    assert recorder.rows() == [("tank-3", T0, -12.5)]
    assert [q.reason for q in recorder.quarantined] == ["mv is not a number: 'n/a'",
                                                        "mv is missing or not a finite number"]


def test_parquet_columns_of_other_types(tmp_path: Path) -> None:
    """A boolean temperature is refused row by row; decimal mV and dictionary-encoded
    RFC 3339 times are read (2025-12-02T00:00:00Z = T0)."""
    path = tmp_path / "rec.parquet"
    ts = pa.array(["2025-12-02T00:00:00Z", "2025-12-02T00:00:01Z"]).dictionary_encode()
    mv = pa.array([decimal.Decimal("-12.25"), decimal.Decimal("3.50")], pa.decimal128(6, 2))
    pq.write_table(pa.table({"probe": ["tank-3", "tank-4"], "ts": ts, "mv": mv,
                             "temp_c": pa.array([None, True], pa.bool_())}), path)
    recorder, _ = replay(path)
    assert recorder.rows() == [("tank-3", T0, -12.25)]
    assert [q.reason for q in recorder.quarantined] == ["temp_c is stored as bool, not as a number"]


# -- MQTT payloads ------------------------------------------------------------------------
@pytest.mark.parametrize("raw", [b"[]", b" [ ]\n"])
def test_an_empty_json_array_is_quarantined(raw: bytes) -> None:
    parsed = RecordParser(frozenset({"tank-3"})).payload(raw, default_probe="tank-3")
    assert len(parsed) == 0
    assert [(reason_kind(r), x) for r, x in parsed.rejects] == [("empty array", raw)]


# -- the JSON Lines encoder ---------------------------------------------------------------
def test_the_json_lines_encoder_never_writes_nat() -> None:
    ts = np.array([T0, np.nan, 1e300, -np.inf, T0 + 1])
    f = np.full(5, 7.0)
    batch = ProcessedBatch(np.array(["tank-3"] * 5, dtype=object), ts, f, f, f, f, f,
                           np.zeros(5, dtype=np.uint8))
    out = encode_readings(batch)
    assert b"NaT" not in out
    stamps = [orjson.loads(line)["ts"] for line in out.splitlines()]
    assert stamps == ["2025-12-02T00:00:00.000000Z", None, None, None, "2025-12-02T00:00:01.000000Z"]


# -- YAML aliases -------------------------------------------------------------------------
def test_an_alias_inside_its_own_anchor_is_refused() -> None:
    with pytest.raises(ConfigError) as caught:
        load_config_text("loop: &a {inner: *a}\nprobes: [{id: tank-3}]\n", "loop.yaml")
    assert caught.value.path == "loop.yaml" and "alias" in str(caught.value)


def test_a_shared_block_used_by_many_probes_is_accepted() -> None:
    """Ordinary alias use (one calibration block shared by 300 probes) stays under the bound."""
    probes = "\n".join(f"  - {{id: tank-{i}, calibration: *cal}}" for i in range(1, 300))
    text = ("probes:\n  - {id: tank-0, calibration: &cal {offset_mv: -3.1, slope_pct: 98.2, zero_ph: 7.0}}\n"
            + probes + "\n")
    config = load_config_text(text, "shared.yaml")
    assert len(config.probes) == 300
    assert {p.calibration.slope_pct for p in config.probes} == {98.2}
