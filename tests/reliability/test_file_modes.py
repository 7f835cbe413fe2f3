"""Files holding plant data or state are private to the service's user (mode
0600) even under a permissive umask: the SQLite store and its -wal/-shm files,
the rules state file, the database outbox and the JSON Lines output.

The service runs as a subprocess under umask 022 (the usual default, which
would give 0644) and is fed through stdin.
"""

from __future__ import annotations

import importlib
import stat
import subprocess
import textwrap
import urllib.request
from pathlib import Path

import orjson
import pytest
from reliability_harness import free_port, wait_until

TOKEN_ENV = "PF_RELIABILITY_MODES_TOKEN"


def _mode(path: Path) -> int:
    return stat.S_IMODE(path.stat().st_mode)


def _scrape(port: int) -> bytes:
    try:
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/metrics", timeout=5) as response:
            return response.read()
    except OSError:
        return b""


def test_state_store_and_outbox_files_are_created_0600(tmp_path: Path, cli: list[str],
                                                       cli_env: dict[str, str]) -> None:
    try:
        importlib.import_module("probeflow.stores.influx")
        influx = f"""\
          - type: influx
            url: http://127.0.0.1:{free_port()}
            org: works
            bucket: ph
            token_env: {TOKEN_ENV}
            outbox_path: data/outbox.sqlite
            flush_timeout_s: 0.2
            timeout_s: 1
        """
    except Exception:  # noqa: BLE001 - not importable yet: check the rest
        influx = ""
    port = free_port()
    config = tmp_path / "probeflow.yaml"
    config.write_text(textwrap.dedent("""\
        site: test-works
        probes:
          - id: tank-3
            calibration: {offset_mv: -3.1, slope_pct: 98.2, zero_ph: 7.0}
        collectors:
          - type: stdin
        stores:
          - type: sqlite
            path: data/store.sqlite
          - type: jsonl
            path: data/out.jsonl
        """) + textwrap.indent(textwrap.dedent(influx), "  ") + textwrap.dedent(f"""\
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
        service:
          batch_ms: 5
          state_path: data/rules-state.json
          metrics: {{port: {port}}}
        """))
    env = {**cli_env, TOKEN_ENV: "modes-test-token"}
    log = tmp_path / "run.log"
    with open(log, "wb") as log_file:
        proc = subprocess.Popen([*cli, "run", "--config", str(config)], cwd=tmp_path, env=env,
                                stdin=subprocess.PIPE, stdout=subprocess.DEVNULL, stderr=log_file,
                                umask=0o022)
    assert proc.stdin is not None
    data = tmp_path / "data"
    try:
        for i in range(50):  # mV from +400 to -400: pH crosses both band limits
            proc.stdin.write(orjson.dumps({"probe": "tank-3", "ts": 1764633600.0 + i,
                                           "mv": 400.0 - 16.0 * i, "temp_c": 25.0}) + b"\n")
        proc.stdin.flush()
        wait_until(lambda: b"probeflow_readings_converted_total 50.0" in _scrape(port),
                   "the readings to be converted", detail=lambda: log.read_text()[-3000:])
        wait_until(lambda: b'probeflow_readings_out_total{store="sqlite#stores[0]"} 50.0'
                   in _scrape(port), "the SQLite store to commit")
        live = {name: _mode(data / name) for name in
                ("store.sqlite", "store.sqlite-wal", "store.sqlite-shm")}
        if influx:
            live["outbox.sqlite"] = _mode(data / "outbox.sqlite")
    finally:
        proc.stdin.close()  # end of input: the service finishes and exits
        proc.wait(timeout=60)
    assert proc.returncode == 0, log.read_text()[-3000:]
    assert live == {name: 0o600 for name in live}
    assert _mode(data / "rules-state.json") == 0o600
    assert _mode(data / "out.jsonl") == 0o600
    if not influx:
        pytest.xfail("probeflow/stores/influx.py is not importable yet: outbox mode not checked")
