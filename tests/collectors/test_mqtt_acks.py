"""AckLedger: acknowledgements leave in arrival order, and never for an older connection.

The ordering rule is MQTT 5.0 section 4.6 (a receiver acknowledges PUBLISH
packets in the order it received them); the generation rule follows from 4.4
(unacknowledged messages are resent on the next connection with the same
packet identifiers).  A recording send function stands in for the client here;
the end-to-end behaviour with the real broker is in test_mqtt_collector.py.
"""

from __future__ import annotations

from collector_harness import wait_until

from probeflow.collectors.mqtt_acks import AckLedger


def make() -> tuple[AckLedger, list[tuple[int, int]]]:
    sent: list[tuple[int, int]] = []
    ledger = AckLedger(lambda mid, qos: sent.append((mid, qos)))
    ledger.start()
    return ledger, sent


def test_out_of_order_settlement_is_sent_in_arrival_order() -> None:
    ledger, sent = make()
    try:
        gen = ledger.new_generation()
        entries = [ledger.hold(gen, mid, 1) for mid in (11, 12, 13, 14)]
        ledger.settle([entries[2], entries[3]])           # a later batch commits first
        assert not wait_until(lambda: sent != [], timeout=0.3)
        ledger.settle([entries[0]])
        assert wait_until(lambda: sent == [(11, 1)])
        ledger.settle([entries[1]])
        assert wait_until(lambda: sent == [(11, 1), (12, 1), (13, 1), (14, 1)])
        assert ledger.pending() == 0
    finally:
        ledger.stop()


def test_acks_of_an_older_connection_are_dropped() -> None:
    ledger, sent = make()
    try:
        old = ledger.new_generation()
        held = [ledger.hold(old, mid, 1) for mid in (1, 2)]
        new = ledger.new_generation()                      # reconnect before the commit
        late = ledger.hold(old, 3, 1)                      # batched after the reconnect
        assert late is None
        fresh = ledger.hold(new, 1, 1)                     # the broker resends mid 1
        ledger.settle(held)                                # the old commit arrives late
        assert not wait_until(lambda: sent != [], timeout=0.3)
        ledger.settle([fresh])
        assert wait_until(lambda: sent == [(1, 1)])
        assert ledger.dropped_stale == 3
    finally:
        ledger.stop()


def test_qos0_needs_no_ack() -> None:
    ledger, _ = make()
    try:
        assert ledger.hold(ledger.new_generation(), 5, 0) is None
        assert ledger.pending() == 0
    finally:
        ledger.stop()
