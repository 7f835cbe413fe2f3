"""Scenario files: the shipped ones load, and mistakes are reported with file and key path."""

from __future__ import annotations

import copy
from pathlib import Path

import pytest
from sim_scenarios import BASE

from probeflow.errors import ConfigError
from probeflow.simulate.durations import parse_duration_ms, parse_instant
from probeflow.simulate.scenario import load_scenario, scenario_from_mapping

SCENARIOS = sorted((Path(__file__).parents[2] / "simulators" / "scenarios").glob("*.yaml"))


def test_there_are_ready_scenarios() -> None:
    assert 2 <= len(SCENARIOS) <= 3


@pytest.mark.parametrize("path", SCENARIOS, ids=lambda p: p.stem)
def test_shipped_scenarios_load(path: Path) -> None:
    sc = load_scenario(path)
    assert sc.probes and sc.duration
    # redundant probes: some stream carries two or more probes, for the drift rules
    per_stream = [sum(p.stream == s for p in sc.probes) for s in sc.streams]
    assert max(per_stream) >= 2


def test_demo_scenario_has_every_fault_and_a_hot_stream() -> None:
    sc = load_scenario(Path(__file__).parents[2] / "simulators/scenarios/larkmoor-dairy.yaml")
    kinds = {f.kind for p in sc.probes for f in p.faults}
    assert kinds == {"coated", "broken_membrane", "flatline", "temp_open", "temp_short",
                     "dropout", "garbled", "duplicate", "out_of_order"}
    assert any(40 <= st.temperature.set_point <= 70 for st in sc.streams.values())


@pytest.mark.parametrize(("text", "ms"), [
    ("90s", 90_000), ("15min", 900_000), ("1h30m", 5_400_000), ("2d", 172_800_000),
    ("500ms", 500), ("1.5h", 5_400_000), (2.5, 2_500), ("4d2h", 352_800_000),
])
def test_durations(text: object, ms: int) -> None:
    assert parse_duration_ms(text) == ms


@pytest.mark.parametrize("bad", ["2 hours", "h", "", "-5s", -1, True, "5x"])
def test_bad_durations_are_refused(bad: object) -> None:
    with pytest.raises(ValueError):
        parse_duration_ms(bad)


def test_instant_needs_a_zone() -> None:
    # 2026-03-02T06:00:00Z: 20514 days after 1970-01-01 (calendar arithmetic) + 6 h
    assert parse_instant("2026-03-02T06:00:00Z") == 20514 * 86400 + 6 * 3600
    assert parse_instant("2026-03-02T07:00:00+01:00") == parse_instant("2026-03-02T06:00:00Z")
    with pytest.raises(ValueError, match="zone"):
        parse_instant("2026-03-02T06:00:00")


def _problems(data: dict, source: str = "plant.yaml") -> ConfigError:
    with pytest.raises(ConfigError) as info:
        scenario_from_mapping(data, source)
    return info.value


def test_error_names_file_and_key_path_inside_a_fault() -> None:
    data = copy.deepcopy(BASE)
    data["probes"][1]["faults"] = [{"kind": "garbled", "at": "1h", "fraction": 1.5}]
    err = _problems(data)
    assert err.path == "plant.yaml"
    assert [k for k, _ in err.problems] == ["probes[1].faults[0].fraction"]
    assert "plant.yaml" in str(err) and "probes[1].faults[0].fraction" in str(err)


def test_unknown_stream_unknown_key_bad_duration_all_reported() -> None:
    data = copy.deepcopy(BASE)
    data["probes"][0]["stream"] = "nowhere"
    err = _problems(data)
    assert err.problems[0][0] == "probes[0].stream" and "nowhere" in err.problems[0][1]

    data = copy.deepcopy(BASE)
    data["probes"][0]["electrode"]["slop_pct"] = 97
    data["streams"]["warm"]["ph"]["disturbance"]["tau"] = "ten minutes"
    err = _problems(data)
    keys = {k for k, _ in err.problems}
    assert keys == {"probes[0].electrode.slop_pct", "streams.warm.ph.disturbance.tau"}
    assert any("spelling" in m for _, m in err.problems)


def test_unknown_fault_kind_and_duplicate_probe() -> None:
    data = copy.deepcopy(BASE)
    data["probes"][0]["faults"] = [{"kind": "gremlins", "at": "1h"}]
    err = _problems(data)
    assert err.problems[0][0] == "probes[0].faults[0]"
    assert "coated" in err.problems[0][1]       # the message lists the known kinds
    data = copy.deepcopy(BASE)
    data["probes"][1]["id"] = "w-1"
    err = _problems(data)
    assert ("probes[1].id", '"w-1" is used by two probes') in err.problems


def test_probe_id_must_fit_a_topic_level() -> None:
    data = copy.deepcopy(BASE)
    data["probes"][0]["id"] = "tank/3"
    err = _problems(data)
    assert err.problems[0][0] == "probes[0].id"


def test_yaml_syntax_error_names_the_line(tmp_path: Path) -> None:
    path = tmp_path / "broken.yaml"
    path.write_text("site: x\nstreams:\n  a: [1, 2\nprobes: []\n")
    with pytest.raises(ConfigError) as info:
        load_scenario(path)
    assert str(path) in str(info.value) and "line" in str(info.value)


def test_missing_file() -> None:
    with pytest.raises(ConfigError, match="cannot read"):
        load_scenario("/nonexistent/scenario.yaml")
