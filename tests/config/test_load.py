"""Config loading: the contract file, bad configs naming file, line and key, secrets."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path
from typing import Literal

import pytest
from pydantic import SecretStr

from probeflow.config import load_config
from probeflow.errors import ConfigError
from probeflow.plugins import STORES, register_plugin, unregister_plugin
from probeflow.stores.base import StoreConfigBase

CONTRACT = """\
site: demo-works                 # free text, becomes a tag
probes:
  - id: tank-3
    calibration: {offset_mv: -3.1, slope_pct: 98.2, zero_ph: 7.0}
    pressure_kpa: 101.325        # absolute; optional
collectors:
  - type: mqtt
    url: mqtt://127.0.0.1:1883
    topic: plant/+/reading       # the + level is the probe id unless the payload names one
    qos: 1
    client_id: works-logger-1    # fixed, so the broker keeps the session
  - type: serial
    port: /dev/ttyUSB0
    baud: 9600
    format: csv
    fields: [probe, mv, temp_c]
stores:
  - type: sqlite
    path: data/probeflow.sqlite
  - type: influx
    url: http://127.0.0.1:8086
    org: plant
    bucket: ph
    token_env: INFLUX_TOKEN
"""

GOOD_PROBES = """\
site: test-site
probes:
  - id: tank-3
    calibration: {offset_mv: -3.1, slope_pct: 98.2, zero_ph: 7.0}
"""


class _SecretStoreConfig(StoreConfigBase):
    type: Literal["secretive"] = "secretive"
    url: str = "http://127.0.0.1:1"
    token: SecretStr
    password: SecretStr | None = None


class _SecretStore:
    Config = _SecretStoreConfig


@pytest.fixture
def secret_plugin():
    register_plugin(STORES, "secretive", _SecretStore)
    yield
    unregister_plugin(STORES, "secretive")


def test_contract_file_loads_as_written(config_file, monkeypatch):
    """The config contract of the service issue validates with every plugin it names."""
    monkeypatch.setenv("INFLUX_TOKEN", "contract-token-value")
    path = config_file(CONTRACT)
    try:
        config = load_config(path)
    except ConfigError as exc:
        missing_plugin = "could not be loaded" in str(exc) or "is not installed" in str(exc)
        if missing_plugin:
            pytest.skip(f"a plugin named by the contract is not built yet: {exc}")
        raise
    assert config.site == "demo-works"
    assert [p.id for p in config.probes] == ["tank-3"]
    assert config.probes[0].calibration.slope_pct == 98.2
    assert [s.type for s in config.collectors] == ["mqtt", "serial"]
    assert [s.type for s in config.stores] == ["sqlite", "influx"]
    assert "contract-token-value" not in repr(config.stores[1].config)


# (yaml text, key path expected in the message, line expected, words expected)
BAD_CONFIGS = [
    (GOOD_PROBES.replace("98.2", '"98%"'), "probes[0].calibration.slope_pct", 4,
     'expected a number between 50 and 120, got "98%"'),
    (GOOD_PROBES.replace("98.2", "130"), "probes[0].calibration.slope_pct", 4, "between 50 and 120"),
    (GOOD_PROBES.replace("zero_ph: 7.0", "zero_ph: .nan"), "probes[0].calibration.zero_ph", 4,
     "expected a number"),
    (GOOD_PROBES + "    pressure_kpa: high\n", "probes[0].pressure_kpa", 5, 'got "high"'),
    (GOOD_PROBES + "    slope: 98\n", "probes[0].slope", 5, "unknown key"),
    (GOOD_PROBES + "    fixed_temp_c: true\n", "probes[0].fixed_temp_c", 5, "got true"),
    (GOOD_PROBES + "    rtd: {r0: 500}\n", "probes[0].rtd.r0", 5, "100 or 1000"),
    (GOOD_PROBES + "  - id: tank-3\n", "probes[1].id", 5, "already used"),
    (GOOD_PROBES + "  - id: 'tank 9'\n", "probes[1].id", 5, "probe id"),
    (GOOD_PROBES + "  - calibration: {offset_mv: 0, slope_pct: 99}\n", "probes[1].id", 5, "missing"),
    ("site: x\nprobes: []\n", "probes", 2, "at least one probe"),
    (GOOD_PROBES + "collectors:\n  - type: no-such-source\n", "collectors[0].type", 6,
     'no collector plugin "no-such-source"'),
    (GOOD_PROBES + "stores:\n  - path: x.sqlite\n", "stores[0].type", 6, "needs a type"),
    (GOOD_PROBES + "stores:\n  - type: sqlite\n    paht: x.sqlite\n", "stores[0].paht", 7,
     'did you mean "path"'),
    (GOOD_PROBES + "service:\n  batch_rows: 0\n", "service.batch_rows", 6, "whole number"),
    (GOOD_PROBES + "site: again\n", "site", 5, "written twice"),
]


@pytest.mark.parametrize(("text", "key", "line", "words"), BAD_CONFIGS)
def test_bad_config_names_file_line_and_key(config_file, text, key, line, words):
    path = config_file(text)
    with pytest.raises(ConfigError) as info:
        load_config(path)
    message = str(info.value)
    assert f"{path}:{line}: {key}: " in message, message
    assert words in message, message
    assert any(k == key for k, _ in info.value.problems)


def test_all_problems_are_collected(config_file):
    text = GOOD_PROBES.replace("98.2", "5") + "    pressure_kpa: -1\n" + "  - id: 'bad id'\n"
    with pytest.raises(ConfigError) as info:
        load_config(config_file(text))
    keys = {k for k, _ in info.value.problems}
    assert {"probes[0].calibration.slope_pct", "probes[0].pressure_kpa", "probes[1].id"} <= keys


def test_yaml_syntax_error_names_line(config_file):
    path = config_file("site: x\nprobes:\n  - id: [unclosed\n")
    with pytest.raises(ConfigError) as info:
        load_config(path)
    assert f"{path}:" in str(info.value) and "not valid YAML" in str(info.value)


def test_secret_from_env_and_file_is_resolved_and_hidden(config_file, tmp_path, monkeypatch,
                                                          secret_plugin):
    monkeypatch.setenv("PF_TEST_PASSWORD", "hunter2-env-secret")
    token_file = tmp_path / "token"
    token_file.write_text("file-secret-token\n")
    token_file.chmod(0o600)
    path = config_file(GOOD_PROBES + "stores:\n  - type: secretive\n    token_file: token\n"
                       "    password: ${PF_TEST_PASSWORD}\n")
    config = load_config(path)
    store_config = config.stores[0].config
    assert store_config.token.get_secret_value() == "file-secret-token"
    assert store_config.password.get_secret_value() == "hunter2-env-secret"
    assert "file-secret-token" not in repr(config) and "hunter2" not in repr(config)


def test_missing_secret_is_a_problem_for_run_and_a_warning_for_check(config_file, secret_plugin,
                                                                     monkeypatch):
    monkeypatch.delenv("PF_TEST_UNSET", raising=False)
    path = config_file(GOOD_PROBES + "stores:\n  - type: secretive\n    token_env: PF_TEST_UNSET\n")
    with pytest.raises(ConfigError) as info:
        load_config(path)
    assert f"{path}:7: stores[0].token_env: environment variable PF_TEST_UNSET is not set" in str(info.value)
    config = load_config(path, require_secrets=False)
    assert any("PF_TEST_UNSET" in w for w in config.warnings)


def test_wrong_secret_value_is_not_echoed(config_file, secret_plugin, monkeypatch):
    monkeypatch.setenv("PF_TEST_PASSWORD", "a-secret-value")
    path = config_file(GOOD_PROBES + "stores:\n  - type: secretive\n    token: ${PF_TEST_PASSWORD}\n"
                       "    password: [a-secret-value]\n")
    with pytest.raises(ConfigError) as info:
        load_config(path)
    assert "stores[0].password" in str(info.value)
    assert "a-secret-value" not in str(info.value)


def test_filter_sections_ignore_collectors_and_stores(config_file):
    path = config_file(GOOD_PROBES + "collectors:\n  - type: no-such-source\n")
    config = load_config(path, sections=("rules",))
    assert config.collectors == () and config.probe_ids == ("tank-3",)


def test_calibration_store_keyword(config_file):
    config = load_config(config_file("probes:\n  - id: p1\n    calibration: store\n"))
    assert config.probes[0].calibration is None and config.probes[0].calibration_from_store


def _check(path: Path, env: dict[str, str] | None = None) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "probeflow", "check", "--config", str(path)],
                          capture_output=True, text=True, timeout=60, check=False,
                          env={**os.environ, **(env or {})})


def test_check_command_exit_status_and_summary(config_file):
    good = _check(config_file(GOOD_PROBES + "stores:\n  - type: sqlite\n    path: x.sqlite\n"))
    assert good.returncode == 0, good.stderr
    assert "tank-3" in good.stdout and "sqlite" in good.stdout
    bad_path = config_file(GOOD_PROBES.replace("98.2", '"98%"'), name="bad.yaml")
    bad = _check(bad_path)
    assert bad.returncode == 2
    assert f"{bad_path}:4: probes[0].calibration.slope_pct" in bad.stderr


def test_check_never_prints_a_secret(config_file, tmp_path):
    path = config_file(GOOD_PROBES + "stores:\n  - type: influx\n    url: http://127.0.0.1:8086\n"
                       "    org: plant\n    bucket: ph\n    token_env: PF_SECRET_TOKEN\n")
    result = _check(path, {"PF_SECRET_TOKEN": "very-secret-token-123"})
    assert "very-secret-token-123" not in result.stdout + result.stderr
    if "could not be loaded" not in result.stderr:
        assert result.returncode == 0, result.stderr
