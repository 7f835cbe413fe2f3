"""The rules: section as written in the rules issue, and clear messages for bad files."""

from __future__ import annotations

import pytest
import yaml

from probeflow.errors import ConfigError
from probeflow.rules import RulesConfig, build_rule_engine, parse_rules_config

PLAIN = """
rules:
  bands:
    - id: outfall-ph
      probes: ["out-*"]
      quantity: ph
      low: 6.5
      high: 8.5
      deadband: 0.1
      on_delay_s: 30
      off_delay_s: 20
"""


def test_plain_form_from_the_issue_validates():
    cfg = parse_rules_config(yaml.safe_load(PLAIN)["rules"])
    band = cfg.bands[0]
    assert band.limit_value("low") == 6.5 and band.limit_value("high") == 8.5
    assert band.limit_value("high_high") is None
    assert (band.deadband, band.on_delay_s, band.off_delay_s) == (0.1, 30.0, 20.0)
    assert band.limit_severity("high") == "medium"
    engine = build_rule_engine(cfg, ["out-1"])
    assert engine.active_alarms() == []


def test_empty_section_is_valid_and_empty():
    cfg = parse_rules_config(None)
    assert cfg == RulesConfig()
    assert cfg.diagnostics is None and cfg.bands == []


def test_richer_limit_form_carries_its_severity():
    cfg = parse_rules_config({"bands": [{"id": "b", "probes": ["x"], "high": {"value": 9, "severity": "critical"},
                                         "high_high": 10}]})
    assert cfg.bands[0].limit_severity("high") == "critical"
    assert cfg.bands[0].limit_severity("high_high") == "high"


@pytest.mark.parametrize(
    ("section", "key", "words"),
    [
        ({"bands": [{"id": "b", "probes": ["x"], "hihg": 8}]}, "rules.bands[0].hihg", "unknown key"),
        ({"bands": [{"id": "b", "probes": ["x"], "high": "8.5 pH"}]}, "rules.bands[0].high", "expected a number"),
        ({"bands": [{"id": "b", "probes": ["x"], "low": 9, "high": 8}]}, "rules.bands[0]", "out of order"),
        ({"bands": [{"id": "b", "probes": ["x"]}]}, "rules.bands[0]", "at least one of"),
        ({"bands": [{"id": "b", "high": 8}]}, "rules.bands[0].probes", "required"),
        ({"bands": [{"id": "b", "probes": ["x"], "high": 8, "deadband": -1}]}, "rules.bands[0].deadband",
         "greater than or equal"),
        ({"redundancy": [{"id": "r", "probes": ["a"], "limit": 0.2}]}, "rules.redundancy[0].probes", "at least 2"),
        ({"redundancy": [{"id": "r", "probes": ["a", "b*"], "limit": 0.2}]}, "rules.redundancy[0].probes", "not globs"),
        ({"drift": [{"id": "d", "limit_per_day": 0.1}]}, "rules.drift[0]", "exactly one of"),
        ({"diagnostics": {"stale": {"after": 5}}}, "rules.diagnostics.stale.after", "unknown key"),
        ({"bands": [{"id": "b", "probes": ["x"], "high": 8}], "drift": [{"id": "b", "probes": ["x"],
                                                                          "limit_per_day": 1}]},
         "rules", "used twice"),
        ({"band": []}, "rules.band", "unknown key"),
    ],
)
def test_bad_sections_name_file_key_and_problem(section, key, words):
    with pytest.raises(ConfigError) as info:
        parse_rules_config(section, path="works.yaml")
    err = info.value
    assert err.path == "works.yaml"
    assert "works.yaml" in str(err)
    assert any(k == key and words in msg for k, msg in err.problems), err.problems
