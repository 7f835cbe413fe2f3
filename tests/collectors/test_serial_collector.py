"""SerialCollector on real pseudo-terminals (os.openpty) standing in for a serial port.

The collector opens a symlink that points at the pty's slave side; the test
writes to the master side as the instrument would.  Closing the master is what
an unplugged USB adapter looks like to the reader; pointing the symlink at a new
pty is the adapter coming back.  The readings are invented (probes tank-3 and
tank-4 of an invented works).
"""

from __future__ import annotations

import io
import itertools
import os
import time
import tty
from collections.abc import Iterator
from pathlib import Path

import pytest
from collector_harness import Sink, wait_until

from probeflow.collectors.serial import SerialCollector
from probeflow.service.log import Log

T0 = 1764633600.0  # 2025-12-02T00:00:00Z


class FakeInstrument:
    """The master side of a pty, reachable through a stable symlink path."""

    def __init__(self, link: Path) -> None:
        self.link = link
        self.master = -1
        self.slave = -1
        self.plug_in()

    def plug_in(self) -> None:
        self.master, self.slave = os.openpty()
        tty.setraw(self.slave)
        tmp = self.link.with_suffix(".new")
        tmp.unlink(missing_ok=True)
        tmp.symlink_to(os.ttyname(self.slave))
        tmp.replace(self.link)

    def unplug(self) -> None:
        os.close(self.master)
        os.close(self.slave)
        self.link.unlink()
        self.master = self.slave = -1

    def send(self, data: bytes) -> None:
        os.write(self.master, data)

    def close(self) -> None:
        if self.master >= 0:
            self.unplug()


@pytest.fixture
def instrument(tmp_path: Path) -> Iterator[FakeInstrument]:
    dev = FakeInstrument(tmp_path / "ttyPH0")
    yield dev
    dev.close()


def make(instrument: FakeInstrument, sink: Sink, *, start: bool = True, log: object = None,
         **cfg: object) -> SerialCollector:
    config = SerialCollector.Config(type="serial", port=str(instrument.link), baud=9600,
                                    timeout_s=0.05, reopen_backoff_min_s=0.05,
                                    reopen_backoff_max_s=0.4, **cfg)
    collector = SerialCollector(config, sink.context("serial:test", log=log))
    if start:
        collector.start()
        assert wait_until(lambda: collector.context.counters.connected), "port not opened"
    return collector


def test_csv_lines_with_partial_writes_across_timeouts(instrument: FakeInstrument, sink: Sink) -> None:
    collector = make(instrument, sink, format="csv", fields=["probe", "mv", "temp_c"])
    try:
        # a line already in progress when the port opened: its tail is kept aside
        instrument.send(b"34,41.7\r\n")
        instrument.send(b"tank-3,-12.")
        time.sleep(0.15)                   # three read timeouts pass mid-line
        instrument.send(b"34,41.7\r\ntank-4,")
        time.sleep(0.12)
        instrument.send(b"88.5,")
        time.sleep(0.12)
        instrument.send(b"25.0\n")
        assert sink.wait_for(lambda: sink.count() == 2)
    finally:
        collector.stop()
    rows = sink.rows()
    assert [(r[0], r[2], r[3]) for r in rows] == [("tank-3", -12.34, 41.7), ("tank-4", 88.5, 25.0)]
    assert rows[0][1] < rows[1][1] <= time.time()       # stamped on arrival, in order
    assert [q.reason for q in sink.quarantined] == ["first line after opening the port, possibly cut off"]
    assert sink.quarantined[0].raw == "34,41.7\r"


def test_kv_lines_with_renamed_keys_and_fixed_probe(instrument: FakeInstrument, sink: Sink) -> None:
    collector = make(instrument, sink, format="kv", keys={"E": "mv", "T": "temp_c"}, probe="tank-3")
    try:
        instrument.send(b"\nE=-51.2 T=18.4 status=ok\n")
        instrument.send(b"probe=tank-4;E=7.5;T=19.0\n")
        instrument.send(b"E=-50.9, T=18.5, ts=2025-12-02T00:00:03Z\n")
        assert sink.wait_for(lambda: sink.count() == 3)
    finally:
        collector.stop()
    rows = sink.rows()
    assert [(r[0], r[2], r[3]) for r in rows] == [
        ("tank-3", -51.2, 18.4), ("tank-4", 7.5, 19.0), ("tank-3", -50.9, 18.5)]
    assert rows[2][1] == T0 + 3.0                       # the line's own time wins
    assert sink.quarantined == []                       # the leading empty line lost nothing


def test_regex_lines_and_garbage_quarantined(instrument: FakeInstrument, sink: Sink) -> None:
    collector = make(
        instrument, sink, format="regex", probe="tank-3",
        pattern=r"^PH1 E=(?P<mv>\S+) mV R=(?P<ohms>\S+) ohm$",
    )
    try:
        instrument.send(b"\n")
        instrument.send(b"PH1 E=-12.5 mV R=109.73 ohm\r\n")
        instrument.send(b"PH1 E=abc mV R=109.73 ohm\n")        # not a number
        instrument.send(b"PH1 E=nan mV R=109.73 ohm\n")        # not finite
        instrument.send(b"\x00\x93\xfe garbage\n")             # noise on the line
        instrument.send(b"PH1 E=3.25 mV R=110.12 ohm\n")
        assert sink.wait_for(lambda: sink.count() == 2 and len(sink.quarantined) == 3)
    finally:
        collector.stop()
    assert [(r[0], r[2], r[4]) for r in sink.rows()] == [("tank-3", -12.5, 109.73), ("tank-3", 3.25, 110.12)]
    reasons = [q.reason for q in sink.quarantined]
    assert reasons[0] == "mv is not a number: 'abc'"
    assert reasons[1].startswith("mv is not a finite number")
    assert reasons[2] == "not ascii text"
    assert sink.quarantined[2].raw == "\x00\\x93\\xfe garbage"  # undecodable bytes escaped
    assert collector.context.counters.quarantined == 3


def test_csv_wrong_columns_unknown_probe_and_overlong_line(instrument: FakeInstrument) -> None:
    sink = Sink()
    config = SerialCollector.Config(type="serial", port=str(instrument.link), format="csv",
                                    fields=["probe", "_", "mv"], timeout_s=0.05, max_line_bytes=64)
    collector = SerialCollector(config, sink.context("serial:test", frozenset({"tank-3"})))
    collector.start()
    try:
        assert wait_until(lambda: collector.context.counters.connected)
        instrument.send(b"\ntank-3,A1,-12.5\n")
        instrument.send(b"tank-3," + b"5" * 70 + b"\n")        # too long, in one piece
        instrument.send(b"tank-3,-12.5\n")                     # a column missing
        instrument.send(b"tank-9,A1,-12.5\n")                  # not a configured probe
        instrument.send(b"9" * 100)                            # no line end for too long
        time.sleep(0.2)
        instrument.send(b"99,more\ntank-3,A1,4.0\n")
        assert sink.wait_for(lambda: sink.count() == 2 and len(sink.quarantined) == 5)
    finally:
        collector.stop()
    assert [r[2] for r in sink.rows()] == [-12.5, 4.0]
    reasons = [q.reason for q in sink.quarantined]
    assert reasons.pop(0) == "too long: 77 bytes, the limit is 64"
    assert reasons[0] == "wrong column count: expected 3 (probe, _, mv), got 2"
    assert reasons[1].startswith("unknown probe") and "tank-9" in reasons[1]
    assert reasons[2].startswith("too long")
    assert reasons[3] == "first line after opening the port, possibly cut off"  # the tail of the long one


def test_device_vanishes_and_comes_back(instrument: FakeInstrument, sink: Sink) -> None:
    stream = io.StringIO()
    log = Log(stream=stream).bind(collector="serial:test")     # the service's structured logger
    collector = make(instrument, sink, log=log, format="csv", fields=["probe", "mv", "temp_c"])
    try:
        instrument.send(b"\ntank-3,-10.0,20.0\ntank-3,-11.0,20.0\n")
        assert sink.wait_for(lambda: sink.count() == 2)
        instrument.send(b"tank-3,-1")                           # cut off by the unplug
        time.sleep(0.1)
        instrument.unplug()
        assert wait_until(lambda: not collector.context.counters.connected)
        time.sleep(0.3)                                         # a few failed reopen attempts
        assert not collector.context.counters.connected
        instrument.plug_in()
        assert wait_until(lambda: collector.context.counters.connected)
        instrument.send(b"\ntank-3,-12.0,20.0\n")
        assert sink.wait_for(lambda: sink.count() == 3)
        instrument.unplug()
        assert wait_until(lambda: not collector.context.counters.connected)
        instrument.plug_in()
        assert wait_until(lambda: collector.context.counters.connected)
        instrument.send(b"\ntank-3,-13.0,20.0\n")
        assert sink.wait_for(lambda: sink.count() == 4)
    finally:
        collector.stop()
    assert [r[2] for r in sink.rows()] == [-10.0, -11.0, -12.0, -13.0]
    counters = collector.context.counters
    assert counters.reconnects == 2 and collector.opens == 3
    assert "went away" in counters.last_error or "cannot open" in counters.last_error
    assert [(q.reason, q.raw) for q in sink.quarantined] == [
        ("incomplete line when the port closed", "tank-3,-1")]
    text = stream.getvalue()
    assert "event=serial_device_gone" in text and "collector=serial:test" in text
    assert text.count("event=serial_opened") == 3


def test_port_missing_at_start_is_retried(tmp_path: Path, sink: Sink) -> None:
    link = tmp_path / "ttyPH1"
    config = SerialCollector.Config(type="serial", port=str(link), format="csv",
                                    fields=["mv"], probe="tank-3", timeout_s=0.05,
                                    reopen_backoff_min_s=0.05, reopen_backoff_max_s=0.2)
    collector = SerialCollector(config, sink.context("serial:test"))
    collector.start()
    dev = None
    try:
        assert wait_until(lambda: "cannot open" in collector.context.counters.last_error)
        dev = FakeInstrument(link)
        assert wait_until(lambda: collector.context.counters.connected)
        dev.send(b"\n-7.5\n")
        assert sink.wait_for(lambda: sink.count() == 1)
    finally:
        collector.stop()
        if dev is not None:
            dev.close()
    assert sink.rows()[0][:1] == ("tank-3",) and sink.rows()[0][2] == -7.5


def test_lines_in_one_burst_get_distinct_times(instrument: FakeInstrument, sink: Sink) -> None:
    collector = make(instrument, sink, format="csv", fields=["mv"], probe="tank-3")
    try:
        instrument.send(b"\n" + b"".join(f"{i}.5\n".encode() for i in range(50)))
        assert sink.wait_for(lambda: sink.count() == 50)
    finally:
        collector.stop()
    ts = [r[1] for r in sink.rows()]
    assert all(b > a for a, b in itertools.pairwise(ts))
    assert [r[2] for r in sink.rows()] == [i + 0.5 for i in range(50)]
