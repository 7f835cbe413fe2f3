"""Line protocol from numpy columns, checked against influxdb-client's own Point serialiser.

Reference: influxdb-client's ``Point.to_line_protocol`` (a general-purpose library
that follows the InfluxDB v2 line protocol reference, "Special characters").
Lines are compared after parsing both into (measurement, tags, fields, time),
because the two writers may order fields and spell floats differently
(``7.0`` against ``7``) while meaning the same point.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from influxdb_client import Point, WritePrecision
from stores.conftest import T0, make_batch

from probeflow.batch import QUALITY_NAMES
from probeflow.events import AlertEvent
from probeflow.stores.line_protocol import (
    alert_lines,
    escape_measurement,
    escape_name,
    escape_string_value,
    reading_lines,
    timestamps_at_precision,
)

FIELDS = ("ph", "mv", "temp_c", "neutral_ph", "neutral_dev")


def _split_unescaped(text: str, sep: str, maxsplit: int = -1, quotes: bool = False) -> list[str]:
    """Split at ``sep`` where it is not backslash-escaped (nor inside quotes, with ``quotes``)."""
    parts, cur, i, quoted = [], [], 0, False
    while i < len(text):
        ch = text[i]
        if ch == "\\" and i + 1 < len(text):
            cur.append(text[i : i + 2])
            i += 2
            continue
        if ch == '"' and quotes:
            quoted = not quoted
        if ch == sep and not quoted and (maxsplit < 0 or len(parts) < maxsplit):
            parts.append("".join(cur))
            cur = []
        else:
            cur.append(ch)
        i += 1
    parts.append("".join(cur))
    return parts


def _unescape(text: str) -> str:
    out, i = [], 0
    while i < len(text):
        if text[i] == "\\" and i + 1 < len(text) and text[i + 1] in ' ,=\\"':
            out.append(text[i + 1])
            i += 2
        else:
            out.append(text[i])
            i += 1
    return "".join(out)


def parse(line: str) -> tuple[str, dict[str, str], dict[str, object], int]:
    key, rest = _split_unescaped(line, " ", 1)
    fields, stamp = _split_unescaped(rest, " ", quotes=True)
    name, *tags = _split_unescaped(key, ",")
    tag_map = {_unescape(k): _unescape(v) for k, v in (_split_unescaped(t, "=", 1) for t in tags)}
    field_map: dict[str, object] = {}
    for item in _split_unescaped(fields, ",", quotes=True):
        k, v = _split_unescaped(item, "=", 1)
        field_map[_unescape(k)] = _unescape(v[1:-1]) if v.startswith('"') else float(v)
    return _unescape(name), tag_map, field_map, int(stamp)


def reference_line(probe: str, quality: str, site: str, values: dict[str, float], ts_ms: int) -> str:
    point = Point("ph").tag("probe", probe).tag("quality", quality).tag("site", site)
    for name, value in values.items():
        point = point.field(name, value)
    return point.time(ts_ms, WritePrecision.MS).to_line_protocol()


tag_text = st.text(
    alphabet=st.characters(blacklist_categories=("Cs", "Cc")) | st.sampled_from(list(" ,=\"")),
    min_size=1, max_size=12,
).filter(lambda s: not s.endswith("\\") and "\\" not in s)
value = st.one_of(st.floats(allow_nan=True, allow_infinity=True, width=64), st.just(math.nan))


@settings(max_examples=60, deadline=None)
@given(rows=st.lists(st.tuples(tag_text, st.sampled_from(range(len(QUALITY_NAMES))),
                               st.lists(value, min_size=5, max_size=5),
                               st.integers(0, 10**9)), min_size=1, max_size=30))
def test_fast_builder_matches_point_objects(rows):
    """Same points as influxdb-client's Point, row for row (NaN and inf fields left out)."""
    probes = [r[0] for r in rows]
    ts = [T0 + r[3] / 1000 for r in rows]
    cols = {f: [r[2][k] for r in rows] for k, f in enumerate(FIELDS)}
    batch = make_batch(probes, ts, quality=[r[1] for r in rows], **cols)
    built = reading_lines(batch, site="north weir", precision="ms")
    expected, expected_rejected = [], 0
    for r, t in zip(rows, ts):
        finite = {f: v for f, v in zip(FIELDS, r[2]) if math.isfinite(v)}
        if not finite:
            expected_rejected += 1
            continue
        expected.append(parse(reference_line(r[0], QUALITY_NAMES[r[1]], "north weir", finite,
                                             round(t * 1000))))
    got = [parse(line) for line in built.lines]
    assert got == expected
    assert len(built.rejected) == expected_rejected


def test_mv_kept_when_every_other_field_is_nan():
    nan = math.nan
    batch = make_batch(["tank-3"], [T0 + 0.25], ph=[nan], mv=[-41.5], temp_c=[nan],
                       neutral_ph=[nan], neutral_dev=[nan], quality=[2])
    built = reading_lines(batch, site="north-weir")
    assert built.lines == ["ph,probe=tank-3,quality=temp_fault,site=north-weir mv=-41.5 1764633600250"]


def test_row_without_any_finite_value_or_time_is_rejected_with_reason():
    nan = math.nan
    batch = make_batch(["a", "b", "c"], [T0, nan, T0 + 1], ph=[nan, 7.0, 7.0], mv=[nan, 1.0, 2.0],
                       temp_c=[nan, 25.0, 25.0], neutral_ph=[nan, 7.0, 7.0], neutral_dev=[nan, 0.0, 0.0])
    built = reading_lines(batch)
    assert len(built.lines) == 1 and built.lines[0].startswith("ph,probe=c,")
    reasons = sorted(reason for _, reason in built.rejected)
    assert reasons == ["no finite value among ph, mv, temp_c, neutral_ph, neutral_dev",
                       "timestamp is not a finite number"]


def test_probe_id_with_line_break_is_rejected_not_written():
    batch = make_batch(["ok-1", "bad\nid"], [T0, T0])
    built = reading_lines(batch)
    assert len(built.lines) == 1 and "ok-1" in built.lines[0]
    assert len(built.rejected) == 1 and "line break" in built.rejected[0][1]


@pytest.mark.parametrize(
    ("raw", "escaped"),
    [   # InfluxDB v2 line protocol reference, "Special characters" (from memory of its table)
        ("tank 3", "tank\\ 3"),
        ("a,b", "a\\,b"),
        ("k=v", "k\\=v"),
        ("back\\slash", "back\\\\slash"),
        ("tank 3,a=b", "tank\\ 3\\,a\\=b"),
    ],
)
def test_name_escaping(raw, escaped):
    assert escape_name(raw) == escaped


def test_measurement_and_string_escaping():
    # Measurement: comma and space escaped, equals sign left alone (same reference).
    assert escape_measurement("ph a,b=c") == "ph\\ a\\,b=c"
    assert escape_string_value('say "hi" \\ ok') == '"say \\"hi\\" \\\\ ok"'


def test_timestamps_at_each_precision():
    ts = np.array([1764633600.25, 1764633600.123])
    assert timestamps_at_precision(ts, "ms").tolist() == [1764633600250, 1764633600123]
    assert timestamps_at_precision(ts, "s").tolist() == [1764633600, 1764633600]
    assert timestamps_at_precision(ts, "us").tolist() == [1764633600250000, 1764633600123000]


def test_alert_lines_layout():
    ev = AlertEvent("effluent band", "tank-3", "ph", "high", "raise", "unack_active",
                    T0 + 0.5, 9.4, math.inf)
    built = alert_lines([ev], site="north-weir")
    assert built.lines == [
        (
            'ph_alert,limit=high,probe=tank-3,rule=effluent\\ band,site=north-weir '
            'value=9.4,state="unack_active",event="raise" 1764633600500'
        )
    ]
