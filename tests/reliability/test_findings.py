"""Defects the reliability suite found in code this suite does not own, now fixed.

Each test states the behaviour the contract asks for (bad input is counted and
quarantined with its reason, never fatal; nothing is lost silently) and keeps
the defect from coming back.
"""

from __future__ import annotations

from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from reliability_harness import Recorder, wait_until

from probeflow.collectors.file import FileCollector, FileCollectorConfig
from probeflow.config import load_config_text
from probeflow.errors import ConfigError


def replay(path: Path) -> tuple[Recorder, FileCollector]:
    recorder = Recorder()
    collector = FileCollector(FileCollectorConfig(path=str(path)), recorder.context(f"file:{path.name}"))
    collector.start()
    wait_until(lambda: collector.done, f"the replay of {path.name}", poll_s=0.005)
    collector.stop(timeout=5.0)
    return recorder, collector


def test_parquet_recording_with_rfc3339_text_times_is_read(tmp_path: Path) -> None:
    path = tmp_path / "rec.parquet"
    pq.write_table(pa.table({"probe": ["tank-3", "tank-4"],
                             "ts": ["2025-12-01T00:00:00Z", "2025-12-01T00:00:01+00:00"],
                             "mv": [-12.0, 30.0]}), path)
    recorder, _ = replay(path)
    assert [q.reason for q in recorder.quarantined] == []
    # 2025-12-01T00:00:00Z = 1764547200 s (reference: datetime(2025, 12, 1, tzinfo=UTC).timestamp())
    assert recorder.rows() == [("tank-3", 1764547200.0, -12.0), ("tank-4", 1764547201.0, 30.0)]


@pytest.mark.parametrize("cell", ["probe", "ts"])
def test_csv_row_with_invalid_utf8_is_quarantined_and_reading_goes_on(
        tmp_path: Path, cell: str) -> None:
    bad = {"probe": b"tank\xff-3,1764633600.0,-1.0", "ts": b"tank-3,17646\xff33600.0,-1.0"}[cell]
    path = tmp_path / "rec.csv"
    path.write_bytes(b"probe,ts,mv\n" + bad + b"\ntank-3,1764633601.0,-2.0\n")
    recorder, collector = replay(path)
    assert collector.context.counters.quarantined == 1
    assert recorder.rows() == [("tank-3", 1764633601.0, -2.0)]


@pytest.mark.parametrize("ts", ["1e300", '"9999-12-31T23:59:59Z"', "4102444800.0"])
def test_recording_times_far_in_the_future_are_quarantined(tmp_path: Path, ts: str) -> None:
    path = tmp_path / "rec.jsonl"
    path.write_text('{"probe": "tank-3", "ts": ' + ts + ', "mv": 1.0}\n')
    recorder, _ = replay(path)
    assert recorder.readings == 0
    assert len(recorder.quarantined) == 1 and "future" in recorder.quarantined[0].reason


def test_parquet_column_of_the_wrong_type_puts_its_rows_in_quarantine(tmp_path: Path) -> None:
    path = tmp_path / "rec.parquet"
    pq.write_table(pa.table({"probe": ["tank-3", "tank-4"], "ts": [1764633600.0, 1764633601.0],
                             "mv": ["-12.0", "n/a"]}), path)
    recorder, collector = replay(path)
    assert recorder.readings + collector.context.counters.quarantined == 2


def _alias_bomb(levels: int) -> str:
    lines = ['a0: &a0 ["x","x","x","x","x","x","x","x","x","x"]']
    for i in range(1, levels):
        lines.append(f"a{i}: &a{i} [" + ",".join([f"*a{i - 1}"] * 10) + "]")
    return "\n".join(lines) + f"\nprobes: [{{id: tank-3}}]\nsite: *a{levels - 1}\n"


def test_yaml_alias_expansion_is_bounded() -> None:
    # 5 levels = 100 000 expanded nodes from 60 written: already refused, cheaply, once fixed
    with pytest.raises(ConfigError) as caught:
        load_config_text(_alias_bomb(5), "bomb.yaml")
    assert "alias" in str(caught.value).lower()


def test_influx_store_with_the_service_log_survives_an_unreachable_server(tmp_path: Path) -> None:
    import io

    import numpy as np
    from reliability_harness import free_port

    from probeflow.batch import ProcessedBatch
    from probeflow.service.log import Log
    from probeflow.stores.base import StoreContext
    from probeflow.stores.influx import InfluxStore, InfluxStoreConfig

    stream = io.StringIO()
    config = InfluxStoreConfig(url=f"http://127.0.0.1:{free_port()}", org="works", bucket="ph",
                               outbox_path=str(tmp_path / "outbox.sqlite"), flush_timeout_s=0.5,
                               timeout_s=1, retry_initial_s=0.05, retry_max_s=0.1)
    store = InfluxStore(config, StoreContext("test-works", log=Log(stream), base_dir=str(tmp_path)))
    f = np.array([7.0])
    store.write(ProcessedBatch(np.array(["tank-3"], dtype=object), np.array([1764633600.0]),
                               f, f, f, f, f, np.zeros(1, dtype=np.uint8)), [])
    import threading

    forwarder = next(t for t in threading.enumerate() if t.name == "influx-forwarder")
    wait_until(lambda: store.failed_attempts >= 1, "a failed send", poll_s=0.02)
    forwarder.join(1.0)  # a healthy forwarder keeps retrying: the join times out
    assert forwarder.is_alive()
    store.close()
    assert "influx" in stream.getvalue()


@pytest.mark.parametrize("text", ["'[': 1\nprobes: [{id: tank-3}]\n",
                                  "probes: [{id: tank-3, 'slope[2]': 1}]\n"])
def test_a_key_with_a_bracket_is_reported_by_name(text: str) -> None:
    with pytest.raises(ConfigError) as caught:
        load_config_text(text, "bracket.yaml")
    assert any("[" in key.split(".")[-1].replace("probes[0]", "") for key, _m in caught.value.problems)


@pytest.mark.skipif(not Path("/dev/full").exists(), reason="needs /dev/full (a disk that is always full)")
def test_rows_a_store_cannot_flush_at_shutdown_are_counted_as_lost(tmp_path: Path) -> None:
    import io

    import orjson

    from probeflow.service.log import Log
    from probeflow.service.pipeline import build_service

    recording = tmp_path / "rec.jsonl"
    recording.write_bytes(b"".join(
        orjson.dumps({"probe": "tank-3", "ts": 1764633600.0 + i, "mv": 1.0}) + b"\n" for i in range(10)))
    config = load_config_text(
        f"site: full-works\nprobes: [{{id: tank-3}}]\ncollectors: [{{type: file, path: {recording}}}]\n"
        f"stores: [{{type: jsonl, path: /dev/full, quarantine_path: {tmp_path / 'q.jsonl'}}}]\n"
        "service: {stop_timeout_s: 1}\n", "full.yaml")
    stats = build_service(config, log=Log(io.StringIO())).run()
    counters = stats.per_store["jsonl#stores[0]"]
    assert counters["lost_rows"] == 10


def test_an_oversize_csv_row_is_quarantined_and_reading_goes_on(tmp_path: Path) -> None:
    path = tmp_path / "rec.csv"
    path.write_bytes(b"probe,ts,mv\ntank-3,1764633600.0," + b"9" * 200_000
                     + b"\ntank-3,1764633601.0,-2.0\n")
    recorder, collector = replay(path)
    assert collector.context.counters.quarantined == 1
    assert recorder.rows() == [("tank-3", 1764633601.0, -2.0)]
