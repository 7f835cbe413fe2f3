"""The columnar fast path of RecordParser (collectors/parse.py) against the
per-record path: same readings, same rejects, for any mix of good and bad input.

Reference: a loop calling ``RecordParser.record`` on each decoded line, the
straightforward validation every rule of the reading format lives in.
"""

from __future__ import annotations

import math

import orjson
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from probeflow.collectors.parse import ParsedReadings, RecordParser
from probeflow.errors import ParseError

PROBES = frozenset({"tank-3", "tank-4", "basin-1"})
FUZZ = settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def reference_lines(parser: RecordParser, lines: list[bytes]) -> ParsedReadings:
    out = ParsedReadings()
    for raw in lines:
        try:
            obj = orjson.loads(raw)
        except orjson.JSONDecodeError as exc:
            if raw.strip():
                out.rejects.append((f"not valid JSON: {exc}", raw))
            continue
        try:
            out.add(parser.record(obj, None, parser.latest()))
        except ParseError as exc:
            out.rejects.append((exc.reason, raw))
    return out


def same(a: ParsedReadings, b: ParsedReadings) -> None:
    assert a.probe == b.probe
    for name in ("ts", "mv", "temp_c", "ohms"):
        x, y = getattr(a, name), getattr(b, name)
        assert len(x) == len(y)
        for u, v in zip(x, y):
            assert type(u) is float and type(v) is float
            assert (u == v) or (math.isnan(u) and math.isnan(v)), name
    assert [raw for _r, raw in a.rejects] == [raw for _r, raw in b.rejects]
    assert [r.split(":")[0] for r, _ in a.rejects] == [r.split(":")[0] for r, _ in b.rejects]


numbers = st.one_of(st.floats(allow_nan=False, allow_infinity=False, width=64),
                    st.integers(min_value=-(2**63), max_value=2**64 - 1))
good_ts = st.one_of(st.floats(min_value=946684800.0, max_value=4.0e9),
                    st.integers(min_value=946684800, max_value=4_000_000_000))
odd = st.one_of(st.none(), st.booleans(), st.text(max_size=5), st.just("2025-12-02T00:00:00Z"),
                st.lists(st.integers(-5, 5), max_size=2), st.just(1.0e300))


@st.composite
def records(draw: st.DrawFn, bad_rate: float) -> dict[str, object]:
    rec: dict[str, object] = {"probe": draw(st.sampled_from(sorted(PROBES))), "ts": draw(good_ts),
                              "mv": draw(numbers)}
    if draw(st.booleans()):
        rec["temp_c"] = draw(st.one_of(st.none(), numbers))
    if draw(st.integers(0, 9)) == 0:
        rec["ohms"] = draw(st.one_of(st.none(), numbers))
    if draw(st.floats(0, 1)) < bad_rate:
        key = draw(st.sampled_from(["probe", "ts", "mv", "temp_c", "ohms"]))
        choice = draw(st.integers(0, 2))
        if choice == 0:
            rec.pop(key, None)
        elif choice == 1:
            rec[key] = draw(odd)
        else:
            rec[key] = "unknown-probe" if key == "probe" else 100.0 if key != "ts" else 12.0
    return rec


@FUZZ
@given(st.lists(records(bad_rate=0.0), min_size=1, max_size=60))
def test_all_good_lines_take_the_fast_path_with_the_same_readings(recs: list[dict]) -> None:
    parser = RecordParser(PROBES, future_s=None)
    lines = [orjson.dumps(r) for r in recs]
    assert parser.columns([orjson.loads(x) for x in lines], None, parser.latest()) is not None
    assert parser._typed_lines(ParsedReadings(), lines, parser.latest())   # the msgspec path takes them
    same(parser.lines(lines), reference_lines(parser, lines))


NUMBER_TEXTS = ["0", "-0", "-0.0", "1.5e2", "1E-3", "-2.5E+3", "123456789012345678901234567890",
                "18446744073709551616", "0.1", "1e-320", "7.000000000000001", "4.9e-324",
                "1.7976931348623157e308"]


@FUZZ
@given(st.lists(st.tuples(st.sampled_from(NUMBER_TEXTS), st.sampled_from(NUMBER_TEXTS),
                          st.sampled_from(["", " ", "\t", "\r"]),
                          st.sampled_from(["", ',"note":"x"', ',"mv":3', ',"temp_c":null',
                                           ',"probe":"tank-4"', ',"nested":{"a":[1,{"b":null}]}'])),
                min_size=1, max_size=20))
def test_number_spellings_and_extra_keys_read_like_orjson(parts: list[tuple[str, str, str, str]]) -> None:
    """Both decoders must read every JSON number spelling to the same float, and
    a repeated key (the last one counts, as in orjson) the same way."""
    parser = RecordParser(PROBES, future_s=None)
    lines = [f'{pad}{{"probe":"tank-3","ts":1764633600,"mv":{mv},"temp_c":{t}{extra}}}{pad}'.encode()
             for mv, t, pad, extra in parts]
    same(parser.lines(lines), reference_lines(parser, lines))


def test_lines_that_only_decode_together_are_rejected_one_by_one() -> None:
    """Two records on one line, or one record split over two, are malformed lines
    (JSON Lines: one value per line), whatever a stream decoder would make of them."""
    parser = RecordParser(PROBES, future_s=None)
    rec = b'{"probe":"tank-3","ts":1764633600,"mv":1.5}'
    for lines in ([rec + b" " + rec, b""], [b'{"probe":"tank-3",', b'"ts":1764633600,"mv":1.5}'],
                  [rec + b"," + rec[:-1] + b',"x":"', b'"}']):
        got = parser.lines(lines)
        assert len(got.probe) == 0 and len(got.rejects) == sum(1 for x in lines if x.strip())
        same(got, reference_lines(parser, lines))


@FUZZ
@given(st.lists(records(bad_rate=0.2), min_size=1, max_size=60),
       st.lists(st.sampled_from([b"", b"garbage", b"[1,2]", b"{\"probe\": 1}"]), max_size=3))
def test_mixed_lines_give_what_the_per_record_path_gives(recs: list[dict], junk: list[bytes]) -> None:
    parser = RecordParser(PROBES, future_s=None)
    lines = [orjson.dumps(r) for r in recs] + junk
    same(parser.lines(lines), reference_lines(parser, lines))


@FUZZ
@given(st.lists(records(bad_rate=0.2), min_size=2, max_size=40),
       st.one_of(st.none(), st.sampled_from(sorted(PROBES))))
def test_array_payloads_give_what_the_per_record_path_gives(recs: list[dict],
                                                            topic_probe: str | None) -> None:
    parser = RecordParser(PROBES, future_s=None)
    for r in recs[::3]:
        r.pop("probe", None)            # these take the probe from the topic
    raw = orjson.dumps(recs)
    fast = parser.payload(raw, topic_probe)
    ref = ParsedReadings()
    for item in recs:
        try:
            ref.add(parser.record(item, topic_probe, parser.latest()))
        except ParseError as exc:
            ref.rejects.append((exc.reason, orjson.dumps(item)))
    same(fast, ref)


def test_column_checks_refuse_what_the_record_check_refuses() -> None:
    parser = RecordParser(PROBES)
    good = {"probe": "tank-3", "ts": 1764633600.5, "mv": 1.5, "temp_c": None}
    assert parser.columns([good, dict(good, ts=1764633601)]) is not None
    for bad in ({"mv": True}, {"mv": "1.5"}, {"ts": 946684799.0}, {"ts": 1e12},
                {"temp_c": "warm"}, {"probe": "tank-9"}, {"probe": 3}, {"ohms": [1]}):
        assert parser.columns([good, dict(good, **bad)]) is None, bad
        with pytest.raises(ParseError):
            parser.record(dict(good, **bad))
    assert parser.columns([good, [good]]) is None
    assert parser.columns([]) is None


def test_integers_and_nulls_become_the_same_floats() -> None:
    parser = RecordParser(PROBES, future_s=None)
    recs = [{"probe": "tank-4", "ts": 1764633600, "mv": -3, "temp_c": 18, "ohms": None},
            {"probe": "tank-4", "ts": 1764633601.25, "mv": 2**64 - 1, "temp_c": None}]
    cols = parser.columns(recs)
    assert cols is not None
    assert cols[1] == [1764633600.0, 1764633601.25] and cols[2] == [-3.0, float(2**64 - 1)]
    assert cols[3][0] == 18.0 and math.isnan(cols[3][1]) and all(math.isnan(x) for x in cols[4])
    assert all(type(x) is float for col in cols[1:] for x in col)
