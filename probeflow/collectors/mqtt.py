"""MQTT collector: JSON readings from topic filters, acknowledged only after commit.

Delivery is *at least once, end to end*:

* a persistent session (MQTT 5: ``clean_start=False`` and a Session Expiry
  Interval > 0 in CONNECT, MQTT 5.0 3.1.2.4 and 3.1.2.11.2; MQTT 3.1.1:
  ``clean_session=False``) under a fixed client id, so the broker queues what
  arrives while probeflow is down;
* QoS 1 with manual acknowledgement: a message's PUBACK is sent only after the
  pipeline has committed its readings (the batch's ``on_committed`` hook), in
  arrival order, from one thread (:mod:`probeflow.collectors.mqtt_acks`);
* acks held from an older connection are dropped, the broker redelivers those
  messages and the idempotent stores keep one copy;
* a malformed message (or a rejected item of an array) is handed to the
  quarantine (``context.quarantine``) with the reason, and its ack is settled
  together with the other messages received in the same few milliseconds:
  after their batch is committed, or at once when the group held no valid
  reading.  It has been kept aside and a redelivery would only quarantine it
  again.  The pipeline writes the quarantine item; a crash between that
  hand-over and the write can lose the reject (never a reading).
* ``session_present`` false on a connect that expected a session means the
  broker lost what it queued: counted in ``counters.session_lost``, logged, and
  reported through ``context.on_session_lost`` so a data-gap alert is raised.

Messages arriving within a few milliseconds are coalesced into one
:class:`~probeflow.batch.ReadingBatch` on a batcher thread; the network thread
only appends the message to a list, so it keeps up with high rates and never
runs user code that could kill it (every callback body is wrapped; a watchdog
restarts the network thread should it end anyway).  Messages that arrive
after ``stop`` began are not acked; the broker keeps them for the next start.

Held acknowledgements are back-pressure: the broker sends at most its
in-flight limit (mosquitto ``max_inflight_messages``, 20 by default) unacked
messages, so throughput is that limit divided by the commit latency.
"""

from __future__ import annotations

import functools
import sys
import threading
import time
from typing import Any, ClassVar, Literal, cast

import orjson
import paho.mqtt.client as paho
from paho.mqtt.subscribeoptions import SubscribeOptions
from pydantic import ConfigDict, Field, field_validator

from probeflow.collectors.base import CollectorConfigBase, CollectorContext
from probeflow.collectors.mqtt_acks import AckEntry, AckLedger, GroupAckSender
from probeflow.collectors.mqtt_publish import LeanMessage, lean_publishes
from probeflow.collectors.mqtt_socket import buffer_reads
from probeflow.collectors.parse import ParsedReadings, RecordParser
from probeflow.collectors.ratelog import RateLimitedLog, default_logger
from probeflow.mqtt_common import MqttConnectionConfig, build_client, connect_properties

__all__ = ["MqttCollector", "MqttCollectorConfig", "probe_levels"]

WEEK_S = 7 * 24 * 3600

Incoming = paho.MQTTMessage | LeanMessage
"""An incoming PUBLISH: paho's message, or the lean one of collectors/mqtt_publish.py."""

ACK_BARRIER_FILTER = "probeflow/ack-barrier/never-subscribed"
"""Unsubscribed (never subscribed) on stop, as a round trip behind the last acks."""


def _check_filter(topic: str) -> str:
    if not topic:
        raise ValueError("a topic filter must not be empty")
    levels = topic.split("/")
    for i, level in enumerate(levels):
        if "#" in level and (level != "#" or i != len(levels) - 1):
            raise ValueError(f"{topic!r}: '#' must be a whole level and the last one")
        if "+" in level and level != "+":
            raise ValueError(f"{topic!r}: '+' must be a whole level")
    if topic.startswith("$share/"):
        raise ValueError(
            f"{topic!r}: shared subscriptions split one probe's readings between instances "
            "and break its alarm state; give each instance its own topic filters instead"
        )
    return topic


def probe_levels(filters: list[str], probe_level: int | None) -> list[int | None]:
    """For each filter, the topic level (0-based) that holds the probe id.

    The configured ``probe_level`` if given, else the first ``+`` level, else None
    (the payload must then name the probe).

    >>> probe_levels(["plant/+/reading", "lab/ph"], None)
    [1, None]
    """
    if probe_level is not None:
        return [probe_level for _ in filters]
    out: list[int | None] = []
    for f in filters:
        levels = f.split("/")
        out.append(levels.index("+") if "+" in levels else None)
    return out


class MqttCollectorConfig(CollectorConfigBase, MqttConnectionConfig):
    """The ``collectors: - type: mqtt`` section."""

    model_config = ConfigDict(extra="forbid")
    type: Literal["mqtt"] = "mqtt"
    topic: str | list[str]
    probe_level: int | None = Field(default=None, ge=0)
    qos: Literal[0, 1] = 1
    session_expiry_s: int = Field(default=WEEK_S, gt=0, le=0xFFFFFFFF)
    max_payload_bytes: int = Field(default=1 << 20, gt=0)
    expect_session_on_start: bool = False   # True: no session at the first connect is a data gap too
    batch_linger_s: float = Field(default=0.005, ge=0, le=1.0)

    @field_validator("topic")
    @classmethod
    def _check_topics(cls, value: str | list[str]) -> str | list[str]:
        filters = [value] if isinstance(value, str) else value
        if not filters:
            raise ValueError("give at least one topic filter")
        for f in filters:
            _check_filter(f)
        return value

    @property
    def filters(self) -> list[str]:
        return [self.topic] if isinstance(self.topic, str) else list(self.topic)


class MqttCollector:
    """Readings from MQTT topic filters (see the module docstring)."""

    Config: ClassVar[type[MqttCollectorConfig]] = MqttCollectorConfig

    _PROBE_CACHE_MAX = 10_000

    def __init__(self, config: MqttCollectorConfig, context: CollectorContext) -> None:
        self.config = config
        self.context = context
        self._log = RateLimitedLog(default_logger(context.log, "probeflow.collectors.mqtt"))
        self._parser = RecordParser(context.known_probes, max_bytes=config.max_payload_bytes)
        self._filters = config.filters
        self._levels = probe_levels(self._filters, config.probe_level)
        self._single_level = self._levels[0] if len(set(self._levels)) == 1 else -1
        self._probe_cache: dict[str, str | None] = {}

        self._client = build_client(config, manual_ack=True, persistent_session=True)
        buffer_reads(self._client)   # many packets per recv() (collectors/mqtt_socket.py)
        self._client.on_connect = self._on_connect
        self._client.on_connect_fail = self._on_connect_fail
        self._client.on_disconnect = self._on_disconnect
        self._client.on_message = self._on_message
        lean_publishes(self._client, self._on_message)   # collectors/mqtt_publish.py
        self._client.on_subscribe = self._on_subscribe
        self._client.on_unsubscribe = self._on_unsubscribe
        self._unsubacks: set[int] = set()
        self._unsuback_seen = threading.Condition()
        self._ack_sender = GroupAckSender(self._client)
        self._acks = AckLedger(self._client.ack, name=context.name, send_group=self._ack_sender)

        self._inbox: list[tuple[int, Incoming]] = []
        self._inbox_lock = threading.Lock()
        self._wake = threading.Event()
        self._stopping = threading.Event()
        self._generation = 0
        self._connects = 0
        self._batcher = threading.Thread(
            target=self._run_batcher, name=f"{context.name}-batcher", daemon=True
        )
        self.session_present: bool | None = None
        self.subscribed = threading.Event()   # set once the broker confirmed the filters

    # -- Collector interface ------------------------------------------------------
    def start(self) -> None:
        cfg = self.config
        address = cfg.address
        self._acks.start()
        self._batcher.start()
        self._connect()
        self._log.say("info", "mqtt_connecting", f"connecting to {address} as {cfg.client_id}")

    def _connect(self) -> None:
        cfg = self.config
        address = cfg.address
        self._client.connect_async(
            address.host,
            address.port,
            keepalive=cfg.keepalive,
            clean_start=False if cfg.mqtt5 else paho.MQTT_CLEAN_START_FIRST_ONLY,
            properties=connect_properties(cfg, cfg.session_expiry_s),
        )
        self._client.loop_start()

    def _force_redelivery(self, why: str) -> None:
        """The pipeline refused a batch: its messages are not acked, and a new
        connection makes the broker send them again (MQTT 5.0 4.4)."""
        self.context.counters.last_error = f"pipeline refused a batch ({why}); reconnecting for redelivery"
        self._log.error("mqtt_batch_refused", self.context.counters.last_error)
        try:
            self._client.disconnect()
            self._client.loop_stop()
        finally:
            if not self._stopping.is_set():
                time.sleep(self.config.reconnect_min_s)
                self._connect()

    def stop(self, timeout: float = 5.0) -> None:
        deadline = time.monotonic() + timeout
        self._stopping.set()
        self._wake.set()
        if self._batcher.is_alive():
            self._batcher.join(max(0.1, deadline - time.monotonic()))
        # Give the pipeline a moment to commit what was emitted, so its acks go out.
        drain_until = min(deadline, time.monotonic() + 1.0)
        while self._acks.pending() and time.monotonic() < drain_until:
            time.sleep(0.02)
        self._acks.stop(max(0.1, deadline - time.monotonic()))
        self._ack_barrier(min(1.0, max(0.1, deadline - time.monotonic())))
        try:
            self._client.disconnect()
        except Exception as exc:  # noqa: BLE001 - already gone: nothing to tell the broker
            self._log.say("info", "mqtt_disconnect_failed", repr(exc))
        self._client.loop_stop()
        self.context.counters.connected = False

    def _ack_barrier(self, timeout: float) -> None:
        """Wait until the broker has read every PUBACK sent so far.

        A broker handles one connection's packets in order, so the UNSUBACK of a
        harmless UNSUBSCRIBE (of a filter never subscribed) proves the acks
        before it were processed.  Without this, a quick restart under the same
        client id can make the broker take over the old connection before
        reading its last acks, and redeliver those messages (duplicates, which
        the stores keep once, but avoidable).
        """
        if not self.context.counters.connected:
            return
        try:
            rc, mid = self._client.unsubscribe(ACK_BARRIER_FILTER)
        except Exception as exc:  # noqa: BLE001 - best effort on the way out
            self._log.say("debug", "mqtt_ack_barrier_failed", repr(exc))
            return
        if rc == paho.MQTT_ERR_SUCCESS and mid is not None:
            with self._unsuback_seen:
                self._unsuback_seen.wait_for(lambda: mid in self._unsubacks, timeout)

    def _on_unsubscribe(self, client: paho.Client, userdata: Any, mid: int, reason_codes: Any,
                        properties: Any) -> None:
        try:
            with self._unsuback_seen:
                self._unsubacks.add(mid)
                self._unsuback_seen.notify_all()
        except Exception as exc:  # noqa: BLE001 - a raise would end paho's network thread
            self._callback_failed("on_unsubscribe", exc)

    @property
    def done(self) -> bool:
        return False

    @property
    def pending_acks(self) -> int:
        """Messages received but not yet acknowledged to the broker."""
        return self._acks.pending()

    # -- paho callbacks (network thread: short, never raise) ----------------------
    def _on_connect(self, client: paho.Client, userdata: Any, flags: Any, reason_code: Any,
                    properties: Any) -> None:
        try:
            counters = self.context.counters
            if reason_code.is_failure:
                counters.last_error = f"broker refused the connection: {reason_code}"
                self._log.error("mqtt_connect_refused", counters.last_error)
                return
            self._generation = self._acks.new_generation()
            self._connects += 1
            counters.connected = True
            if self._connects > 1:
                counters.add(reconnects=1)
            self.session_present = bool(flags.session_present)
            self._subscribe(client)   # first: nothing below may keep us from subscribing
            expected = self._connects > 1 or self.config.expect_session_on_start
            if not self.session_present and expected:
                self._session_lost()
            elif not self.session_present:
                self._log.say(
                    "info", "mqtt_session_new", f"the broker holds no session for client id "
                    f"{self.config.client_id} yet; a new persistent session starts now"
                )
            self._log.say(
                "info", "mqtt_connected", f"connected to {self.config.address} "
                f"(session resumed: {self.session_present})"
            )
        except Exception as exc:  # noqa: BLE001 - a raise would end paho's network thread
            self._callback_failed("on_connect", exc)

    def _subscribe(self, client: paho.Client) -> None:
        qos = self.config.qos
        if self.config.mqtt5:
            # retainHandling 1: retained messages only when the subscription is new,
            # not again on every reconnect of a resumed session.
            opts = SubscribeOptions(qos=qos, retainHandling=SubscribeOptions.RETAIN_SEND_IF_NEW_SUB)
            client.subscribe([(f, opts) for f in self._filters])
        else:
            plain: list[tuple[str, int]] = [(f, qos) for f in self._filters]
            client.subscribe(plain)

    def _session_lost(self) -> None:
        counters = self.context.counters
        counters.add(session_lost=1)
        detail = (
            f"the broker at {self.config.address} had no stored session for client id "
            f"{self.config.client_id}: readings published while probeflow was disconnected "
            "may be missing (broker restarted without persistence, or the session expired)"
        )
        self._log.say("warning", "mqtt_session_lost", f"DATA GAP: {detail}")
        hook = self.context.on_session_lost
        if hook is not None:
            try:
                hook(self.context.name, detail)
            except Exception as exc:  # noqa: BLE001 - the gap is counted and logged anyway
                self._callback_failed("on_session_lost", exc)

    def _on_connect_fail(self, client: paho.Client, userdata: Any) -> None:
        try:
            # paho calls this inside its `except OSError`, so the cause is at hand
            cause = sys.exc_info()[1]
            why = f": {cause}" if cause is not None else ""
            self.context.counters.last_error = f"cannot connect to {self.config.address}{why}"
            self._log.warning(
                "mqtt_connect_failed", f"{self.context.counters.last_error}; retrying with backoff",
            )
        except Exception as exc:  # noqa: BLE001 - a raise would end paho's network thread
            self._callback_failed("on_connect_fail", exc)

    def _on_disconnect(self, client: paho.Client, userdata: Any, flags: Any, reason_code: Any,
                       properties: Any) -> None:
        try:
            self.context.counters.connected = False
            self.subscribed.clear()
            if not self._stopping.is_set():
                self.context.counters.last_error = f"disconnected: {reason_code}"
                self._log.warning(
                    "mqtt_disconnected",
                    f"lost the connection to {self.config.address} "
                    f"({reason_code}); reconnecting",
                )
        except Exception as exc:  # noqa: BLE001 - a raise would end paho's network thread
            self._callback_failed("on_disconnect", exc)

    def _on_subscribe(self, client: paho.Client, userdata: Any, mid: int, reason_codes: Any,
                      properties: Any) -> None:
        try:
            refused = False
            for f, rc in zip(self._filters, reason_codes):
                if rc.is_failure:
                    refused = True
                    self.context.counters.last_error = f"subscription to {f} refused: {rc}"
                    self._log.error("mqtt_subscribe_refused", self.context.counters.last_error)
            if not refused:
                self.subscribed.set()
        except Exception as exc:  # noqa: BLE001 - a raise would end paho's network thread
            self._callback_failed("on_subscribe", exc)

    def _on_message(self, client: paho.Client, userdata: Any, message: Incoming) -> None:
        try:
            if self._stopping.is_set():
                return  # not acked: the broker redelivers it in the next session
            with self._inbox_lock:
                self._inbox.append((self._generation, message))
            wake = self._wake
            if not wake.is_set():   # a plain read; set() takes a lock
                wake.set()
        except Exception as exc:  # noqa: BLE001 - a raise would end paho's network thread
            self._callback_failed("on_message", exc)

    def _callback_failed(self, where: str, exc: BaseException) -> None:
        try:
            self.context.counters.last_error = f"{where}: {exc!r}"
            self._log.error(f"mqtt_{where}_error", f"error in {where}: {exc!r}")
        except Exception:  # noqa: BLE001 - reporting must not raise either
            return

    # -- batcher thread -----------------------------------------------------------
    def _run_batcher(self) -> None:
        linger = self.config.batch_linger_s
        last_watch = time.monotonic()
        while True:
            self._wake.wait(0.5)
            stopping = self._stopping.is_set()
            if linger and not stopping:
                self._linger(linger)
            self._wake.clear()
            with self._inbox_lock:
                items, self._inbox = self._inbox, []
            if items:
                try:
                    self._process(items)
                except Exception as exc:  # noqa: BLE001 - unacked messages come back after a reconnect
                    self._force_redelivery(repr(exc))
            if stopping:
                return
            now = time.monotonic()
            if now - last_watch > 2.0:
                last_watch = now
                self._watch_network_thread()

    _QUIET_GAP_S = 0.001

    def _linger(self, linger: float) -> None:
        """Let more messages join the group, for at most ``linger`` seconds, but
        stop as soon as none arrived for ``_QUIET_GAP_S``.  The flow pauses when
        the broker's in-flight window is full of messages waiting for their
        acks: waiting longer then only delays those acks (and every message
        behind them), so the group goes out at once."""
        deadline = time.monotonic() + linger
        inbox_size = self._inbox_size
        seen = inbox_size()
        while True:
            left = deadline - time.monotonic()
            if left <= 0:
                return
            time.sleep(min(self._QUIET_GAP_S, left))
            now = inbox_size()
            if now == seen:
                return
            seen = now

    def _inbox_size(self) -> int:
        return len(self._inbox)   # a read of the current list; no lock needed

    def _watch_network_thread(self) -> None:
        thread = getattr(self._client, "_thread", None)
        if thread is not None and not thread.is_alive() and not self._stopping.is_set():
            self._log.error("mqtt_network_thread_restarted", "MQTT network thread ended; restarting it")
            self._client._thread = None
            self._client.loop_start()

    def _probe_for_topic(self, topic: str) -> str | None:
        cache = self._probe_cache
        if topic in cache:
            return cache[topic]
        level = self._single_level
        if level == -1:
            level = None
            for f, lvl in zip(self._filters, self._levels):
                if paho.topic_matches_sub(f, topic):
                    level = lvl
                    break
        probe: str | None = None
        if level is not None:
            parts = topic.split("/")
            if level < len(parts) and parts[level]:
                probe = parts[level]
        if len(cache) >= self._PROBE_CACHE_MAX:
            cache.clear()
        cache[topic] = probe
        return probe

    def _process(self, items: list[tuple[int, Incoming]]) -> None:
        ctx = self.context
        entries = self._hold(items)
        out = self._columns(items)
        if out is None:
            out = self._each(items)
        for reason, rejected in out.rejects:
            ctx.quarantine(reason, rejected)
        # Every message of this group is acked once its readings are committed; a
        # message whose readings were all rejected is acked then too, its rejects
        # having been handed to the quarantine above.
        if len(out):
            ctx.emit(out.batch(on_committed=(functools.partial(self._acks.settle, entries),)))
        elif entries:
            self._acks.settle(entries)

    def _hold(self, items: list[tuple[int, Incoming]]) -> list[AckEntry]:
        """Register the group's QoS 1 messages with the ledger, in arrival order:
        one entry per run of messages from the same connection."""
        entries: list[AckEntry] = []
        run: list[int] = []
        run_generation = None
        hold_group = self._acks.hold_group
        for generation, msg in items:
            if msg.qos == 0:
                continue
            if generation != run_generation:
                if run:
                    entry = hold_group(run_generation, run)  # type: ignore[arg-type]
                    if entry is not None:
                        entries.append(entry)
                run, run_generation = [], generation
            run.append(msg.mid)
        if run:
            entry = hold_group(run_generation, run)  # type: ignore[arg-type]
            if entry is not None:
                entries.append(entry)
        return entries

    def _columns(self, items: list[tuple[int, Incoming]]) -> ParsedReadings | None:
        """Fast path for a group of single-reading messages that are all valid:
        decode each payload, take the probe from the topic where the payload
        names none, and check the group a column at a time
        (``RecordParser.columns``, same values as the per-record checks).  None
        when any message needs the per-message path (an array, a reject)."""
        loads = orjson.loads
        limit = self._parser.max_bytes
        probe_for = self._probe_for_topic
        objs: list[Any] = []
        append = objs.append
        try:
            for _generation, msg in items:
                raw = msg.payload
                if len(raw) > limit:
                    return None
                obj = loads(raw)
                if type(obj) is not dict:
                    return None
                if "probe" not in obj:
                    obj["probe"] = probe_for(msg.topic)
                append(obj)
        except (orjson.JSONDecodeError, UnicodeDecodeError):
            return None
        cols = self._parser.columns(objs)
        if cols is None:
            return None
        out = ParsedReadings()
        out.probe, out.ts, out.mv, out.temp_c, out.ohms = cols
        return out

    def _each(self, items: list[tuple[int, Incoming]]) -> ParsedReadings:
        """Every message checked on its own; each reject keeps its reason and topic."""
        out = ParsedReadings()
        rejects = out.rejects
        payload = self._parser.payload
        for _generation, msg in items:
            raw = cast(bytes, msg.payload)
            try:
                topic = msg.topic
            except UnicodeDecodeError:
                rejects.append(("topic name is not valid UTF-8", raw))
                continue
            before = len(rejects)
            payload(raw, self._probe_for_topic(topic), out)
            for i in range(before, len(rejects)):
                reason, rejected = rejects[i]
                rejects[i] = (f"{reason} [topic {topic}]", rejected)
        return out
