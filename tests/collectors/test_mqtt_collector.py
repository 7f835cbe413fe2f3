"""MqttCollector against a real mosquitto (tests/conftest.py `mosquitto` fixture).

The readings are invented (site "Larkmoor works", probes tank-3, tank-4); what
is checked is the delivery contract of MQTT 5.0 / 3.1.1 (persistent sessions,
QoS 1 redelivery of unacknowledged messages, MQTT 5.0 sections 4.4 and 4.6),
observed on the real broker.
"""

from __future__ import annotations

import math
import time

import orjson
import pytest
from collector_harness import Sink, publish_all, wait_until

from probeflow.collectors.mqtt import MqttCollector, probe_levels

T0 = 1764633600.0  # 2025-12-02T00:00:00Z, invented stream start

pytestmark = pytest.mark.services


def reading(i: int, probe: str | None = None, **extra: object) -> dict[str, object]:
    rec: dict[str, object] = {"ts": T0 + i * 0.25, "mv": -12.5 + i, "temp_c": 20.0 + i / 10}
    if probe is not None:
        rec["probe"] = probe
    rec.update(extra)
    return rec


def wait_for_autosave(broker) -> None:
    """Wait until mosquitto has saved its state after this moment (autosave_interval 1)."""
    db = broker.dir / "data" / "mosquitto.db"
    since = time.time()
    assert wait_until(lambda: db.exists() and db.stat().st_mtime > since + 0.01, timeout=30)


def make(broker, sink: Sink, *, client_id: str = "larkmoor-logger", protocol: str = "5",
         topic: str | list[str] = "larkmoor/+/reading", known: frozenset[str] | None = None,
         start: bool = True, **extra: object) -> MqttCollector:
    cfg = MqttCollector.Config(
        type="mqtt", url=broker.url, topic=topic, client_id=client_id, protocol=protocol,
        reconnect_min_s=0.2, reconnect_max_s=1.0, **extra,
    )
    collector = MqttCollector(cfg, sink.context("mqtt:test", known))
    if start:
        collector.start()
        assert collector.subscribed.wait(10), "collector did not subscribe"
    return collector


def test_probe_level_defaults_to_first_plus() -> None:
    assert probe_levels(["a/+/b/+", "x/y", "p/q/+/#"], None) == [1, None, 2]
    assert probe_levels(["a/+/b/+"], 3) == [3]


def test_single_and_array_payloads_with_probe_from_topic(mosquitto, sink: Sink) -> None:
    collector = make(mosquitto, sink)
    try:
        publish_all(mosquitto.port, [
            ("larkmoor/tank-3/reading", orjson.dumps(reading(0))),
            ("larkmoor/tank-4/reading", orjson.dumps([reading(1), reading(2, probe="tank-9")])),
            ("larkmoor/tank-4/reading", orjson.dumps({"ts": "2025-12-02T00:00:01.5Z", "mv": 3.0,
                                                      "ohms": 109.73})),
        ])
        assert sink.wait_for(lambda: sink.count() == 4)
    finally:
        collector.stop()
    rows = sorted(sink.rows(), key=lambda r: r[1])
    assert [r[0] for r in rows] == ["tank-3", "tank-4", "tank-9", "tank-4"]  # payload names tank-9
    assert rows[0][1:4] == (T0, -12.5, 20.0)
    assert rows[1][1:4] == (T0 + 0.25, -11.5, 20.1)
    assert rows[2][1:4] == (T0 + 0.5, -10.5, 20.2)
    # the RFC 3339 time is 1.5 s after T0; no temperature, an RTD value instead
    assert rows[3][1] == T0 + 1.5 and math.isnan(rows[3][3]) and rows[3][4] == 109.73
    assert sink.quarantined == []
    assert collector.context.counters.received == 4


def test_malformed_payloads_quarantined_and_collector_keeps_going(mosquitto, sink: Sink) -> None:
    collector = make(mosquitto, sink, max_payload_bytes=2000, known=frozenset({"tank-3", "tank-4"}))
    try:
        publish_all(mosquitto.port, [
            ("larkmoor/tank-3/reading", b"mv=-12.5"),                                    # not JSON
            ("larkmoor/tank-3/reading", orjson.dumps({"ts": T0, "mv": "-12.5"})),         # text number
            ("larkmoor/tank-3/reading", b'{"ts": 1764633600, "mv": 1e999}'),             # infinite
            ("larkmoor/tank-3/reading", orjson.dumps([reading(5), {"ts": T0}])),          # one bad item
            ("larkmoor/tank-5/reading", orjson.dumps(reading(6))),                        # unknown probe
            ("larkmoor/tank-3/reading", b"[" + b"1," * 1500 + b"1]"),                     # oversize
            ("larkmoor/tank-3/reading", b"\xff\xfe{}"),                                   # not UTF-8
            ("larkmoor/tank-4/reading", orjson.dumps(reading(7))),
        ])
        assert sink.wait_for(lambda: sink.count() == 2 and len(sink.quarantined) == 7)
    finally:
        collector.stop()
    reasons = [q.reason for q in sink.quarantined]
    assert reasons[0].startswith("not valid JSON") and "[topic larkmoor/tank-3/reading]" in reasons[0]
    assert reasons[1].startswith("mv is not a number")
    assert reasons[2].startswith("not valid JSON") or reasons[2].startswith("mv is not a finite")
    assert reasons[3].startswith("missing mv")
    assert reasons[4].startswith("unknown probe") and "tank-5" in reasons[4]
    assert reasons[5].startswith("too long")
    assert reasons[6].startswith("not valid JSON")
    assert sink.quarantined[0].raw == "mv=-12.5"
    assert sink.quarantined[6].raw == "\\xff\\xfe{}"
    assert all(q.source == "mqtt:test" for q in sink.quarantined)
    assert sorted(r[1] for r in sink.rows()) == [T0 + 5 * 0.25, T0 + 7 * 0.25]
    assert collector.context.counters.quarantined == 7
    assert collector.context.counters.received == 2


@pytest.mark.parametrize("protocol", ["5", "3.1.1"])
def test_ack_only_after_commit(mosquitto, protocol: str) -> None:
    """Unacknowledged QoS 1 messages come back on the next connection of the same
    session (MQTT 5.0 4.4; MQTT 3.1.1 4.4); acknowledged ones do not."""
    messages = [("larkmoor/tank-3/reading", orjson.dumps(reading(i))) for i in range(6)]

    uncommitted = Sink(commit=False)
    first = make(mosquitto, uncommitted, protocol=protocol)
    publish_all(mosquitto.port, messages)
    assert uncommitted.wait_for(lambda: uncommitted.count() == 6)
    assert first.pending_acks == 6
    first.stop(timeout=2)

    committed = Sink(commit=True)
    second = make(mosquitto, committed, protocol=protocol)
    assert committed.wait_for(lambda: committed.count() == 6)
    assert second.session_present is True
    assert wait_until(lambda: second.pending_acks == 0)
    second.stop()
    assert sorted(r[1] for r in committed.rows()) == [T0 + i * 0.25 for i in range(6)]

    third_sink = Sink(commit=True)
    third = make(mosquitto, third_sink, protocol=protocol)
    publish_all(mosquitto.port, [("larkmoor/tank-3/reading", orjson.dumps(reading(99)))])
    assert third_sink.wait_for(lambda: third_sink.count() >= 1)
    third.stop()
    # only the new reading: the six acked ones were not redelivered
    assert [r[1] for r in third_sink.rows()] == [T0 + 99 * 0.25]


def test_messages_published_while_collector_down_arrive(mosquitto, sink: Sink) -> None:
    first = make(mosquitto, Sink())
    first.stop()
    publish_all(mosquitto.port, [("larkmoor/tank-4/reading", orjson.dumps(reading(i))) for i in range(20)])
    second = make(mosquitto, sink)
    try:
        assert sink.wait_for(lambda: sink.count() == 20)
    finally:
        second.stop()
    assert second.session_present is True
    assert sorted(r[1] for r in sink.rows()) == [T0 + i * 0.25 for i in range(20)]


@pytest.mark.parametrize("protocol", ["5", "3.1.1"])
def test_broker_down_at_start_then_killed_and_restarted(mosquitto, sink: Sink, protocol: str) -> None:
    mosquitto.kill()
    collector = make(mosquitto, sink, protocol=protocol, start=False)
    collector.start()  # broker down: connect_async keeps trying
    try:
        assert not collector.subscribed.wait(0.5)
        mosquitto.start()
        assert collector.subscribed.wait(10)
        publish_all(mosquitto.port, [("larkmoor/tank-3/reading", orjson.dumps(reading(i))) for i in range(5)])
        assert sink.wait_for(lambda: sink.count() == 5)
        # let the broker's autosave write the session to disk, then crash it
        wait_for_autosave(mosquitto)
        mosquitto.kill()
        assert wait_until(lambda: not collector.context.counters.connected)
        mosquitto.start()
        # published while the collector is (most likely) still backing off
        publish_all(mosquitto.port, [("larkmoor/tank-3/reading", orjson.dumps(reading(i)))
                                     for i in range(5, 15)])
        assert sink.wait_for(lambda: sink.count() >= 15)
        assert wait_until(lambda: collector.pending_acks == 0)
    finally:
        collector.stop()
    assert sorted({r[1] for r in sink.rows()}) == [T0 + i * 0.25 for i in range(15)]
    counters = collector.context.counters
    assert counters.reconnects >= 1
    assert counters.session_lost == 0 and sink.gaps == []


def test_lost_session_is_reported(mosquitto, sink: Sink) -> None:
    collector = make(mosquitto, sink)
    try:
        mosquitto.kill()
        for f in (mosquitto.dir / "data").iterdir():   # the broker loses its persisted sessions
            f.unlink()
        mosquitto.start()
        assert sink.wait_for(lambda: len(sink.gaps) == 1)
        assert collector.subscribed.wait(10)          # subscribed again on the fresh session
        publish_all(mosquitto.port, [("larkmoor/tank-3/reading", orjson.dumps(reading(1)))])
        assert sink.wait_for(lambda: sink.count() == 1)
    finally:
        collector.stop()
    assert collector.context.counters.session_lost == 1
    assert collector.session_present is False
    name, detail = sink.gaps[0]
    assert name == "mqtt:test" and "larkmoor-logger" in detail


def test_several_filters_each_with_its_probe_level(mosquitto, sink: Sink) -> None:
    collector = make(mosquitto, sink, topic=["larkmoor/+/reading", "annex/ph/+/+"])
    try:
        publish_all(mosquitto.port, [
            ("larkmoor/tank-3/reading", orjson.dumps(reading(0))),
            ("annex/ph/basin-1/raw", orjson.dumps(reading(1))),
        ])
        assert sink.wait_for(lambda: sink.count() == 2)
    finally:
        collector.stop()
    assert sorted(r[0] for r in sink.rows()) == ["basin-1", "tank-3"]


class RefusingOnce(Sink):
    """A pipeline whose first hand-over fails (e.g. its queue was closed)."""

    def __init__(self) -> None:
        super().__init__()
        self.refused = 0

    def emit(self, batch) -> None:
        if not self.refused:
            self.refused += 1
            raise RuntimeError("pipeline queue closed")
        super().emit(batch)


def test_refused_batch_is_redelivered(mosquitto) -> None:
    sink = RefusingOnce()
    collector = make(mosquitto, sink)
    try:
        publish_all(mosquitto.port, [("larkmoor/tank-3/reading", orjson.dumps(reading(i))) for i in range(3)])
        assert sink.wait_for(lambda: len({r[1] for r in sink.rows()}) == 3)
        assert wait_until(lambda: collector.pending_acks == 0)
    finally:
        collector.stop()
    assert sink.refused == 1
    assert collector.context.counters.reconnects >= 1
    assert sorted({r[1] for r in sink.rows()}) == [T0 + i * 0.25 for i in range(3)]


def test_expected_session_missing_at_start_is_a_gap(mosquitto, sink: Sink) -> None:
    """With expect_session_on_start (the service knows it ran before), a broker
    that has never seen the client id reports a possible gap at once."""
    collector = make(mosquitto, sink, client_id="larkmoor-fresh", expect_session_on_start=True)
    collector.stop()
    assert collector.context.counters.session_lost == 1 and len(sink.gaps) == 1
    quiet = Sink()
    again = make(mosquitto, quiet, client_id="larkmoor-fresh", expect_session_on_start=True)
    again.stop()
    assert again.context.counters.session_lost == 0 and quiet.gaps == []


def test_failing_session_lost_hook_does_not_stop_the_collector(mosquitto) -> None:
    sink = Sink()

    def broken_hook(name: str, detail: str) -> None:
        raise RuntimeError("alert channel down")

    sink.session_lost = broken_hook  # type: ignore[method-assign]
    collector = make(mosquitto, sink, client_id="larkmoor-hook", expect_session_on_start=True)
    try:
        publish_all(mosquitto.port, [("larkmoor/tank-3/reading", orjson.dumps(reading(1)))])
        assert sink.wait_for(lambda: sink.count() == 1)
    finally:
        collector.stop()
    counters = collector.context.counters
    assert counters.session_lost == 1 and "alert channel down" in counters.last_error
