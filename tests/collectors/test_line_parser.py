"""LineParser: the three line layouts, layout checks at config time, and a fuzz run.

The example lines are invented instrument output; the checks are of the
parsing contract (field names, numbers, reasons), with no outside reference
values involved.
"""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from probeflow.collectors.lines import LineParser
from probeflow.collectors.parse import RecordParser
from probeflow.errors import ParseError


def test_csv_columns_skip_and_spaces() -> None:
    p = LineParser("csv", fields=["probe", "_", "mv", "temp_c"])
    assert p.values(" tank-3 , A1, -12.34 ,41.7") == {"probe": "tank-3", "mv": -12.34, "temp_c": 41.7}


def test_csv_empty_optional_column_means_no_value() -> None:
    p = LineParser("csv", fields=["mv", "temp_c"], probe="tank-3")
    assert p.values("-12.5,") == {"mv": -12.5}
    with pytest.raises(ParseError, match="mv is not a number"):
        p.values(",25.0")


def test_semicolon_delimiter_and_epoch_ts() -> None:
    p = LineParser("csv", fields=["ts", "mv"], delimiter=";", probe="tank-3")
    assert p.values("1764633600.25;-1.5") == {"ts": 1764633600.25, "mv": -1.5}


def test_kv_pairs_renamed_keys_and_unknown_keys_ignored() -> None:
    p = LineParser("kv", keys={"E": "mv", "T": "temp_c"})
    assert p.values("probe=tank-4, E=7.5; T=19 status=ok") == {"probe": "tank-4", "mv": 7.5, "temp_c": 19.0}
    with pytest.raises(ParseError, match="not a key=value pair"):
        p.values("E=7.5 OVERRANGE")


def test_regex_named_groups_and_optional_group() -> None:
    p = LineParser("regex", pattern=r"(?P<probe>\w+-\d) (?P<mv>\S+)(?: (?P<temp_c>\S+))?$")
    assert p.values("tank-3 -3.5 22.5") == {"probe": "tank-3", "mv": -3.5, "temp_c": 22.5}
    assert p.values("tank-3 -3.5") == {"probe": "tank-3", "mv": -3.5}
    with pytest.raises(ParseError, match="does not match"):
        p.values("hello")


@pytest.mark.parametrize(("kwargs", "key"), [
    ({"fmt": "csv"}, "fields"),
    ({"fmt": "csv", "fields": ["probe", "temp_c"]}, "fields"),
    ({"fmt": "csv", "fields": ["probe", "mv", "mv"]}, "fields"),
    ({"fmt": "csv", "fields": ["probe", "millivolts"]}, "fields"),
    ({"fmt": "csv", "fields": ["mv", "temp_c"]}, "probe"),
    ({"fmt": "regex", "pattern": "(?P<mv>"}, "pattern"),
    ({"fmt": "regex", "pattern": r"(?P<volts>\S+)"}, "pattern"),
    ({"fmt": "regex", "pattern": r"(?P<temp_c>\S+)", "probe": "x"}, "pattern"),
    ({"fmt": "kv", "keys": {"E": "millivolts"}}, "keys.E"),
])
def test_layout_errors_name_the_key(kwargs: dict, key: str) -> None:
    fmt = kwargs.pop("fmt")
    with pytest.raises(ValueError) as err:
        LineParser(fmt, **kwargs)
    assert str(err.value).startswith(key + ":")


def test_serial_config_reports_layout_problem() -> None:
    from pydantic import ValidationError

    from probeflow.collectors.serial import SerialCollector

    with pytest.raises(ValidationError) as err:
        SerialCollector.Config(type="serial", port="/dev/ttyUSB0", format="csv", fields=["probe", "temp_c"])
    assert "fields: there must be an mv column" in str(err.value)
    cfg = SerialCollector.Config(type="serial", port="/dev/ttyUSB0", parity="E", fields=["probe", "mv"])
    assert cfg.parity == "even"


_LAYOUTS = [
    LineParser("csv", fields=["probe", "mv", "temp_c"]),
    LineParser("kv"),
    LineParser("regex", pattern=r"(?P<probe>\S+) (?P<mv>\S+) (?P<ohms>\S+)"),
]
_RECORDS = RecordParser(frozenset({"tank-3", "tank-4"}))


@settings(max_examples=300, deadline=None)
@given(st.text(max_size=80), st.sampled_from(range(len(_LAYOUTS))))
def test_fuzz_lines_give_a_reading_or_a_parse_error(line: str, which: int) -> None:
    """Any text: either a finite reading of a known probe, or ParseError with a reason."""
    try:
        values = _LAYOUTS[which].values(line)
        values.setdefault("ts", 1764633600.0)
        probe, ts, mv, temp_c, ohms = _RECORDS.record(values)
    except ParseError as exc:
        assert exc.reason
        return
    assert probe in ("tank-3", "tank-4")
    assert math.isfinite(mv) and math.isfinite(ts)
    assert math.isnan(temp_c) or math.isfinite(temp_c)
    assert math.isnan(ohms) or math.isfinite(ohms)


@settings(max_examples=200, deadline=None)
@given(st.sampled_from(["tank-3", "tank-4"]), st.floats(allow_nan=False, allow_infinity=False),
       st.floats(min_value=-50, max_value=150))
def test_fuzz_csv_round_trip(probe: str, mv: float, temp_c: float) -> None:
    """A value written with repr() is read back exactly."""
    values = _LAYOUTS[0].values(f"{probe},{mv!r},{temp_c!r}")
    assert values == {"probe": probe, "mv": mv, "temp_c": temp_c}
