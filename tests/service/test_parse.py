"""The shared reading-record parser: accepted forms and every kind of reject."""

from __future__ import annotations

import math

import pytest

from probeflow.collectors.parse import RecordParser, reason_kind
from probeflow.errors import ParseError

KNOWN = frozenset({"tank-3"})


def test_accepts_epoch_and_rfc3339_and_optional_fields():
    parser = RecordParser(KNOWN)
    a = parser.one(b'{"probe":"tank-3","ts":1764633600.25,"mv":-12.34,"temp_c":41.7}')
    b = parser.one(b'{"probe":"tank-3","ts":"2025-12-02T00:00:00.25Z","mv":-12,"ohms":109.73}')
    assert a == ("tank-3", 1764633600.25, -12.34, 41.7, a[4]) and math.isnan(a[4])
    # 2025-12-02T00:00:00Z is 1764633600 epoch seconds (from memory; checked by datetime in CPython)
    assert b[1] == 1764633600.25 and b[2] == -12.0 and math.isnan(b[3]) and b[4] == 109.73


@pytest.mark.parametrize(("raw", "kind"), [
    (b"not json", "not valid JSON"),
    (b'[1, 2]', "not a JSON object"),
    (b'{"ts": 1764633600, "mv": 1}', "missing probe"),
    (b'{"probe": 7, "ts": 1764633600, "mv": 1}', "probe is not text"),
    (b'{"probe": "tank-9", "ts": 1764633600, "mv": 1}', "unknown probe"),
    (b'{"probe": "tank-3", "mv": 1}', "missing ts"),
    (b'{"probe": "tank-3", "ts": 1764633600}', "missing mv"),
    (b'{"probe": "tank-3", "ts": 1764633600, "mv": "12"}', "mv is not a number"),
    (b'{"probe": "tank-3", "ts": 1764633600, "mv": true}', "mv is not a number"),
    (b'{"probe": "tank-3", "ts": 1764633600, "mv": 1e400}', "not valid JSON"),  # orjson refuses inf
    (b'{"probe": "tank-3", "ts": 1764633600, "mv": NaN}', "not valid JSON"),
    (b'{"probe": "tank-3", "ts": "yesterday", "mv": 1}', "ts is not epoch seconds or an RFC 3339 time"),
    (b'{"probe": "tank-3", "ts": "2025-12-02T00:00:00", "mv": 1}', "ts has no time zone (add Z or +00"),
    (b'{"probe": "tank-3", "ts": 12, "mv": 1}', "ts is before the year 2000"),
    (b'{"probe": "tank-3", "ts": 99999999999, "mv": 1}', "ts is too far in the future"),
    (b'{"probe": "tank-3", "ts": 1764633600, "mv": 1, "temp_c": "warm"}', "temp_c is not a number"),
    (b'{"probe": "\xff", "ts": 1764633600, "mv": 1}', "not valid JSON"),
    (b'{"probe": "tank-3", "ts": 1764633600, "mv": 1, "pad": "' + b"x" * 70000 + b'"}', "too long"),
])
def test_rejects_with_reason(raw, kind):
    parser = RecordParser(KNOWN)
    with pytest.raises(ParseError) as info:
        parser.one(raw)
    assert reason_kind(info.value.reason) == kind, info.value.reason


def test_lines_keeps_good_rows_and_every_reject_with_raw_text():
    parser = RecordParser(KNOWN)
    lines = [b'{"probe":"tank-3","ts":1764633600,"mv":1}', b"", b"garbage",
             b'{"probe":"tank-3","ts":1764633601,"mv":2,"temp_c":null}', b'{"probe":"x","ts":1764633600,"mv":1}']
    parsed = parser.lines(lines)
    batch = parsed.batch()
    assert batch.mv.tolist() == [1.0, 2.0] and math.isnan(batch.temp_c[1])
    assert [raw for _, raw in parsed.rejects] == [b"garbage", lines[4]]


def test_payload_array_uses_topic_probe_when_record_has_none():
    parser = RecordParser(frozenset({"tank-3", "tank-4"}))
    parsed = parser.payload(b'[{"ts":1764633600,"mv":1},{"probe":"tank-4","ts":1764633600,"mv":2},'
                            b'{"ts":"bad","mv":3}]', default_probe="tank-3")
    assert parsed.probe == ["tank-3", "tank-4"] and len(parsed.rejects) == 1


def test_non_finite_numbers_in_decoded_records():
    parser = RecordParser(KNOWN)
    for bad in (float("inf"), float("nan")):
        with pytest.raises(ParseError, match="mv is not a finite number"):
            parser.record({"probe": "tank-3", "ts": 1764633600, "mv": bad})
