"""Secrets never leak: database tokens (from an environment variable and from a
file) and the MQTT password (from the environment, directly and through
``${...}``) appear in no output of ``probeflow check`` or ``probeflow run``, in
no config error, and in no file the service writes.

Real parts: mosquitto and victoria-metrics from the shared fixtures, the CLI as
a subprocess, a second database address where nothing listens (error paths are
where secrets tend to slip into messages).
"""

from __future__ import annotations

import os
import secrets
import signal
import subprocess
import textwrap
import time
from pathlib import Path

import orjson
import pytest
from reliability_harness import free_port, wait_until

from probeflow.config import load_config_text
from probeflow.errors import ConfigError

pytestmark = pytest.mark.services

TOKEN_ENV = "PF_RELIABILITY_INFLUX_TOKEN"
PASSWORD_ENV = "PF_RELIABILITY_MQTT_PASSWORD"


def _plugins_missing() -> list[str]:
    import importlib

    missing = []
    for module in ("probeflow.stores.influx", "probeflow.collectors.mqtt", "probeflow.stores.mqtt"):
        try:
            importlib.import_module(module)
        except Exception as exc:  # noqa: BLE001 - any import failure means "not usable yet"
            missing.append(f"{module} ({type(exc).__name__})")
    return missing


@pytest.fixture
def secret_values() -> dict[str, str]:
    return {"env_token": "envtok-" + secrets.token_hex(12),
            "file_token": "filetok-" + secrets.token_hex(12),
            "password": "mqttpw-" + secrets.token_hex(12)}


def _site(tmp_path: Path, broker_url: str, victoria_url: str, metrics_port: int) -> Path:
    site = tmp_path / "site"
    site.mkdir()
    config = site / "probeflow.yaml"
    config.write_text(textwrap.dedent(f"""\
        site: secret-works
        probes:
          - id: tank-3
            calibration: {{offset_mv: -3.1, slope_pct: 98.2, zero_ph: 7.0}}
        collectors:
          - type: mqtt
            url: {broker_url}
            topic: works/+/reading
            qos: 1
            client_id: secret-works-logger
            username: probeflow
            password_env: {PASSWORD_ENV}
        stores:
          - type: jsonl
            path: data/out.jsonl
          - type: influx
            name: tsdb-live
            url: {victoria_url}
            org: works
            bucket: ph
            token_env: {TOKEN_ENV}
            outbox_path: data/live-outbox.sqlite
            flush_timeout_s: 2
          - type: influx
            name: tsdb-down
            url: http://127.0.0.1:{free_port()}
            org: works
            bucket: ph
            token_file: influx-token
            outbox_path: data/down-outbox.sqlite
            flush_timeout_s: 0.5
            timeout_s: 1
          - type: mqtt
            url: {broker_url}
            client_id: secret-works-republisher
            username: probeflow
            password: ${{{PASSWORD_ENV}}}
        service:
          batch_ms: 5
          stop_timeout_s: 10
          metrics: {{port: {metrics_port}}}
        """), encoding="utf-8")
    return config


def _assert_absent(values: dict[str, str], where: str, text: str | bytes) -> None:
    data = text.encode() if isinstance(text, str) else text
    for name, value in values.items():
        assert value.encode() not in data, f"the {name} leaked into {where}"


def test_check_and_run_never_show_a_secret(tmp_path: Path, mosquitto, victoria, cli: list[str],
                                           cli_env: dict[str, str],
                                           secret_values: dict[str, str]) -> None:
    missing = _plugins_missing()
    if missing:
        pytest.xfail(f"plugins not importable yet: {', '.join(missing)}")
    metrics_port = free_port()
    config = _site(tmp_path, mosquitto.url, victoria.url, metrics_port)
    site = config.parent
    token_file = site / "influx-token"
    token_file.write_text(secret_values["file_token"] + "\n")
    token_file.chmod(0o600)
    env = {**cli_env, TOKEN_ENV: secret_values["env_token"], PASSWORD_ENV: secret_values["password"]}

    check = subprocess.run([*cli, "check", "--config", str(config)], cwd=site, env=env,
                           capture_output=True, timeout=60, check=False)
    assert check.returncode == 0, check.stderr.decode()
    _assert_absent(secret_values, "check output", check.stdout + check.stderr)

    log_path = tmp_path / "run.log"
    with open(log_path, "wb") as log:
        proc = subprocess.Popen([*cli, "run", "--config", str(config)], cwd=site, env=env,
                                stdout=log, stderr=subprocess.STDOUT)
        try:
            wait_until(lambda: b"service_started" in log_path.read_bytes(), "the service to start")
            wait_until(lambda: b"mqtt_connected" in log_path.read_bytes(),
                       "the MQTT collector to connect")
            time.sleep(0.5)  # its SUBSCRIBE went out before that line; let the broker take it
            _publish(mosquitto.port, [{"ts": 1764633600.0 + i, "mv": -10.0 - i, "temp_c": 25.0}
                                      for i in range(20)])
            wait_until(lambda: b"probeflow_readings_converted_total 20.0" in _scrape(metrics_port),
                       "the readings to be converted",
                       detail=lambda: log_path.read_text(errors="replace")[-4000:])
            time.sleep(1.5)  # let the unreachable store fail and retry at least once
        finally:
            proc.send_signal(signal.SIGTERM)
            proc.wait(timeout=60)
    output = log_path.read_bytes()
    assert proc.returncode == 0, output.decode(errors="replace")[-3000:]
    assert (site / "data" / "out.jsonl").read_bytes().count(b'"kind":"reading"') == 20
    _assert_absent(secret_values, "the service log", output)
    for path in site.rglob("*"):
        if path.is_file() and path != token_file:
            _assert_absent(secret_values, str(path.relative_to(site)), path.read_bytes())


def _scrape(port: int) -> bytes:
    import urllib.request

    with urllib.request.urlopen(f"http://127.0.0.1:{port}/metrics", timeout=5) as response:
        return response.read()


def _publish(port: int, readings: list[dict[str, float]]) -> None:
    import paho.mqtt.client as paho

    client = paho.Client(paho.CallbackAPIVersion.VERSION2, client_id="secret-test-publisher")
    client.connect("127.0.0.1", port)
    client.loop_start()
    try:
        for reading in readings:
            client.publish("works/tank-3/reading", orjson.dumps(reading), qos=1).wait_for_publish(10)
    finally:
        client.loop_stop()
        client.disconnect()


def test_config_errors_do_not_show_secrets(tmp_path: Path, secret_values: dict[str, str]) -> None:
    """A problem in a section that holds a secret names the key, not the value."""
    os.environ[TOKEN_ENV] = secret_values["env_token"]
    os.environ[PASSWORD_ENV] = secret_values["password"]
    try:
        text = textwrap.dedent(f"""\
            site: secret-works
            probes: [{{id: tank-3}}]
            collectors:
              - type: mqtt
                url: mqtt://127.0.0.1:1
                topic: works/+/reading
                client_id: x
                password: ${{{PASSWORD_ENV}}}
                qos: 7
            stores:
              - type: influx
                url: http://127.0.0.1:1
                org: works
                bucket: ph
                token: ${{{TOKEN_ENV}}}
                precision: fortnight
              - type: jsonl
                path: {secret_values["env_token"]}.jsonl
                bogus: ${{{TOKEN_ENV}}}
            """)
        with pytest.raises(ConfigError) as caught:
            load_config_text(text, "secret.yaml")
    finally:
        os.environ.pop(TOKEN_ENV, None)
        os.environ.pop(PASSWORD_ENV, None)
    message = str(caught.value) + repr(caught.value.problems)
    assert "collectors[0].qos" in message and "stores[0].precision" in message
    secrets_only = {k: v for k, v in secret_values.items() if k == "password"}
    _assert_absent(secrets_only, "the config error", message)
    # the token is in an ordinary value (a file name) too, so check the secret places only
    assert message.count(secret_values["env_token"]) <= 1
