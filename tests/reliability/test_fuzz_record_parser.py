"""Fuzz the JSON reading parser (probeflow/collectors/parse.py) shared by the
stdin, file (JSON Lines) and MQTT sources.

Properties: no exception other than ParseError ever escapes; every record is
either accepted with exactly the values it carried or rejected with a reason
and its raw bytes; accepted + rejected = records given.
"""

from __future__ import annotations

import math

import orjson
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from reading_strategies import MAX_BYTES, Item, bad_items, good_items, items
from reliability_harness import PROBES

from probeflow.collectors.parse import EARLIEST_TS, RecordParser, reason_kind
from probeflow.errors import ParseError

FUZZ = settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def _parser() -> RecordParser:
    return RecordParser(frozenset(PROBES), max_bytes=MAX_BYTES)


def _check_accepted(item: Item, row: tuple[str, float, float]) -> None:
    probe, ts, mv = row
    assert (probe, mv) == (item.probe, item.mv)
    assert ts == pytest.approx(item.ts, abs=1e-6)
    assert math.isfinite(ts) and ts >= EARLIEST_TS and math.isfinite(mv)


@FUZZ
@given(st.lists(items(), max_size=40))
def test_json_lines_accept_exactly_the_good_records(batch: list[Item]) -> None:
    out = _parser().lines([i.raw for i in batch])
    good = [i for i in batch if i.good]
    bad = [i for i in batch if not i.good]
    assert len(out) == len(good)
    for item, row in zip(good, zip(out.probe, out.ts, out.mv)):
        _check_accepted(item, row)
    assert [raw for _reason, raw in out.rejects] == [i.raw for i in bad]
    for (reason, _raw), item in zip(out.rejects, bad):
        assert isinstance(reason, str) and reason.strip(), item.kind


@FUZZ
@given(items())
def test_one_record_is_accepted_or_raises_parse_error(item: Item) -> None:
    parser = _parser()
    if item.good:
        _check_accepted(item, parser.one(item.raw)[:3])
    else:
        with pytest.raises(ParseError) as caught:
            parser.one(item.raw)
        assert caught.value.reason.strip()


@FUZZ
@given(st.lists(good_items() | bad_items().filter(lambda i: i.kind not in ("not_object",)),
                min_size=1, max_size=10))
def test_mqtt_array_payload_rejects_only_its_bad_elements(batch: list[Item]) -> None:
    """A payload holding an array of records keeps the good ones and quarantines
    each bad one on its own (elements that are not valid JSON on their own are
    left out: they would make the whole payload invalid)."""
    usable = [i for i in batch if i.kind not in ("nonfinite", "utf8", "broken_json", "huge")]
    raw = b"[" + b",".join(i.raw for i in usable) + b"]"
    out = _parser().payload(raw)
    if not usable:   # an empty array is quarantined as such, never counted nowhere
        assert len(out) == 0 and [(reason_kind(r), x) for r, x in out.rejects] == [("empty array", raw)]
        return
    if len(raw) > MAX_BYTES:
        assert len(out) == 0 and len(out.rejects) == 1
        assert out.rejects[0][0].startswith("too long")
        return
    good = [i for i in usable if i.good]
    assert len(out) == len(good)
    for item, row in zip(good, zip(out.probe, out.ts, out.mv)):
        _check_accepted(item, row)
    assert len(out.rejects) == len(usable) - len(good)
    for (_reason, raw_item), item in zip(out.rejects, [i for i in usable if not i.good]):
        # one element: the payload as received is kept; several: the element itself
        expected = [orjson.loads(item.raw)] if len(usable) == 1 else orjson.loads(item.raw)
        assert orjson.loads(raw_item) == expected


@FUZZ
@given(st.binary(max_size=3 * MAX_BYTES))
def test_arbitrary_bytes_never_escape_as_anything_but_parse_error(raw: bytes) -> None:
    parser = _parser()
    out = parser.payload(raw)
    assert len(out) + len(out.rejects) >= 1   # every payload is accounted for (an empty array too)
    lines = raw.split(b"\n")
    out = parser.lines(lines)
    assert len(out) + len(out.rejects) == sum(1 for ln in lines if ln.strip())
    try:
        parser.one(raw)
    except ParseError:
        pass


@FUZZ
@given(st.floats(min_value=86400.0 * 2, max_value=1e18))
def test_live_sources_refuse_times_ahead_of_the_clock(ahead: float) -> None:
    """A live parser (MQTT, serial, stdin) allows one day of clock skew, no more."""
    import time

    raw = orjson.dumps({"probe": "tank-3", "ts": time.time() + ahead, "mv": 1.0})
    with pytest.raises(ParseError, match="future"):
        _parser().one(raw)


def test_the_size_limit_is_checked_before_decoding() -> None:
    """A record over the limit is refused unparsed, whatever it holds."""
    raw = orjson.dumps({"probe": "tank-3", "ts": 1.7e9, "mv": 1.0, "pad": "y" * MAX_BYTES})
    with pytest.raises(ParseError, match="too long"):
        _parser().one(raw)
    out = _parser().lines([raw])
    assert len(out) == 0 and out.rejects[0][1] == raw
