"""The /metrics and /health endpoint (probeflow/service/metrics.py).

* ``probeflow run`` as a subprocess, fed N readings and M malformed lines on
  stdin: the scraped counters equal N and M, /health answers, and the socket
  listens on 127.0.0.1 only (read from the kernel's table, /proc/net/tcp).
* Two services in one process keep separate figures (no global registry).
* A collector that cannot start makes /health say degraded (HTTP 503).
"""

from __future__ import annotations

import io
import json
import socket
import subprocess
import textwrap
import urllib.error
import urllib.request
from pathlib import Path

import orjson
import pytest
from prometheus_client import REGISTRY
from prometheus_client.parser import text_string_to_metric_families
from reliability_harness import free_port, wait_until

from probeflow.config import load_config
from probeflow.errors import ProbeflowError
from probeflow.service.log import Log
from probeflow.service.metrics import MetricsExporter
from probeflow.service.pipeline import build_service


def scrape(port: int) -> dict[tuple[str, tuple[tuple[str, str], ...]], float]:
    """Parsed samples of /metrics: (name, sorted labels) -> value (empty if unreachable)."""
    try:
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/metrics", timeout=5) as response:
            text = response.read().decode()
    except OSError:
        return {}
    return {(s.name, tuple(sorted(s.labels.items()))): s.value
            for family in text_string_to_metric_families(text) for s in family.samples}


def health(port: int) -> tuple[int, dict]:
    try:
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/health", timeout=5) as response:
            return response.status, json.loads(response.read())
    except urllib.error.HTTPError as exc:
        return exc.code, json.loads(exc.read())


def listening_addresses(port: int) -> list[str]:
    """Local addresses of LISTEN sockets on ``port``, from /proc/net/tcp and tcp6."""
    found = []
    for table in ("/proc/net/tcp", "/proc/net/tcp6"):
        try:
            rows = Path(table).read_text().splitlines()[1:]
        except OSError:
            continue
        for row in rows:
            local, state = row.split()[1], row.split()[3]
            address, port_hex = local.rsplit(":", 1)
            if int(port_hex, 16) == port and state == "0A":  # 0A = TCP_LISTEN
                if len(address) == 8:
                    found.append(socket.inet_ntop(socket.AF_INET, bytes.fromhex(address)[::-1]))
                else:
                    raw = bytes.fromhex(address)
                    words = b"".join(raw[i:i + 4][::-1] for i in range(0, 16, 4))
                    found.append(socket.inet_ntop(socket.AF_INET6, words))
    return found


GOOD, BAD = 137, 23
COLLECTOR = "stdin#collectors[0]"
STORE = "sqlite#stores[0]"


def test_run_exports_counters_health_and_listens_on_loopback_only(
        write_config, tmp_path: Path, cli: list[str], cli_env: dict[str, str]) -> None:
    port = free_port()
    config = write_config(f"""\
        collectors:
          - type: stdin
        stores:
          - type: sqlite
            path: data/store.sqlite
        service:
          batch_ms: 5
          metrics: {{port: {port}}}
        """)
    lines = [orjson.dumps({"probe": "tank-3", "ts": 1764633600.0 + i, "mv": -10.0, "temp_c": 25.0})
             for i in range(GOOD)]
    malformed = [b"not json", b'{"probe": "tank-3", "ts": 1764633600, "mv": "high"}',
                 b'{"probe": "ghost-7", "ts": 1764633600, "mv": 1.0}', b"\xff\xfe", b"[1, 2"]
    lines += [malformed[i % len(malformed)] for i in range(BAD)]
    log = tmp_path / "run.log"
    with open(log, "wb") as log_file:
        proc = subprocess.Popen([*cli, "run", "--config", str(config)], cwd=tmp_path, env=cli_env,
                                stdin=subprocess.PIPE, stdout=subprocess.DEVNULL, stderr=log_file)
    assert proc.stdin is not None
    try:
        proc.stdin.write(b"\n".join(lines) + b"\n")
        proc.stdin.flush()
        wait_until(lambda: scrape(port).get(("probeflow_readings_out_total", (("store", STORE),)))
                   == GOOD, "the readings to be stored", detail=lambda: log.read_text()[-3000:])
        wait_until(lambda: scrape(port).get(("probeflow_quarantined_total",
                                             (("collector", COLLECTOR),))) == BAD,
                   "the malformed lines to be counted")
        samples = scrape(port)
        status, body = health(port)
        addresses = listening_addresses(port)
    finally:
        proc.stdin.close()
        proc.wait(timeout=60)
    assert proc.returncode == 0, log.read_text()[-3000:]
    assert samples[("probeflow_readings_in_total", (("collector", COLLECTOR),))] == GOOD
    assert samples[("probeflow_quarantined_total", (("collector", COLLECTOR),))] == BAD
    assert samples[("probeflow_readings_converted_total", ())] == GOOD
    assert samples[("probeflow_store_lost_rows_total", (("store", STORE),))] == 0
    assert samples[("probeflow_store_ok", (("store", STORE), ("type", "sqlite")))] == 1
    assert samples[("probeflow_lag_seconds", ())] > 0  # the readings are from 2025-12-02
    assert status == 200 and body["status"] == "ok" and body["problems"] == []
    assert body["collectors"][COLLECTOR]["received"] == GOOD
    assert body["collectors"][COLLECTOR]["quarantined"] == BAD
    assert body["stores"][STORE]["rows"] == GOOD
    assert addresses == ["127.0.0.1"]
    assert "metrics_listening" in log.read_text()


def _recording(path: Path, n: int) -> Path:
    path.write_bytes(b"".join(
        orjson.dumps({"probe": "tank-4", "ts": 1764633600.0 + i, "mv": 5.0}) + b"\n" for i in range(n))
        + b"garbage\n")
    return path


def test_two_services_in_one_process_keep_their_own_figures(write_config, tmp_path: Path) -> None:
    exporters = []
    for n in (11, 29):
        recording = _recording(tmp_path / f"rec-{n}.jsonl", n)
        config = load_config(write_config(f"""\
            collectors:
              - type: file
                path: {recording}
            stores:
              - type: sqlite
                path: store-{n}.sqlite
            """, name=f"site-{n}.yaml"))
        service = build_service(config, base_dir=str(tmp_path), log=Log(io.StringIO()))
        exporter = MetricsExporter(service, port=free_port(), log=service.log)
        exporter.start()
        exporters.append((n, exporter))
        service.run()
    try:
        for n, exporter in exporters:
            assert exporter.address is not None
            samples = scrape(exporter.address[1])
            assert samples[("probeflow_readings_in_total", (("collector", "file#collectors[0]"),))] == n
            assert samples[("probeflow_quarantined_total", (("collector", "file#collectors[0]"),))] == 1
            _status, body = health(exporter.address[1])
            assert body["collectors"]["file#collectors[0]"]["state"] == "finished"
    finally:
        for _n, exporter in exporters:
            exporter.stop()
    assert not [m for m in REGISTRY.collect() if m.name.startswith("probeflow")]


def test_a_collector_that_cannot_start_makes_health_degraded(write_config, tmp_path: Path) -> None:
    config = load_config(write_config(f"""\
        collectors:
          - type: file
            path: {tmp_path / "not-there.jsonl"}
        stores:
          - type: sqlite
            path: store.sqlite
        """))
    service = build_service(config, base_dir=str(tmp_path), log=Log(io.StringIO()),
                            retry_collectors=True)
    exporter = MetricsExporter(service, port=free_port(), log=service.log)
    exporter.start()
    try:
        service.start()
        assert exporter.address is not None
        status, body = health(exporter.address[1])
        samples = scrape(exporter.address[1])
    finally:
        service.request_stop()
        service.run()
        exporter.stop()
    assert status == 503 and body["status"] == "degraded"
    assert body["collectors"]["file#collectors[0]"]["state"] == "not_started"
    assert any("file#collectors[0]" in p for p in body["problems"])
    key = ("probeflow_collector_connected",
           (("collector", "file#collectors[0]"), ("type", "file")))
    assert samples[key] == 0


def test_port_zero_is_off_and_a_busy_port_is_a_clear_error(write_config, tmp_path: Path) -> None:
    config = load_config(write_config("stores:\n  - type: sqlite\n    path: s.sqlite\n"))
    service = build_service(config, base_dir=str(tmp_path), log=Log(io.StringIO()))
    off = MetricsExporter(service, port=0)
    off.start()
    assert off.address is None
    with socket.socket() as busy:
        busy.bind(("127.0.0.1", 0))
        busy.listen()
        taken = busy.getsockname()[1]
        with pytest.raises(ProbeflowError, match="service.metrics") as caught:
            MetricsExporter(service, port=taken).start()
    assert str(taken) in str(caught.value)
    service.shutdown()


def test_the_metrics_section_is_validated(write_config) -> None:
    from probeflow.errors import ConfigError

    with pytest.raises(ConfigError) as caught:
        load_config(write_config("service:\n  metrics: {port: 70000, hots: x}\n"))
    text = str(caught.value)
    assert "service.metrics.port" in text and "service.metrics.hots" in text
    assert textwrap.dedent(text).count("unknown key") == 1


def test_an_ipv6_loopback_host_is_honoured(write_config, tmp_path: Path) -> None:
    if not socket.has_ipv6 or not Path("/proc/net/tcp6").exists():
        pytest.skip("no IPv6 on this computer")
    config = load_config(write_config("stores:\n  - type: sqlite\n    path: s.sqlite\n"))
    service = build_service(config, base_dir=str(tmp_path), log=Log(io.StringIO()))
    with socket.socket(socket.AF_INET6) as probe:
        probe.bind(("::1", 0))
        port = probe.getsockname()[1]
    exporter = MetricsExporter(service, host="::1", port=port)
    try:
        exporter.start()
    except ProbeflowError:
        service.shutdown()
        pytest.skip("cannot listen on ::1 here")
    try:
        assert exporter.address == ("::1", port)
        assert listening_addresses(port) == ["::1"]
        with urllib.request.urlopen(f"http://[::1]:{port}/metrics", timeout=5) as response:
            assert b"probeflow_readings_converted_total 0.0" in response.read()
    finally:
        exporter.stop()
        service.shutdown()
