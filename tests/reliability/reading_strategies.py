"""Hypothesis strategies for reading records: good ones, and bad ones of every kind.

Each strategy yields a :class:`Item`: the raw bytes of one record plus what the
parser must do with it (accept it with known values, or reject it).  The
classification is made here, from how the item was built, independently of
the parser under test.

Bounds follow the contract in ``probeflow/collectors/parse.py``: ``ts`` from
2000-01-01 (``EARLIEST_TS``) to at most one day ahead of the clock for live
sources; finite numbers; a known probe id; at most ``MAX_BYTES`` per record
in these tests.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta, timezone

import orjson
from hypothesis import strategies as st
from reliability_harness import PROBES

from probeflow.collectors.parse import EARLIEST_TS

MAX_BYTES = 2048
"""Record size limit the fuzz parsers are built with [bytes]."""

LATEST_GOOD_TS = 1_735_689_600.0
"""2025-01-01T00:00:00Z: good readings lie in [2000, 2025), safely in the past."""

FAR_FUTURE_TS = 4_102_444_800.0
"""2100-01-01T00:00:00Z: a clock that far ahead is faulty by any measure."""


@dataclass(frozen=True)
class Item:
    raw: bytes
    good: bool
    kind: str                      # what was done to it ("good", "mv_nan", ...)
    probe: str = ""
    ts: float = math.nan
    mv: float = math.nan


finite = st.floats(min_value=-1e6, max_value=1e6, allow_nan=False, allow_infinity=False)
good_ts = st.floats(min_value=EARLIEST_TS, max_value=LATEST_GOOD_TS, allow_nan=False)
zones = st.sampled_from([UTC, timezone(timedelta(hours=5, minutes=30)), timezone(timedelta(hours=-8))])
json_scalars = st.none() | st.booleans() | st.integers(-(2**53), 2**53) | finite | st.text(max_size=20)
json_values = st.recursive(json_scalars, lambda inner: st.lists(inner, max_size=3)
                           | st.dictionaries(st.text(max_size=8), inner, max_size=3), max_leaves=8)
wrong_numbers = (st.text(max_size=12) | st.booleans() | st.lists(finite, max_size=2)
                 | st.dictionaries(st.text(max_size=4), finite, max_size=2))


def _dump(obj: dict[str, object]) -> bytes:
    return orjson.dumps(obj)


@st.composite
def good_items(draw: st.DrawFn) -> Item:
    probe = draw(st.sampled_from(PROBES))
    ts = draw(good_ts)
    mv = draw(finite)
    obj: dict[str, object] = {"probe": probe, "mv": mv}
    if draw(st.booleans()):
        obj["ts"] = ts
    else:  # the same instant as RFC 3339 text in some time zone
        text = datetime.fromtimestamp(ts, draw(zones)).isoformat()
        obj["ts"] = text
        ts = datetime.fromisoformat(text).timestamp()
    temp = draw(st.none() | finite | st.just("absent"))
    if temp != "absent":
        obj["temp_c"] = temp
    if draw(st.booleans()):
        obj["ohms"] = draw(st.floats(min_value=0, max_value=1e4))
    if draw(st.booleans()):
        obj["note"] = draw(json_values)   # other keys are ignored
    return Item(_dump(obj), True, "good", probe, ts, mv)


def _base(draw: st.DrawFn) -> dict[str, object]:
    return {"probe": draw(st.sampled_from(PROBES)), "ts": draw(good_ts), "mv": draw(finite)}


@st.composite
def bad_items(draw: st.DrawFn, *, live: bool = True) -> Item:
    """A record that must be rejected.  ``live``: far-future times count as bad
    (a recording has no clock to compare with)."""
    kinds = ["unknown_probe", "probe_type", "missing", "mv_type", "nonfinite", "ts_past",
             "ts_no_zone", "ts_text", "ts_type", "temp_type", "utf8", "huge", "not_object",
             "broken_json"]
    if live:
        kinds.append("ts_future")
    kind = draw(st.sampled_from(kinds))
    obj = _base(draw)
    if kind == "unknown_probe":
        obj["probe"] = draw(st.text(max_size=30).filter(lambda p: p not in PROBES))
    elif kind == "probe_type":
        obj["probe"] = draw(st.none() | st.integers() .filter(lambda i: abs(i) < 2**60)
                            | st.lists(st.sampled_from(PROBES), max_size=2) | st.booleans())
    elif kind == "missing":
        del obj[draw(st.sampled_from(["probe", "ts", "mv"]))]
    elif kind == "mv_type":
        obj["mv"] = draw(wrong_numbers | st.none())
    elif kind == "nonfinite":
        field = draw(st.sampled_from(["mv", "ts", "temp_c", "ohms"]))
        token = draw(st.sampled_from(["NaN", "Infinity", "-Infinity", "1e999", "-1e999"]))
        obj[field] = "@@"
        return Item(_dump(obj).replace(b'"@@"', token.encode()), False, kind)
    elif kind == "ts_past":
        obj["ts"] = draw(st.floats(min_value=-1e12, max_value=EARLIEST_TS - 0.001)
                         | st.sampled_from(["1999-12-31T23:59:59Z", "1970-01-01T00:00:00+00:00"]))
    elif kind == "ts_future":
        obj["ts"] = draw(st.floats(min_value=FAR_FUTURE_TS, max_value=1e18)
                         | st.sampled_from(["2100-01-01T00:00:00Z", "9999-12-31T23:59:59Z"]))
    elif kind == "ts_no_zone":
        obj["ts"] = datetime.fromtimestamp(draw(good_ts), UTC).replace(tzinfo=None).isoformat()
    elif kind == "ts_text":
        obj["ts"] = draw(st.text(max_size=25).filter(lambda t: not _iso_with_zone(t)))
    elif kind == "ts_type":
        obj["ts"] = draw(st.booleans() | st.lists(finite, max_size=2) | st.none())
    elif kind == "temp_type":
        obj[draw(st.sampled_from(["temp_c", "ohms"]))] = draw(wrong_numbers)
    elif kind == "utf8":
        raw = _dump(obj)
        cut = draw(st.integers(1, len(raw) - 1))
        junk = draw(st.sampled_from([b"\xff", b"\xc3", b"\xed\xa0\x80", b"\x80\x80"]))
        return Item(raw[:cut] + junk + raw[cut:], False, kind)
    elif kind == "huge":
        obj["padding"] = "x" * draw(st.integers(MAX_BYTES, 4 * MAX_BYTES))
    elif kind == "not_object":
        return Item(orjson.dumps(draw(json_scalars | st.lists(json_scalars, max_size=3))), False, kind)
    elif kind == "broken_json":
        raw = _dump(obj)
        return Item(raw[: draw(st.integers(1, len(raw) - 1))], False, kind)
    return Item(_dump(obj), False, kind)


def _iso_with_zone(text: str) -> bool:
    try:
        return datetime.fromisoformat(text).tzinfo is not None
    except ValueError:
        return False


def items(*, live: bool = True) -> st.SearchStrategy[Item]:
    return good_items() | bad_items(live=live)
