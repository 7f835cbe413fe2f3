"""Figures the exporter reads from other stages: the database outbox depth
(from the influx store's attributes) and the alarms active (from the rules
engine), read in-process from the exporter's own registry."""

from __future__ import annotations

import io
from pathlib import Path

import orjson
import pytest
from prometheus_client import generate_latest
from prometheus_client.parser import text_string_to_metric_families
from reliability_harness import free_port, wait_until

from probeflow.config import load_config
from probeflow.service.log import Log
from probeflow.service.metrics import MetricsExporter
from probeflow.service.pipeline import build_service

N = 40
TOKEN_ENV = "PF_RELIABILITY_SOURCES_TOKEN"


def samples(exporter: MetricsExporter) -> dict[tuple[str, tuple[tuple[str, str], ...]], float]:
    text = generate_latest(exporter.registry).decode()
    return {(s.name, tuple(sorted(s.labels.items()))): s.value
            for family in text_string_to_metric_families(text) for s in family.samples}


def test_outbox_depth_and_active_alarms_are_exported(write_config, tmp_path: Path,
                                                     monkeypatch: pytest.MonkeyPatch) -> None:
    pytest.importorskip("probeflow.stores.influx", reason="probeflow/stores/influx.py not importable yet")
    monkeypatch.setenv(TOKEN_ENV, "sources-test-token")
    recording = tmp_path / "rec.jsonl"
    # tank-3 (offset -3.1 mV, slope 98.2 %) at -300 mV and 25 °C reads about pH 12: above 9.0
    recording.write_bytes(b"".join(
        orjson.dumps({"probe": "tank-3", "ts": 1764633600.0 + i, "mv": -300.0, "temp_c": 25.0}) + b"\n"
        for i in range(N)))
    config = load_config(write_config(f"""\
        collectors:
          - type: file
            path: {recording}
        stores:
          - type: sqlite
            path: store.sqlite
          - type: influx
            name: tsdb
            url: http://127.0.0.1:{free_port()}
            org: works
            bucket: ph
            token_env: {TOKEN_ENV}
            outbox_path: {tmp_path / "outbox.sqlite"}
            flush_timeout_s: 0.2
            timeout_s: 1
        rules:
          bands:
            - id: tank-ph
              probes: [tank-3]
              quantity: ph
              low: 6.0
              high: 9.0
              deadband: 0.1
              on_delay_s: 0
              off_delay_s: 0
        """))
    service = build_service(config, base_dir=str(tmp_path), log=Log(io.StringIO()))
    exporter = MetricsExporter(service)
    service.start()
    try:
        wait_until(lambda: samples(exporter).get(("probeflow_readings_out_total",
                                                  (("store", "tsdb"),))) == N,
                   "the readings to reach the influx store's outbox")
        wait_until(lambda: samples(exporter).get(("probeflow_alarms_active",
                                                  (("state", "unack_active"),))) == 1,
                   "the band alarm to be counted as active")
        got = samples(exporter)
    finally:
        service.request_stop()
        service.run()
    assert got[("probeflow_outbox_lines", (("store", "tsdb"),))] >= N  # readings (+ alert events)
    assert got[("probeflow_outbox_rows", (("store", "tsdb"),))] >= 1
    assert 0 < got[("probeflow_outbox_quota_fraction", (("store", "tsdb"),))] < 1
    assert ("probeflow_outbox_rows", (("store", "sqlite#stores[0]"),)) not in got
    assert got[("probeflow_alerts_total", ())] >= 1
