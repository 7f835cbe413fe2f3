"""The service: collectors -> bounded queue -> micro-batches -> convert -> rules -> stores.

Collectors put reading batches into one bounded queue (a full queue makes
them wait: back-pressure, never loss).  One pipeline thread coalesces what is
queued into a micro-batch of up to ``batch_rows`` rows or ``batch_ms``
milliseconds, converts it, runs the rules, and hands the result to every
store's worker (see ``workers.py``).  Each batch's ``on_committed`` hooks run
after the durable stores (SQLite) have committed it.

``Service.run()`` returns when :meth:`Service.request_stop` is called (the
CLI does so on SIGTERM/SIGINT) or every collector is a finite source that has
finished; either way everything read is converted and every store is flushed
and closed before it returns.
"""

from __future__ import annotations

import collections
import importlib
import json
import os
import queue
import threading
import time
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

import numpy as np

from probeflow.batch import ProcessedBatch, QuarantineItem, ReadingBatch
from probeflow.collectors.base import CollectorContext
from probeflow.collectors.parse import reason_kind
from probeflow.config.load import LoadedConfig, PluginSection
from probeflow.config.models import ServiceSettings
from probeflow.convert import Converter
from probeflow.errors import ConfigError, ProbeflowError
from probeflow.events import AlertEvent
from probeflow.service.log import Log, RateLimiter
from probeflow.service.workers import CommitTracker, StoreWorker
from probeflow.stores.base import StoreContext

__all__ = ["Service", "ServiceStats", "build_rule_engine_for", "build_service"]

_END = object()
_MAIN_POLL_S = 0.02
"""How often the main thread looks for a stop request and for finished sources [s]
(a finite source's run ends within this of its last reading being stored)."""
_BACKLOG_POLL_S = 0.01
_QUARANTINE_BACKLOG = 100_000


def _empty_processed(on_committed: tuple[Any, ...] = ()) -> ProcessedBatch:
    f = np.empty(0, dtype=np.float64)
    return ProcessedBatch(np.empty(0, dtype=object), f, f, f, f, f, f, np.empty(0, dtype=np.uint8),
                          on_committed=on_committed)


@dataclass
class ServiceStats:
    readings_in: int = 0
    readings_converted: int = 0
    batches: int = 0
    quarantined: int = 0
    quarantine_lost: int = 0
    alerts: int = 0
    rule_errors: int = 0
    conversion_failed: int = 0
    per_collector: dict[str, dict[str, int]] = field(default_factory=dict)
    per_store: dict[str, dict[str, int]] = field(default_factory=dict)


def build_rule_engine_for(config: LoadedConfig, log: Log | None = None) -> Any:
    """The rule engine for ``config.rules`` (None when there is no rules section);
    ``log`` receives rules that fail at run time (they are skipped and retried)."""
    if config.rules is None:
        return None
    for module_name in ("probeflow.rules", "probeflow.rules.config", "probeflow.rules.engine"):
        try:
            module = importlib.import_module(module_name)
        except ImportError:
            continue
        build = getattr(module, "build_rule_engine", None)
        if build is not None:
            if log is not None:
                return build(config.rules, list(config.probe_ids), log=log)
            return build(config.rules, list(config.probe_ids))
    raise ConfigError("rules: the rules engine (build_rule_engine) is not available in this build",
                      path=config.path, problems=[("rules", "rules engine not available")])


class Service:
    """One pipeline instance (several can coexist in a process, e.g. in tests)."""

    def __init__(self, *, site: str, converter: Converter,
                 collectors: Sequence[tuple[str, Any, Any]],
                 stores: Sequence[tuple[str, Any]],
                 rules: Any = None,
                 settings: ServiceSettings | None = None,
                 log: Log | None = None,
                 known_probes: frozenset[str] | None = None,
                 tick_clock: Literal["wall", "data", "auto"] = "wall",
                 retry_collectors: bool = False) -> None:
        """collectors: (name, plugin class, plugin config); stores: (name, store object).

        tick_clock        time given to time-based rules (stale, shelving expiry) and
                          operator commands: this computer's clock ("wall", live),
                          the recording's ("data", replay), or "auto": "data" when
                          every collector replays recorded time (it has a
                          ``clock_pace`` that is not None: files, stdin), else
                          "wall".  The data clock is the newest reading's time plus
                          the wall time since it arrived (not for as-fast-as-possible
                          replays, and never faster than real time, so queueing delays
                          in a fast replay cannot look like a gap): an old recording
                          raises no stale alarm and a stalled source still does.
        retry_collectors  keep retrying a collector whose start fails (live service)
        """
        self.site = site
        self.converter = converter
        self.rules = rules
        self.settings = settings or ServiceSettings()
        self.log = log or Log(fmt=self.settings.log_format)
        self.retry_collectors = retry_collectors
        self._failed_starts: dict[str, tuple[tuple[str, Any, CollectorContext], int, float]] = {}
        self.stats = ServiceStats()
        # A plain flag, not a threading.Event: request_stop runs in signal handlers,
        # and Event.set takes the lock that Event.wait holds on the main thread, so a
        # signal landing inside the main loop's wait deadlocked the stop (seen once
        # in CI as a service that ignored SIGTERM).  Only the main thread polls it.
        self._stop_requested = False
        self._input: queue.Queue[Any] = queue.Queue(maxsize=self.settings.queue_batches)
        self._quarantine: collections.deque[QuarantineItem] = collections.deque()
        self._quarantine_lock = threading.Lock()
        self._quarantine_logs = RateLimiter(60.0)
        durable = [name for name, s in stores if getattr(s, "durable", False)]
        self._tracker = CommitTracker(len(durable), self.log)
        self.workers = [
            StoreWorker(name, store, self.log, queue_batches=self.settings.store_queue_batches,
                        retry_max_s=self.settings.store_retry_max_s,
                        on_committed=self._tracker.done)
            for name, store in stores
        ]
        self.collectors: list[tuple[str, Any, CollectorContext]] = []
        for name, plugin, config in collectors:
            context = CollectorContext(
                name=name, emit_batch=self._enqueue, quarantine_item=self._enqueue_quarantine,
                known_probes=known_probes if known_probes is not None else frozenset(converter.probe_ids),
                stop_event=threading.Event(), log=self.log.bind(collector=name),
                on_session_lost=self._session_lost)
            self.collectors.append((name, plugin(config, context), context))
        self._thread = threading.Thread(target=self._pipeline, name="pipeline", daemon=True)
        self._last_ts = -np.inf
        self._last_arrival = time.monotonic()
        self._started = False
        self.links: Any = None
        """ServiceLinks (service/links.py): calibration feed, alarm commands, external alarms."""
        if tick_clock == "auto":
            paces = [getattr(c, "clock_pace", None) for _n, c, _x in self.collectors]
            tick_clock = "data" if paces and all(p is not None for p in paces) else "wall"
        self.tick_clock = tick_clock
        known = [float(p) for _n, c, _x in self.collectors
                 if (p := getattr(c, "clock_pace", None)) is not None]
        self._clock_pace = min(1.0, max(known, default=0.0))

    # -- collector side (any thread) ---------------------------------------------
    def _enqueue(self, batch: ReadingBatch) -> None:
        self._input.put(batch)

    def _enqueue_quarantine(self, item: QuarantineItem) -> None:
        with self._quarantine_lock:
            if len(self._quarantine) >= _QUARANTINE_BACKLOG:
                self.stats.quarantine_lost += 1
                lost = True
            else:
                self._quarantine.append(item)
                lost = False
        if lost:
            allowed, held = self._quarantine_logs.allow(("backlog", item.source))
            if allowed:
                self.log.error("quarantine_backlog_full", source=item.source, suppressed=held,
                               lost_total=self.stats.quarantine_lost)
            return
        allowed, held = self._quarantine_logs.allow((item.source, reason_kind(item.reason)))
        if allowed:
            self.log.warning("input_quarantined", source=item.source, reason=item.reason,
                             similar_in_last_minute=held)

    # -- control ----------------------------------------------------------------------
    def request_stop(self) -> None:
        """Ask the service to stop.  Safe from a signal handler and from any thread:
        it only sets a flag (no lock), which the main loop sees within ``_MAIN_POLL_S``."""
        self._stop_requested = True

    @property
    def stopping(self) -> bool:
        return self._stop_requested

    def _stop_after(self, seconds: float) -> bool:
        """Sleep ``seconds`` unless a stop is requested; True once one is.
        (time.sleep, not a lock-based wait: see ``_stop_requested``.)"""
        if not self._stop_requested:
            time.sleep(seconds)
        return self._stop_requested

    def now(self) -> float:
        """Service time [epoch s] for rules' ticks and operator commands (see ``tick_clock``);
        NaN on the data clock before the first reading."""
        if self.tick_clock == "wall":
            return time.time()
        if not np.isfinite(self._last_ts):
            return float("nan")
        if not self._clock_pace or all(c.done for _n, c, _x in self.collectors):
            return float(self._last_ts)  # the recording has ended: so has its time
        return float(self._last_ts) + (time.monotonic() - self._last_arrival) * self._clock_pace

    def _session_lost(self, collector: str, detail: str) -> None:
        if self.links is not None:
            self.links.session_lost(collector, detail)

    # -- read-only views for the metrics exporter (service/metrics.py) ---------------
    @property
    def newest_reading_ts(self) -> float:
        """Time of the newest converted reading [epoch s]; -inf before the first."""
        return float(self._last_ts)

    @property
    def pipeline_alive(self) -> bool:
        """True while the pipeline thread converts and dispatches batches."""
        return self._thread.is_alive()

    @property
    def collectors_not_started(self) -> frozenset[str]:
        """Names of collectors whose start failed and is being retried."""
        return frozenset(self._failed_starts)

    @property
    def input_queue_batches(self) -> int:
        """Reading batches waiting for the pipeline thread."""
        return self._input.qsize()

    def start(self) -> None:
        """Start store workers, the pipeline thread and every collector.

        A collector whose ``start`` fails is logged and, when the service was
        built with ``retry_collectors`` (``run``), retried with capped backoff
        while the others carry on; otherwise the error is raised.
        """
        if self.links is not None:
            self.links.start()
        for worker in self.workers:
            worker.start()
        self._thread.start()
        self._started = True
        for entry in self.collectors:
            self._start_collector(entry)
        self.log.info("service_started", site=self.site, probes=len(self.converter.probe_ids),
                      collectors=len(self.collectors), stores=len(self.workers))

    def _start_collector(self, entry: tuple[str, Any, CollectorContext], attempt: int = 1) -> None:
        name, collector, _context = entry
        try:
            collector.start()
        except Exception as exc:  # plugin code: isolate, report, retry
            if not self.retry_collectors:
                raise
            delay = min(30.0, 2.0 ** (attempt - 1))
            self._failed_starts[name] = (entry, attempt, time.monotonic() + delay)
            self.log.error("collector_start_failed", collector=name, attempt=attempt,
                           retry_in_s=delay, error=f"{type(exc).__name__}: {exc}")
            return
        self._failed_starts.pop(name, None)
        self.log.info("collector_started", collector=name, attempt=attempt)

    def _retry_collectors(self) -> None:
        now = time.monotonic()
        for entry, attempt, due in list(self._failed_starts.values()):
            if now >= due:
                self._start_collector(entry, attempt + 1)

    def run(self, duration_s: float | None = None) -> ServiceStats:
        """Start, run until stopped (or finite sources end, or ``duration_s``), then shut down."""
        if not self._started:
            self.start()
        end = time.monotonic() + duration_s if duration_s is not None else float("inf")
        while not self._stop_after(_MAIN_POLL_S):
            if time.monotonic() >= end:
                break
            self._retry_collectors()
            if self.collectors and all(c.done for _, c, _ in self.collectors):
                self._wait_for_backlog()
                break
            if not self._thread.is_alive():
                self.log.error("pipeline_stopped_unexpectedly")
                break
        self.shutdown()
        return self.stats

    def _wait_for_backlog(self) -> None:
        """Every source has ended and nobody asked to stop: let the pipeline and
        the stores work off what is queued, however long it takes (a replay reads
        far faster than a store writes), so the stop deadline of ``shutdown``
        applies only to the last batch.  A stop request ends the wait, and so does
        a backlog that has not shrunk for ``stop_timeout_s`` (a store that cannot
        write: ``shutdown`` then counts what it could not take)."""
        idle_checks = 0
        best = None
        last_progress = time.monotonic()
        while idle_checks < 2 and not self._stop_after(_BACKLOG_POLL_S):
            if not self._thread.is_alive():
                return
            backlog = self._input.qsize() + sum(int(w.backlog) for w in self.workers)
            idle_checks = 0 if backlog else idle_checks + 1
            if best is None or backlog < best:
                best, last_progress = backlog, time.monotonic()
            elif time.monotonic() - last_progress > self.settings.stop_timeout_s:
                self.log.warning("backlog_not_draining", queued=backlog)
                return

    def shutdown(self) -> None:
        """Stop collectors, convert what is queued, flush and close every store."""
        timeout = self.settings.stop_timeout_s
        deadline = time.monotonic() + timeout
        collectors_running = self._started
        if not self._started:  # built but never run: still close every store properly
            for worker in self.workers:
                worker.start()
            self._thread.start()
            self._started = True
        never_started = set(self._failed_starts)
        for name, collector, context in (self.collectors if collectors_running else []):
            if name in never_started:
                continue
            context.stop_event.set()
            try:
                collector.stop(timeout=max(0.1, deadline - time.monotonic()))
            except Exception as exc:
                self.log.error("collector_stop_failed", collector=name, error=str(exc))
        try:  # the pipeline may be held by a store that cannot write: never wait past the deadline
            self._input.put(_END, timeout=max(0.1, deadline - time.monotonic()))
        except queue.Full:
            self.log.error("pipeline_stuck_at_stop", queued_batches=self._input.qsize())
        self._thread.join(max(0.1, deadline - time.monotonic()))
        for worker in self.workers:
            worker.close(max(0.5, deadline - time.monotonic()))
        if self.links is not None:  # after the stores: their commit hooks may still use it
            self.links.close()
        self._save_rule_state()
        for name, _collector, context in self.collectors:
            c = context.counters
            self.stats.per_collector[name] = {"received": c.received, "quarantined": c.quarantined,
                                              "reconnects": c.reconnects}
        for worker in self.workers:
            k = worker.counters
            self.stats.per_store[worker.name] = {"rows": k.rows, "errors": k.errors,
                                                 "lost_rows": k.lost_rows}
        self.log.info("service_stopped", readings=self.stats.readings_converted,
                      quarantined=self.stats.quarantined, alerts=self.stats.alerts,
                      store_lost_rows=sum(w.counters.lost_rows for w in self.workers))

    # -- the pipeline thread -------------------------------------------------------------
    def _pipeline(self) -> None:
        batch_rows = self.settings.batch_rows
        wait_s = self.settings.batch_ms / 1000.0
        last_tick = time.monotonic()
        ended = False
        while not ended:
            pending: list[ReadingBatch] = []
            rows = 0
            try:
                item = self._input.get(timeout=0.25)
            except queue.Empty:
                item = None
            if item is _END:
                ended = True
            elif item is not None:
                pending.append(item)
                rows = len(item)
                until = time.monotonic() + wait_s
                # A batch holding acknowledgements (MQTT) goes out as soon as nothing
                # more is queued: its source sends no more until this one is committed,
                # so lingering would only add latency (the collector already coalesces).
                holds_acks = bool(item.on_committed)
                while rows < batch_rows:
                    try:
                        if holds_acks:
                            more = self._input.get_nowait()
                        else:
                            more = self._input.get(timeout=max(0.0, until - time.monotonic()))
                    except queue.Empty:
                        break
                    if more is _END:
                        ended = True
                        break
                    pending.append(more)
                    rows += len(more)
                    holds_acks = holds_acks or bool(more.on_committed)
                if holds_acks and not ended:
                    rows, ended = self._group_commits(pending, rows, batch_rows)
            self._drain_quarantine()
            if pending:
                self._process(ReadingBatch.concat(pending))
            if time.monotonic() - last_tick >= 1.0:
                last_tick = time.monotonic()
                self._every_second()
        self._drain_quarantine()

    def _group_commits(self, pending: list[ReadingBatch], rows: int,
                       batch_rows: int) -> tuple[int, bool]:
        """While a durable store still has an earlier batch queued (it is busy
        committing), keep collecting input into this batch, up to ``batch_rows``:
        under load, commits (and the acknowledgements behind them) are grouped
        into fewer, larger transactions; when the store keeps up, nothing waits."""
        durable = [w for w in self.workers if w.durable]
        while rows < batch_rows and any(w.backlog for w in durable):
            try:
                more = self._input.get(timeout=0.002)
            except queue.Empty:
                continue
            if more is _END:
                return rows, True
            pending.append(more)
            rows += len(more)
        return rows, False

    def _process(self, batch: ReadingBatch) -> None:
        self.stats.readings_in += len(batch)
        if self.links is not None:
            self._run_link(self.links.before_batch)
        try:
            processed = self.converter.convert(batch)
        except Exception as exc:
            self.stats.conversion_failed += len(batch)
            self.log.error("conversion_failed", rows=len(batch), error=f"{type(exc).__name__}: {exc}",
                           hint="these readings were not stored; please report this as a bug")
            return
        alerts: list[AlertEvent] = []
        if self.rules is not None:
            try:
                alerts = list(self.rules.process(processed))
            except Exception as exc:
                self.stats.rule_errors += 1
                self.log.error("rules_failed", rows=len(processed), error=f"{type(exc).__name__}: {exc}")
        if len(processed):
            newest = float(np.max(processed.ts))
            if newest > self._last_ts:
                self._last_ts = newest
                self._last_arrival = time.monotonic()
        self._dispatch(processed, alerts)
        self.stats.batches += 1
        self.stats.readings_converted += len(processed)

    def _dispatch(self, processed: ProcessedBatch, alerts: Sequence[AlertEvent]) -> None:
        self.stats.alerts += len(alerts)
        seq = self._tracker.add(processed.on_committed)
        for worker in self.workers:
            worker.submit(seq, processed, alerts)

    def _every_second(self) -> None:
        if self.links is not None:
            self._run_link(self.links.every_second)
        if self.rules is not None:
            self._tick()

    def _run_link(self, step: Any) -> None:
        now = self.now()
        if not np.isfinite(now):
            now = time.time()
        try:
            alerts = list(step(now))
        except Exception as exc:  # noqa: BLE001 - the reading path must go on
            self.log.error("service_link_failed", step=getattr(step, "__name__", "?"),
                           error=f"{type(exc).__name__}: {exc}")
            return
        hooks = self.links.commit_hooks()  # e.g. mark an operator command done once stored
        if alerts or hooks:
            self._dispatch(_empty_processed(hooks), alerts)

    def _tick(self) -> None:
        now = self.now()
        if not np.isfinite(now):
            return
        try:
            alerts = list(self.rules.tick(now))
        except Exception as exc:
            self.stats.rule_errors += 1
            self.log.error("rules_tick_failed", error=f"{type(exc).__name__}: {exc}")
            return
        if alerts:
            self._dispatch(_empty_processed(), alerts)

    def _drain_quarantine(self) -> None:
        with self._quarantine_lock:
            if not self._quarantine:
                return
            items = list(self._quarantine)
            self._quarantine.clear()
        self.stats.quarantined += len(items)
        for worker in self.workers:
            worker.submit_quarantine(items)

    # -- rule state -------------------------------------------------------------------
    def restore_rule_state(self) -> None:
        path = self.settings.state_path
        if self.rules is None or not path or not os.path.exists(path):
            return
        try:
            with open(path, encoding="utf-8") as f:
                self.rules.restore(json.load(f))
            self.log.info("rule_state_restored", path=path)
        except (OSError, ValueError) as exc:
            self.log.error("rule_state_unreadable", path=path, error=str(exc))

    def _save_rule_state(self) -> None:
        path = self.settings.state_path
        if self.rules is None or not path:
            return
        tmp = Path(path + ".tmp")
        try:
            tmp.parent.mkdir(parents=True, exist_ok=True)
            fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600)
            with os.fdopen(fd, "w", encoding="utf-8") as f:
                json.dump(self.rules.state(), f)
                f.flush()
                os.fsync(f.fileno())
            os.replace(tmp, path)
        except (OSError, TypeError, ValueError) as exc:
            self.log.error("rule_state_not_saved", path=path, error=str(exc))


def build_service(config: LoadedConfig, *, collectors: Sequence[PluginSection] | None = None,
                  stores: Sequence[PluginSection] | None = None,
                  extra_stores: Sequence[tuple[str, Any]] = (),
                  log: Log | None = None, base_dir: str | None = None,
                  tick_clock: Literal["wall", "data", "auto"] = "auto",
                  rules: bool = True, retry_collectors: bool = False,
                  live: bool = False) -> Service:
    """Build a service from a loaded config; ``collectors``/``stores`` replace the
    config's sections (``filter`` and ``replay`` use their own source).

    The calibration store in the SQLite store's file is always applied (see
    ``service/calibration_feed.py``).  ``live`` (``probeflow run``) also takes
    operator alarm commands (SQLite table, MQTT command topic), raises the
    service's own alarms (data gap, outbox quota, calibration due, lab checks)
    and sends alert events to ``notify.webhook``.
    """
    log = log or Log(fmt=config.service.log_format)
    converter = Converter(config.probes)
    context = StoreContext(config.site, log=log, base_dir=base_dir or os.getcwd())
    store_objects: list[tuple[str, Any]] = []
    try:
        for section in (config.stores if stores is None else stores):
            try:
                store_objects.append((section.name, section.plugin(section.config, context)))
            except ProbeflowError:
                raise
            except Exception as exc:  # plugin code
                raise ProbeflowError(f'{section.key_path}: the store "{section.type}" could not '
                                     f"be opened: {type(exc).__name__}: {exc}") from exc
    except BaseException:
        for _name, store in store_objects:
            try:
                store.close()
            except Exception as exc:
                log.error("store_close_failed", store=_name, error=str(exc))
        raise
    store_objects.extend(extra_stores)
    if live and config.notify.webhook is not None:
        from probeflow.service.webhook import WebhookNotifier

        store_objects.append(("webhook", WebhookNotifier(config.notify.webhook, site=config.site,
                                                         log=log)))
    engine = build_rule_engine_for(config, log) if rules else None
    chosen = config.collectors if collectors is None else collectors
    service = Service(
        site=config.site, converter=converter,
        collectors=[(s.name, s.plugin, s.config) for s in chosen],
        stores=store_objects, rules=engine, settings=config.service, log=log,
        tick_clock=tick_clock, retry_collectors=retry_collectors)
    try:
        service.links = _build_links(config, service, chosen, store_objects, log, live)
    except BaseException:
        service.shutdown()
        raise
    service.restore_rule_state()
    return service


def _build_links(config: LoadedConfig, service: Service, collectors: Sequence[PluginSection],
                 stores: Sequence[tuple[str, Any]], log: Log, live: bool) -> Any:
    """Calibration feed (always, when there is a SQLite store), and for a live
    service the alarm commands and external alarms (service/links.py)."""
    from probeflow.service.links import ServiceLinks, sqlite_path_of

    db_path = sqlite_path_of(stores)
    if db_path is None and not live:
        if any(p.calibration_from_store for p in config.probes):
            log.warning("calibration_store_missing",
                        hint="probes use 'calibration: store' but no sqlite store is configured; "
                             "their readings are flagged uncalibrated")
        return None
    links = ServiceLinks(config, service.converter, service.rules, log, db_path,
                         stores if live else (), commands=live)
    if live and config.service.command_topic:
        from probeflow.service.mqtt_commands import MqttCommandListener

        broker = config.service.command_broker
        if broker is None:
            mqtt = [s.config for s in collectors if s.type == "mqtt"]
            if not mqtt:
                raise ConfigError(
                    f"{config.path}: service.command_topic needs a broker: give "
                    "service.command_broker (url, client_id) or configure an MQTT collector",
                    path=config.path, problems=[("service.command_broker", "no broker for commands")])
            base = mqtt[0]
            broker = _command_connection(base)
        links.listeners.append(MqttCommandListener(broker, config.service.command_topic,
                                                   links.post_command, log))
    return links


def _command_connection(collector_config: Any) -> Any:
    """The MQTT collector's broker settings with a client id of its own for commands."""
    from probeflow.mqtt_common import MqttConnectionConfig

    keys = set(MqttConnectionConfig.model_fields)
    data = {k: getattr(collector_config, k) for k in keys if hasattr(collector_config, k)}
    data["client_id"] = f"{collector_config.client_id}-commands"[:128]
    return MqttConnectionConfig.model_validate(data)

