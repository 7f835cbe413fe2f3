"""Fuzz the serial line parser (probeflow/collectors/lines.py) and, through a
real pseudo-terminal, the serial collector's handling of garbage bytes.

Properties: a line gives a dict of known fields or a ParseError, nothing else;
together with the record check (parse.py) a line is accepted with the values
written in it or rejected with a reason; over a real pty every complete line
sent is either received or quarantined.
"""

from __future__ import annotations

import math
import os
import random
import time

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from reliability_harness import PROBES, Recorder, wait_until

from probeflow.collectors.parse import EARLIEST_TS, RecordParser
from probeflow.errors import ParseError

lines_module = pytest.importorskip(
    "probeflow.collectors.lines",
    reason="probeflow/collectors/lines.py (the serial line parser) is not in the tree yet")
LINE_FIELDS = lines_module.LINE_FIELDS
LineParser = lines_module.LineParser

FUZZ = settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])

LAYOUTS = {
    "csv": LineParser("csv", fields=["probe", "ts", "mv", "temp_c"]),
    "csv_skip": LineParser("csv", fields=["_", "mv", "temp_c"], delimiter=";", probe="tank-3"),
    "kv": LineParser("kv", keys={"E": "mv", "T": "temp_c", "ID": "probe"}),
    "regex": LineParser("regex", pattern=r"(?P<probe>\S+) E=(?P<mv>\S+) mV T=(?P<temp_c>\S*)"),
}
DEFAULT_PROBE = {"csv_skip": "tank-3"}
"""The port's ``probe:`` setting, for layouts whose lines carry no probe id."""
GOOD_TS = st.floats(min_value=EARLIEST_TS, max_value=1_735_689_600.0)
NUMBER = st.floats(min_value=-1e5, max_value=1e5, allow_nan=False)
line_text = st.text(alphabet=st.characters(blacklist_categories=("Cs",), blacklist_characters="\n\r"),
                     max_size=120)
near_miss = st.builds(
    lambda cells: ",".join(cells),
    st.lists(st.sampled_from(["tank-3", "nan", "inf", "-1e999", "", " ", "1.5", "x", "1,2",
                              "2026-12-01T00:00:00Z", "1764633600", "9e99", "=", "E=3"]),
             max_size=6))


def _records() -> RecordParser:
    return RecordParser(frozenset(PROBES), max_bytes=4096)


@FUZZ
@given(layout=st.sampled_from(sorted(LAYOUTS)), line=line_text | near_miss)
def test_any_line_gives_known_fields_or_a_parse_error(layout: str, line: str) -> None:
    try:
        values = LAYOUTS[layout].values(line)
    except ParseError as exc:
        assert exc.reason.strip()
        return
    assert set(values) <= set(LINE_FIELDS)
    for name in ("mv", "temp_c", "ohms"):
        if name in values:
            assert isinstance(values[name], float)
    try:
        probe, ts, mv, _temp_c, _ohms = _records().record(dict(values), DEFAULT_PROBE.get(layout))
    except ParseError as exc:
        assert exc.reason.strip()
        return
    assert probe in PROBES and math.isfinite(mv) and math.isfinite(ts) and ts >= EARLIEST_TS


@st.composite
def csv_lines(draw: st.DrawFn) -> tuple[str, bool, tuple[str, float, float] | None]:
    """(line, should be accepted, (probe, ts, mv) when accepted) for fields probe,ts,mv,temp_c."""
    probe = draw(st.sampled_from(PROBES))
    ts = draw(GOOD_TS)
    mv = draw(NUMBER)
    temp = draw(st.sampled_from([""]) | NUMBER.map(repr))
    kind = draw(st.sampled_from(["good", "unknown_probe", "columns", "mv_text", "mv_nonfinite",
                                 "ts_past", "ts_future", "temp_nonfinite", "empty_mv"]))
    cells = [probe, repr(ts), repr(mv), temp]
    if kind == "unknown_probe":
        cells[0] = draw(st.text(alphabet="abcxyz-19", min_size=1, max_size=10).filter(
            lambda p: p not in PROBES))
    elif kind == "columns":
        cells = cells[: draw(st.integers(0, 3))] if draw(st.booleans()) else cells + ["1"]
    elif kind == "mv_text":
        cells[2] = draw(st.sampled_from(["12,5", "abc", "--1", "1.2.3", "0x10"]))
    elif kind == "mv_nonfinite":
        cells[2] = draw(st.sampled_from(["nan", "inf", "-inf", "1e999", "NaN"]))
    elif kind == "ts_past":
        cells[1] = repr(draw(st.floats(min_value=0, max_value=EARLIEST_TS - 1)))
    elif kind == "ts_future":
        cells[1] = repr(draw(st.floats(min_value=4.2e9, max_value=1e15)))
    elif kind == "temp_nonfinite":
        cells[3] = draw(st.sampled_from(["nan", "inf", "-inf"]))
    elif kind == "empty_mv":
        cells[2] = ""
    line = ",".join(cells)
    good = kind == "good"
    return line, good, (probe, ts, mv) if good else None


@FUZZ
@given(st.lists(csv_lines(), max_size=30))
def test_csv_lines_accept_exactly_the_good_ones(batch: list[tuple[str, bool, object]]) -> None:
    parser = LAYOUTS["csv"]
    records = _records()
    accepted, rejected = [], 0
    for line, _good, _expected in batch:
        try:
            accepted.append(records.record(dict(parser.values(line)))[:3])
        except ParseError as exc:
            assert exc.reason.strip()
            rejected += 1
    assert accepted == [expected for _line, good, expected in batch if good]
    assert rejected == sum(1 for _line, good, _e in batch if not good)


def _mixed_lines(seed: int, n: int) -> list[tuple[bytes, bool]]:
    """n lines of invented device output, each with whether it is a valid reading."""
    rng = random.Random(seed)
    out: list[tuple[bytes, bool]] = []
    for _ in range(n):
        probe = rng.choice(PROBES)
        good = f"{probe},{rng.uniform(-400, 400):.3f},{rng.uniform(5, 60):.2f}".encode()
        choice = rng.randrange(8)
        if choice < 3:
            out.append((good, True))
        elif choice == 3:
            cut = rng.randrange(1, len(good))
            out.append((good[:cut] + bytes([rng.randrange(0x80, 0x100)]) + good[cut:], False))
        elif choice == 4:
            out.append((b"x" * rng.randrange(300, 900), False))  # over max_line_bytes
        elif choice == 5:
            out.append((f"{probe},nan,25.0".encode(), False))
        elif choice == 6:
            out.append((bytes(rng.randrange(1, 9) for _ in range(rng.randrange(1, 40))) + b"!", False))
        else:
            out.append((f"ghost-9,{rng.uniform(-400, 400):.3f},20".encode(), False))
    return out


def test_garbage_over_a_real_pty_is_received_or_quarantined() -> None:
    """A seeded mix of good lines, invalid ASCII, over-long lines, NaN, control
    bytes and unknown probes, written to a real pseudo-terminal: every line is
    either received or quarantined with a reason."""
    serial_module = pytest.importorskip("probeflow.collectors.serial",
                                        reason="probeflow/collectors/serial.py is not in the tree yet")
    import termios
    import tty

    master, slave = os.openpty()
    tty.setraw(slave)
    attrs = termios.tcgetattr(slave)
    attrs[3] &= ~termios.ECHO
    termios.tcsetattr(slave, termios.TCSANOW, attrs)
    recorder = Recorder()
    config = serial_module.SerialCollectorConfig(
        port=os.ttyname(slave), fields=["probe", "mv", "temp_c"], max_line_bytes=256,
        drop_first_line=False, timeout_s=0.05)
    collector = serial_module.SerialCollector(config, recorder.context("serial:fuzz"))
    lines = _mixed_lines(seed=20261202, n=300)
    collector.start()
    try:
        wait_until(lambda: collector.context.counters.connected, "the serial port to open")
        for raw, _good in lines:
            os.write(master, raw + b"\r\n")
            time.sleep(0.0005)
        wait_until(lambda: recorder.readings + len(recorder.quarantined) >= len(lines),
                   "every line to be received or quarantined")
    finally:
        collector.stop(timeout=5.0)
        os.close(master)
        os.close(slave)
    assert recorder.readings == sum(1 for _r, good in lines if good)
    assert len(recorder.quarantined) == sum(1 for _r, good in lines if not good)
    assert all(item.reason.strip() for item in recorder.quarantined)
    assert collector.context.counters.quarantined == len(recorder.quarantined)
