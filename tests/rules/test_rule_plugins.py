"""Rule kinds are plugins: a site's own kind, in-process and through a real entry point.

The site kind (``site_rule_kinds.WindowCount``, "ph-window-count") alarms while more
than N readings above a pH bound fall in a trailing window.  Its hand-made sequences
have event times worked out by hand in the comments.  The entry-point tests lay out a
throwaway distribution in a folder (modules and a ``.dist-info`` with
``entry_points.txt``, as pip installs it) and run ``probeflow check`` and
``probeflow filter`` as subprocesses with that folder on PYTHONPATH.
"""

from __future__ import annotations

import io
import json
import os
import shutil
import subprocess
import sys
from datetime import datetime
from pathlib import Path

import pytest

from probeflow.errors import ConfigError, PluginError
from probeflow.plugins import RULES, available_plugins, register_plugin, unregister_plugin
from probeflow.rules import build_rule_engine, parse_rules_config
from probeflow.rules.backtest import run_backtest
from probeflow.rules.base import load_rule_kind
from probeflow.rules.config import BUILTIN_SECTIONS, RulesConfig
from probeflow.rules.engine import Engine, build_rules
from probeflow.service.log import Log
from tests.rules.rules_support import T0, batch_of, times
from tests.rules.site_rule_kinds import Faulty, FaultyConfig, WindowCount, WindowCountConfig

HERE = Path(__file__).parent
PROBEFLOW = Path(sys.executable).with_name("probeflow")

# t offset [s] -> pH of probe lagoon-out.  Bound 8.5, window 60 s, more than 2 readings:
#   readings above 8.5 at 0, 10, 30 -> at t=30 the window (-30, 30] holds 3: raise at 30;
#   at t=60 the window (0, 60] holds 10 and 30 only (0 left it): clear at 60.
SEQUENCE = [(0, 8.6), (10, 8.7), (20, 8.2), (30, 8.8), (40, 8.1), (50, 8.0), (60, 8.0), (70, 8.0)]
COUNT_RULE = {"id": "outlet-count", "probes": ["lagoon-*"], "above_ph": 8.5, "window_s": 60,
              "max_count": 2}


@pytest.fixture
def site_kinds():
    register_plugin(RULES, "ph-window-count", WindowCount)
    register_plugin(RULES, "faulty-kind", Faulty)
    yield
    unregister_plugin(RULES, "ph-window-count")
    unregister_plugin(RULES, "faulty-kind")


def rows(seq, probe="lagoon-out"):
    return [(probe, t, v) for t, v in seq]


# --- the plugin registry ------------------------------------------------------------------------

def test_every_built_in_kind_is_a_registered_plugin_with_the_sections_model():
    names = available_plugins(RULES)
    assert set(BUILTIN_SECTIONS) <= set(names), names
    assert "lab_checks" not in names  # a settings section of the service, not a rule kind
    for name in BUILTIN_SECTIONS:
        kind = load_rule_kind(name)
        annotation = str(RulesConfig.model_fields[name].annotation)
        assert kind.Config.__name__ in annotation, (name, kind.Config, annotation)
    assert load_rule_kind("diagnostics").section_form == "mapping"
    assert load_rule_kind("bands").section_form == "list"


def test_built_in_rules_are_built_through_their_plugins(site_kinds):
    cfg = parse_rules_config({
        "bands": [{"id": "b", "probes": ["x"], "high": 8.5}],
        "diagnostics": {},
        "ph-window-count": [COUNT_RULE],
    })
    kinds = [(r.kind, r.id) for r in build_rules(cfg, ["x"])]
    assert kinds == [("band", "b"), ("diagnostics", "diagnostics"), ("ph_window_count", "outlet-count")]


# --- config -----------------------------------------------------------------------------------

def test_plugin_section_is_validated_by_the_plugins_model(site_kinds):
    cfg = parse_rules_config({"ph-window-count": [COUNT_RULE], "faulty-kind": {"fail_times": 1}})
    assert cfg.plugin_sections["ph-window-count"] == [WindowCountConfig(**COUNT_RULE)]
    assert cfg.plugin_sections["faulty-kind"] == FaultyConfig(fail_times=1)
    assert list(cfg.rule_sections()) == ["ph-window-count", "faulty-kind"]


@pytest.mark.parametrize(("section", "key", "words"), [
    ({"ph-window-count": [{**COUNT_RULE, "above_ph": "high"}]}, "rules.ph-window-count[0].above_ph",
     "number"),
    ({"ph-window-count": [{**COUNT_RULE, "windw_s": 5}]}, "rules.ph-window-count[0].windw_s",
     "unknown key"),
    ({"ph-window-count": [{"id": "c", "above_ph": 8}]}, "rules.ph-window-count[0].probes", "required"),
    ({"ph-window-count": {"id": "c"}}, "rules.ph-window-count", "list"),
    ({"faulty-kind": {"fail_times": "x"}}, "rules.faulty-kind.fail_times", "integer"),
    ({"bands": [{"id": "outlet-count", "probes": ["x"], "high": 9}], "ph-window-count": [COUNT_RULE]},
     "rules.ph-window-count[0].id", "used twice"),
    ({"ph-window-cuont": []}, "rules.ph-window-cuont", 'did you mean "ph-window-count"'),
])
def test_bad_plugin_section_names_the_key_path(site_kinds, section, key, words):
    with pytest.raises(ConfigError) as info:
        parse_rules_config(section, path="lagoon.yaml")
    assert any(k == key and words in m for k, m in info.value.problems), info.value.problems


def test_problems_of_built_in_and_plugin_sections_come_together(site_kinds):
    with pytest.raises(ConfigError) as info:
        parse_rules_config({"bands": [{"id": "b", "probes": ["x"], "hihg": 8}],
                            "ph-window-count": [{**COUNT_RULE, "max_count": 0}]})
    keys = [k for k, _ in info.value.problems]
    assert "rules.bands[0].hihg" in keys and "rules.ph-window-count[0].max_count" in keys


def test_unknown_key_names_the_installed_rule_plugins():
    with pytest.raises(ConfigError) as info:
        parse_rules_config({"foo": [{"id": "x"}]})
    [(key, msg)] = info.value.problems
    assert key == "rules.foo"
    assert msg.startswith('no rule plugin "foo" is installed (installed: ')
    for name in BUILTIN_SECTIONS:
        assert name in msg


def test_plugin_without_a_config_model_is_named(site_kinds):
    class NoModel:
        @staticmethod
        def build(configs, probe_ids):
            return []

    register_plugin(RULES, "no-model", NoModel)
    try:
        with pytest.raises(ConfigError) as info:
            parse_rules_config({"no-model": []})
        with pytest.raises(PluginError, match='"no-model" has no pydantic Config'):
            load_rule_kind("no-model")
    finally:
        unregister_plugin(RULES, "no-model")
    assert info.value.problems[0][0] == "rules.no-model"
    assert "Config" in info.value.problems[0][1]


# --- the engine -------------------------------------------------------------------------------

def test_site_kind_raises_and_clears_at_the_hand_worked_times(site_kinds):
    eng = build_rule_engine(parse_rules_config({"ph-window-count": [COUNT_RULE]}), ["lagoon-out"])
    events = eng.process(batch_of(rows(SEQUENCE)))
    assert times(events) == [("raise", 30.0), ("clear", 60.0)]
    assert {e.rule for e in events} == {"outlet-count"}
    assert events[0].value == 3.0 and events[0].threshold == 2.0


def test_site_kind_state_survives_a_restart(site_kinds):
    cfg = parse_rules_config({"ph-window-count": [COUNT_RULE]})
    whole = build_rule_engine(cfg, ["lagoon-out"]).process(batch_of(rows(SEQUENCE)))
    first = build_rule_engine(cfg, ["lagoon-out"])
    before = first.process(batch_of(rows(SEQUENCE[:3])))
    saved = json.loads(json.dumps(first.state()))
    assert "ph_window_count:outlet-count" in saved["rules"]
    second = build_rule_engine(cfg, ["lagoon-out"])
    second.restore(saved)
    after = second.process(batch_of(rows(SEQUENCE[3:])))
    assert times(before + after) == times(whole) == [("raise", 30.0), ("clear", 60.0)]


def test_a_rule_that_raises_is_skipped_logged_and_retried_while_bands_go_on(site_kinds):
    cfg = parse_rules_config({"bands": [{"id": "outlet-high", "probes": ["lagoon-*"], "high": 8.5}],
                              "faulty-kind": {"fail_times": 2}})
    stream = io.StringIO()
    eng = build_rule_engine(cfg, ["lagoon-out"], log=Log(stream))
    first = eng.process(batch_of(rows([(0, 8.6)])))            # faulty fails (1 of 2)
    second = eng.process(batch_of(rows([(10, 8.2)])))          # faulty fails (2 of 2)
    third = eng.process(batch_of(rows([(20, 8.0)])))           # faulty works again
    assert [(e.rule, e.event) for e in first] == [("outlet-high", "raise")]
    assert [(e.rule, e.event) for e in second] == [("outlet-high", "clear")]
    assert [(e.rule, e.event, e.ts - T0) for e in third] == [("faulty", "raise", 20.0)]
    assert eng.counters["rule_errors"] == 2
    assert eng.rule_errors == {"faulty:faulty": 2}
    lines = stream.getvalue().splitlines()
    # the second failure came within the minute: counted, not logged again
    assert len(lines) == 1, lines
    assert "event=rule_failed" in lines[0] and "rule=faulty:faulty" in lines[0]
    assert "ZeroDivisionError" in lines[0]


def test_a_tick_that_raises_does_not_stop_the_other_rules(site_kinds):
    cfg = parse_rules_config({"faulty-kind": {}, "diagnostics": {"stale": {"after_s": 30}}})
    eng = build_rule_engine(cfg, ["lagoon-out"])
    eng.process(batch_of(rows([(0, 7.0)])))
    events = eng.tick(T0 + 100)
    assert [(e.rule, e.limit, e.event) for e in events] == [("diagnostics", "stale", "raise")]
    assert eng.counters["rule_errors"] == 2  # one evaluate, one tick


def test_a_rule_whose_state_fails_does_not_lose_the_others(site_kinds):
    class Unsaveable(Faulty):
        @staticmethod
        def build(configs, probe_ids):
            rule = Faulty.build(configs, probe_ids)[0]
            rule.state = lambda: 1 / 0  # type: ignore[method-assign]
            return [rule]

    register_plugin(RULES, "faulty-kind", Unsaveable)
    cfg = parse_rules_config({"bands": [{"id": "outlet-high", "probes": ["lagoon-*"], "high": 8.5}],
                              "faulty-kind": {"fail_times": 0}})
    eng = build_rule_engine(cfg, ["lagoon-out"])
    eng.process(batch_of(rows([(0, 8.6)])))
    saved = eng.state()
    assert "band:outlet-high" in saved["rules"] and "faulty:faulty" not in saved["rules"]
    assert eng.rule_errors == {"faulty:faulty": 1}


def test_backtest_runs_plugin_kinds_like_the_live_engine(site_kinds):
    cfg = parse_rules_config({"bands": [{"id": "outlet-high", "probes": ["lagoon-*"], "high": 8.5}],
                              "ph-window-count": [COUNT_RULE], "faulty-kind": {}})
    chunks = [batch_of(rows(SEQUENCE[:4])), batch_of(rows(SEQUENCE[4:]))]
    stats = run_backtest(chunks, cfg, ["lagoon-out"])
    live = Engine(build_rules(cfg, ["lagoon-out"]))
    raised = [e for c in chunks for e in live.process(c) if e.event == "raise"]
    for rule in ("outlet-high", "outlet-count"):
        assert stats[rule].activations == sum(e.rule == rule for e in raised)
    assert stats["outlet-count"].activations == 1 and stats["outlet-count"].active_s == 30.0
    assert stats["faulty"].errors == 2 and stats["faulty"].activations == 0


# --- a real entry point, through the command line ------------------------------------------------

ENTRY_POINTS = """\
[probeflow.rules]
ph-window-count = site_window_rules:WindowCount
faulty-kind = site_window_rules:Faulty
broken-kind = site_broken_rules:Kind
"""

BROKEN_MODULE = '''"""A rule kind whose vendor library is missing on this machine."""
import lagoon_vendor_sdk_not_installed  # noqa: F401


class Kind:
    pass
'''

# 25 °C, slope 100 %: 59.16 mV per pH (RT ln10 / F at 298.15 K, CODATA 2018 constants;
# from memory), so -118.32 mV reads pH 9.00 and 0 mV reads pH 7.00.
CONFIG = """\
site: lagoon-test
probes:
  - id: lagoon-out
    calibration: {offset_mv: 0.0, slope_pct: 100.0, zero_ph: 7.0}
rules:
  bands:
    - id: outlet-high
      probes: ["lagoon-*"]
      high: 8.5
"""


@pytest.fixture(scope="module")
def site_dist(tmp_path_factory) -> Path:
    """A folder laid out as pip installs a distribution (modules plus a ``.dist-info``
    with ``entry_points.txt``), so the standard library's importlib.metadata finds
    its ``probeflow.rules`` entry points once the folder is on the path."""
    target = tmp_path_factory.mktemp("site-packages")
    shutil.copy(HERE / "site_rule_kinds.py", target / "site_window_rules.py")
    (target / "site_broken_rules.py").write_text(BROKEN_MODULE)
    info = target / "lagoon_site_rules-0.0.1.dist-info"
    info.mkdir()
    (info / "METADATA").write_text("Metadata-Version: 2.1\nName: lagoon-site-rules\nVersion: 0.0.1\n")
    (info / "entry_points.txt").write_text(ENTRY_POINTS)
    (info / "top_level.txt").write_text("site_window_rules\nsite_broken_rules\n")
    return target


def probeflow(args, site_dist: Path, cwd: Path, stdin: str = "") -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([str(site_dist), str(HERE.parents[1])])}
    return subprocess.run([str(PROBEFLOW), *args], input=stdin, capture_output=True, text=True,
                          env=env, cwd=cwd, timeout=120, check=False)


def write_config(tmp_path: Path, extra: str) -> Path:
    path = tmp_path / "lagoon.yaml"
    path.write_text(CONFIG + extra)
    return path


def readings(mv_values) -> str:
    return "".join(json.dumps({"probe": "lagoon-out", "ts": T0 + 10 * i, "mv": mv, "temp_c": 25.0}) + "\n"
                   for i, mv in enumerate(mv_values))


def alerts_of(stdout: str) -> list[tuple[str, str, float]]:
    out = []
    for line in stdout.splitlines():
        rec = json.loads(line)
        if rec["kind"] == "alert":
            ts = datetime.fromisoformat(rec["ts"]).timestamp()
            out.append((rec["rule"], rec["event"], round(ts - T0, 3)))
    return out


def test_entry_point_kind_is_listed_and_checked(site_dist, tmp_path):
    path = write_config(tmp_path, """\
  ph-window-count:
    - id: outlet-count
      probes: ["lagoon-*"]
      above_ph: 8.5
""")
    done = probeflow(["check", "--config", str(path)], site_dist, tmp_path)
    assert done.returncode == 0, done.stderr
    assert "1 ph-window-count (plugin)" in done.stdout
    path.write_text(path.read_text().replace("above_ph: 8.5", "above_ph: eight"))
    done = probeflow(["check", "--config", str(path)], site_dist, tmp_path)
    assert done.returncode == 2
    assert "rules.ph-window-count[0].above_ph" in done.stderr


def test_filter_emits_the_entry_point_kinds_alerts(site_dist, tmp_path):
    path = write_config(tmp_path, """\
  ph-window-count:
    - id: outlet-count
      probes: ["lagoon-*"]
      above_ph: 8.5
      window_s: 60
      max_count: 2
""")
    # pH 9, 9, 9, 9 at t = 0, 10, 20, 30: the band raises at 0; the count passes 2 at 20
    done = probeflow(["filter", "--config", str(path)], site_dist, tmp_path,
                     stdin=readings([-118.32] * 4))
    assert done.returncode == 0, done.stderr
    assert alerts_of(done.stdout) == [("outlet-high", "raise", 0.0), ("outlet-count", "raise", 20.0)]


def test_check_names_a_plugin_that_fails_to_import(site_dist, tmp_path):
    path = write_config(tmp_path, "  broken-kind: []\n")
    done = probeflow(["check", "--config", str(path)], site_dist, tmp_path)
    assert done.returncode == 2
    assert "rules.broken-kind" in done.stderr
    assert '"broken-kind"' in done.stderr and "site_broken_rules:Kind failed to import" in done.stderr
    assert "lagoon_vendor_sdk_not_installed" in done.stderr


def test_check_lists_installed_kinds_for_an_unknown_key(site_dist, tmp_path):
    path = write_config(tmp_path, "  window-count: []\n")
    done = probeflow(["check", "--config", str(path)], site_dist, tmp_path)
    assert done.returncode == 2
    assert 'rules.window-count: no rule plugin "window-count" is installed' in done.stderr
    assert "ph-window-count" in done.stderr and "bands" in done.stderr


def test_filter_goes_on_when_an_entry_point_rule_fails_at_run_time(site_dist, tmp_path):
    path = write_config(tmp_path, "  faulty-kind: {}\n")
    # pH 9 at 0 and 10, then pH 7 at 20 and 30: the band raises at 0 and clears at 20
    done = probeflow(["filter", "--config", str(path)], site_dist, tmp_path,
                     stdin=readings([-118.32, -118.32, 0.0, 0.0]))
    assert done.returncode == 0, done.stderr
    assert alerts_of(done.stdout) == [("outlet-high", "raise", 0.0), ("outlet-high", "clear", 20.0)]
    failed = [line for line in done.stderr.splitlines() if "event=rule_failed" in line]
    assert failed and "rule=faulty:faulty" in failed[0] and "ZeroDivisionError" in failed[0]


def test_backtest_command_takes_a_plugin_section(site_dist, tmp_path):
    path = write_config(tmp_path, "")
    recording = tmp_path / "lagoon.jsonl"
    recording.write_text(readings([-118.32] * 4 + [0.0] * 6))  # pH 9 for 0..30 s, then pH 7
    rules = tmp_path / "count.yaml"
    rules.write_text("""\
rules:
  ph-window-count:
    - id: outlet-count
      probes: ["lagoon-*"]
      above_ph: 8.5
      window_s: 60
      max_count: 2
  faulty-kind: {}
""")
    done = probeflow(["backtest", str(recording), "--config", str(path), "--rules", str(rules),
                      "--json", "--no-progress"], site_dist, tmp_path)
    assert done.returncode == 0, done.stderr
    stats = {s["rule"]: s for s in json.loads(done.stdout)["sets"]["A"]}
    # above 8.5 at 0, 10, 20, 30: at t = 20 the window (-40, 20] holds 3: raise at 20;
    # at t = 60, (0, 60] still holds 10, 20, 30; at t = 70, (10, 70] holds 20, 30: clear at 70
    assert stats["outlet-count"]["activations"] == 1
    assert stats["outlet-count"]["active_s"] == 50.0
    assert stats["faulty"]["errors"] >= 1 and stats["faulty"]["activations"] == 0


def test_the_example_kind_in_the_interface_docstring_works():
    """The worked example in probeflow.rules.base runs as written (it must not go stale)."""
    import textwrap

    from probeflow.rules import base

    doc = base.__doc__
    start = doc.index("    import numpy as np")
    end = doc.index("The config loader validates")
    namespace: dict = {}
    exec(compile(textwrap.dedent(doc[start:end]), "probeflow.rules.base example", "exec"),  # noqa: S102
         namespace)
    register_plugin(RULES, "ph_window_count", namespace["WindowCount"])
    try:
        cfg = parse_rules_config({"ph_window_count": [{"id": "doc-count", "probes": ["lagoon-*"],
                                                       "above_ph": 8.5, "window_s": 60,
                                                       "max_count": 2}]})
        events = build_rule_engine(cfg, ["lagoon-out"]).process(batch_of(rows(SEQUENCE)))
    finally:
        unregister_plugin(RULES, "ph_window_count")
    assert times(events) == [("raise", 30.0), ("clear", 60.0)]  # as worked out above SEQUENCE
