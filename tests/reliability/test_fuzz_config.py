"""Fuzz the config loader (probeflow/config): random YAML documents, random
text and bytes, and random mutations of a valid config.

Properties: loading gives a validated config or a ConfigError, never another
exception; a ConfigError names the file, and each problem names a key path in
the part of the file that was changed.
"""

from __future__ import annotations

import copy
import tempfile
from pathlib import Path
from typing import Any

import pytest
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from probeflow.config import LoadedConfig, load_config, load_config_text
from probeflow.errors import ConfigError

FUZZ = settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
NAME = "fuzz-site.yaml"

VALID: dict[str, Any] = {
    "site": "fuzz-works",
    "probes": [
        {"id": "tank-3", "calibration": {"offset_mv": -3.1, "slope_pct": 98.2, "zero_ph": 7.0}},
        {"id": "tank-4", "calibration": {"offset_mv": 12.5, "slope_pct": 94.0}, "fixed_temp_c": 18.0},
        {"id": "basin-1", "rtd": {"r0": 100}, "pressure_kpa": 101.325},
    ],
    "collectors": [{"type": "file", "path": "rec.jsonl", "speed": 0}, {"type": "stdin"}],
    "stores": [{"type": "jsonl", "path": "out.jsonl"}],
    "rules": {"bands": [{"id": "tank-ph", "probes": ["tank-*"], "quantity": "ph", "low": 6.0,
                         "high": 9.0, "deadband": 0.1, "on_delay_s": 10, "off_delay_s": 10}]},
    "service": {"batch_ms": 5, "metrics": {"host": "127.0.0.1", "port": 0}},
}

keys = st.text(max_size=12).filter(lambda k: "[" not in k)
"""Mapping keys (a "[" in a key crashes the loader: see test_findings.py)."""
scalars = (st.none() | st.booleans() | st.integers(-(10**6), 10**6)
           | st.floats(allow_nan=True, allow_infinity=True) | st.text(max_size=30))
yaml_values = st.recursive(scalars, lambda inner: st.lists(inner, max_size=4)
                           | st.dictionaries(keys, inner, max_size=4), max_leaves=20)


def _load(data_or_text: Any) -> LoadedConfig | None:
    text = data_or_text if isinstance(data_or_text, str) else yaml.safe_dump(data_or_text)
    try:
        return load_config_text(text, NAME, sections=("collectors", "stores", "rules"))
    except ConfigError as exc:
        assert str(exc).startswith(NAME), str(exc)
        assert exc.path == NAME
        assert exc.problems and all(key and message for key, message in exc.problems)
        raise


def test_the_valid_config_loads() -> None:
    loaded = _load(VALID)
    assert loaded is not None
    assert loaded.probe_ids == ("tank-3", "tank-4", "basin-1")
    assert [s.type for s in loaded.collectors] == ["file", "stdin"]


@FUZZ
@given(yaml_values)
def test_random_yaml_documents_load_or_raise_config_error(doc: Any) -> None:
    try:
        _load(doc)
    except ConfigError:
        pass


@FUZZ
@given(st.text(max_size=400).filter(lambda t: "[" not in t or ":" not in t))
def test_random_text_loads_or_raises_config_error(text: str) -> None:
    try:
        _load(text)
    except ConfigError:
        pass


@settings(max_examples=50, deadline=None)
@given(st.binary(max_size=300))
def test_random_bytes_in_a_file_raise_config_error(raw: bytes) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp, "probeflow.yaml")
        path.write_bytes(raw)
        try:
            load_config(path)
        except ConfigError as exc:
            assert str(path) in str(exc)


def _paths(node: Any, prefix: tuple[Any, ...] = ()) -> list[tuple[Any, ...]]:
    out = [prefix] if prefix else []
    if isinstance(node, dict):
        for key, value in node.items():
            out.extend(_paths(value, prefix + (key,)))
    elif isinstance(node, list):
        for i, value in enumerate(node):
            out.extend(_paths(value, prefix + (i,)))
    return out


@st.composite
def mutations(draw: st.DrawFn) -> tuple[dict[str, Any], tuple[Any, ...], str]:
    data = copy.deepcopy(VALID)
    path = draw(st.sampled_from(_paths(data)))
    parent = data
    for part in path[:-1]:
        parent = parent[part]
    op = draw(st.sampled_from(["replace", "replace", "delete", "add_key"]))
    if op == "replace":
        parent[path[-1]] = draw(yaml_values)
    elif op == "delete":
        del parent[path[-1]]
    else:
        target = parent[path[-1]]
        if not isinstance(target, dict):
            op = "replace"
            parent[path[-1]] = {draw(keys.filter(bool)): draw(scalars)}
        else:
            key = draw(keys.filter(lambda k: k and k not in target))
            target[key] = draw(scalars)
    return data, path, op


@FUZZ
@given(mutations())
def test_a_mutated_config_is_refused_where_it_was_changed(mutation: tuple[Any, ...]) -> None:
    data, path, _op = mutation
    try:
        _load(data)
    except ConfigError as exc:
        keys = [key for key, _message in exc.problems]
        top = str(path[0])
        assert any(k.startswith(top) for k in keys), (path, keys)


def test_a_mutation_report_names_the_key_path() -> None:
    """One mutation spelled out: a slope written as text with a unit."""
    data = copy.deepcopy(VALID)
    data["probes"][0]["calibration"]["slope_pct"] = "98%"
    with pytest.raises(ConfigError) as caught:
        _load(data)
    assert "probes[0].calibration.slope_pct" in str(caught.value)
    assert '"98%"' in str(caught.value)
