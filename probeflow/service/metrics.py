"""Prometheus metrics and a health check for one running service.

:class:`MetricsExporter` owns a dedicated ``CollectorRegistry`` (nothing is
registered in prometheus-client's process-wide default registry), so several
services can run in one process, each with its own endpoint.  The figures are
read from the service's own counters when a request arrives; the pipeline is
not slowed by metrics bookkeeping.

Endpoints (plain HTTP, no authentication, 127.0.0.1 by default)::

    GET /metrics   Prometheus text format
    GET /health    JSON {"status": "ok" | "degraded" | "stopping", "problems": [...],
                         "collectors": {...}, "stores": {...}, ...}
                   HTTP 200 when ok, 503 otherwise (so ``curl -f`` notices)

Metric names (``_total`` are counters since the service started)::

    probeflow_readings_in_total{collector}        readings parsed and accepted
    probeflow_quarantined_total{collector}        inputs rejected and kept aside
    probeflow_collector_reconnects_total{collector}
    probeflow_collector_sessions_lost_total{collector}   MQTT session not resumed (data gap)
    probeflow_collector_connected{collector,type} 1 connected/running, 0 not (/health says why)
    probeflow_readings_converted_total
    probeflow_conversion_failed_total
    probeflow_quarantine_lost_total               rejects the backlog could not keep
    probeflow_alerts_total                        alert events (every transition)
    probeflow_rule_errors_total
    probeflow_alarms_active{state}                alarms not in the normal state
    probeflow_lag_seconds                         now minus the newest reading's time
    probeflow_input_queue_batches                 batches waiting for the pipeline
    probeflow_readings_out_total{store}           rows each store accepted
    probeflow_store_errors_total{store}           failed writes (each is retried)
    probeflow_store_lost_rows_total{store}        rows a store had to give up (never silent)
    probeflow_store_ok{store}                     1 writing normally, 0 retrying/unreachable
    probeflow_outbox_rows{store}                  durable outbox depth, for stores that have one
    probeflow_outbox_lines{store}, probeflow_outbox_bytes{store},
    probeflow_outbox_quota_fraction{store}, probeflow_outbox_dropped_lines_total{store}
"""

from __future__ import annotations

import ipaddress
import json
import math
import socket
import threading
import time
from collections.abc import Iterator
from dataclasses import asdict, dataclass, field
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from typing import Any

from prometheus_client import CONTENT_TYPE_LATEST, CollectorRegistry, generate_latest
from prometheus_client.core import CounterMetricFamily, GaugeMetricFamily, Metric

from probeflow.errors import ProbeflowError
from probeflow.service.log import Log

__all__ = [
    "CONNECTION_SOURCES",
    "CollectorView",
    "MetricsExporter",
    "ServiceObserver",
    "ServiceView",
    "StoreView",
]

CONNECTION_SOURCES = frozenset({"mqtt", "serial"})
"""Collector types whose ``counters.connected`` means something; a plugin can
say the same by a true ``reports_connection`` attribute on its collector."""

_OUTBOX_FIGURES = (
    # (store attribute, metric name, help, counter?)
    ("outbox_rows", "probeflow_outbox_rows", "rows waiting in the store's durable outbox", False),
    ("outbox_lines", "probeflow_outbox_lines", "points waiting in the store's durable outbox", False),
    ("outbox_bytes", "probeflow_outbox_bytes", "bytes waiting in the store's durable outbox", False),
    ("quota_fraction", "probeflow_outbox_quota_fraction",
     "fraction of the outbox quota in use (1 = full)", False),
    ("dropped_lines", "probeflow_outbox_dropped_lines",
     "points the outbox dropped to stay within its quota", True),
    ("rejected_lines", "probeflow_store_rejected_lines",
     "points the server refused as malformed (kept aside)", True),
)


@dataclass(frozen=True)
class CollectorView:
    name: str
    type: str
    state: str           # running | connected | disconnected | not_started | finished
    received: int
    quarantined: int
    reconnects: int
    sessions_lost: int
    last_error: str

    @property
    def up(self) -> bool:
        return self.state in ("running", "connected", "finished")


@dataclass(frozen=True)
class StoreView:
    name: str
    type: str
    state: str           # ok | retrying | unreachable
    rows: int
    batches: int
    errors: int
    lost_rows: int
    outbox: dict[str, float] = field(default_factory=dict)


@dataclass(frozen=True)
class ServiceView:
    """One consistent-enough reading of a service's counters."""

    ts: float
    site: str
    stopping: bool
    pipeline_alive: bool
    readings_converted: int
    conversion_failed: int
    quarantined: int
    quarantine_lost: int
    alerts: int
    rule_errors: int
    alarms_active: dict[str, int]
    lag_s: float
    input_queue_batches: int
    collectors: tuple[CollectorView, ...]
    stores: tuple[StoreView, ...]

    def problems(self) -> list[str]:
        """What an operator should look at, one sentence each (empty: all is well)."""
        out: list[str] = []
        if not self.pipeline_alive and not self.stopping:
            out.append("the pipeline thread has stopped; restart the service")
        for c in self.collectors:
            if c.state == "disconnected":
                detail = f" ({c.last_error})" if c.last_error else ""
                out.append(f"collector {c.name} is disconnected{detail}")
            elif c.state == "not_started":
                out.append(f"collector {c.name} could not start and is being retried")
        for s in self.stores:
            if s.state == "retrying":
                out.append(f"store {s.name} is failing and retrying its writes")
            elif s.state == "unreachable":
                out.append(f"store {s.name} cannot reach its server; points wait in its outbox")
            if s.lost_rows:
                out.append(f"store {s.name} gave up {s.lost_rows} rows")
        if self.quarantine_lost:
            out.append(f"{self.quarantine_lost} rejected inputs could not be kept in quarantine")
        if self.conversion_failed:
            out.append(f"{self.conversion_failed} readings failed conversion")
        return out

    def health(self) -> dict[str, Any]:
        problems = self.problems()
        status = "stopping" if self.stopping else ("degraded" if problems else "ok")
        return {
            "status": status,
            "site": self.site,
            "problems": problems,
            "lag_s": self.lag_s if math.isfinite(self.lag_s) else None,
            "readings_converted": self.readings_converted,
            "quarantined": self.quarantined,
            "alarms_active": sum(self.alarms_active.values()),
            "collectors": {c.name: {k: v for k, v in asdict(c).items() if k != "name"}
                           for c in self.collectors},
            "stores": {s.name: {k: v for k, v in asdict(s).items() if k != "name"}
                       for s in self.stores},
        }


def _plugin_type(obj: Any) -> str:
    """The ``type:`` of a collector or store (from its config, else its Config model)."""
    given = getattr(getattr(obj, "config", None), "type", None)
    if not given:
        field_info = getattr(getattr(obj, "Config", None), "model_fields", {}).get("type")
        given = getattr(field_info, "default", None)
    return str(given) if isinstance(given, str) and given else type(obj).__name__


class ServiceObserver:
    """Reads a :class:`~probeflow.service.pipeline.Service` into a :class:`ServiceView`.

    Keeps a little memory between readings: a store whose error count grew
    while its batch count did not is ``retrying``.
    """

    def __init__(self, service: Any, clock: Any = time.time) -> None:
        self.service = service
        self.clock = clock
        self._lock = threading.Lock()
        self._store_seen: dict[str, tuple[int, int, str]] = {}   # name -> (errors, batches, state)
        self._alarms: dict[str, int] = {}

    def observe(self) -> ServiceView:
        with self._lock:
            svc = self.service
            now = float(self.clock())
            stats = svc.stats
            newest = float(svc.newest_reading_ts)
            return ServiceView(
                ts=now, site=str(svc.site), stopping=bool(svc.stopping),
                pipeline_alive=bool(svc.pipeline_alive),
                readings_converted=stats.readings_converted,
                conversion_failed=stats.conversion_failed, quarantined=stats.quarantined,
                quarantine_lost=stats.quarantine_lost, alerts=stats.alerts,
                rule_errors=stats.rule_errors, alarms_active=self._alarms_by_state(svc.rules),
                lag_s=now - newest if math.isfinite(newest) else math.nan,
                input_queue_batches=int(svc.input_queue_batches),
                collectors=tuple(self._collector(svc, *entry) for entry in svc.collectors),
                stores=tuple(self._store(w) for w in svc.workers),
            )

    def _collector(self, svc: Any, name: str, collector: Any, context: Any) -> CollectorView:
        kind = _plugin_type(collector)
        c = context.counters
        if name in svc.collectors_not_started:
            state = "not_started"
        elif _done(collector):
            state = "finished"
        elif kind in CONNECTION_SOURCES or getattr(collector, "reports_connection", False):
            state = "connected" if c.connected else "disconnected"
        else:
            state = "running"
        return CollectorView(name=name, type=kind, state=state, received=c.received,
                             quarantined=c.quarantined, reconnects=c.reconnects,
                             sessions_lost=getattr(c, "session_lost", 0),
                             last_error=str(c.last_error or ""))

    def _store(self, worker: Any) -> StoreView:
        k = worker.counters
        errors, batches = k.errors, k.batches
        prev_errors, prev_batches, prev_state = self._store_seen.get(worker.name, (0, 0, "ok"))
        if batches > prev_batches:
            state = "ok"
        elif errors > prev_errors:
            state = "retrying"
        else:
            state = prev_state
        outbox = _outbox_figures(worker.store)
        self._store_seen[worker.name] = (errors, batches, state)
        reachable = _safe_attr(worker.store, "server_reachable")
        shown = "unreachable" if state == "ok" and reachable is False else state
        return StoreView(name=worker.name, type=_plugin_type(worker.store), state=shown,
                         rows=k.rows, batches=batches, errors=errors, lost_rows=k.lost_rows,
                         outbox=outbox)

    def _alarms_by_state(self, engine: Any) -> dict[str, int]:
        active = getattr(engine, "active_alarms", None)
        if active is None:
            return {}
        for _ in range(3):  # the pipeline thread may change the alarm book while we read it
            try:
                alarms = list(active())
            except RuntimeError:
                continue
            except Exception:  # noqa: BLE001 - a rules plugin must not break the metrics page
                break
            counts: dict[str, int] = {}
            for alarm in alarms:
                state = str(alarm.get("state", "active")) if isinstance(alarm, dict) else "active"
                counts[state] = counts.get(state, 0) + 1
            self._alarms = counts
            break
        return dict(self._alarms)


def _done(collector: Any) -> bool:
    try:
        return bool(collector.done)
    except Exception:  # noqa: BLE001 - plugin property
        return False


def _safe_attr(obj: Any, name: str) -> Any:
    try:
        return getattr(obj, name, None)
    except Exception:  # noqa: BLE001 - e.g. an outbox already closed at shutdown
        return None


def _outbox_figures(store: Any) -> dict[str, float]:
    out: dict[str, float] = {}
    for attr, _metric, _help, _counter in _OUTBOX_FIGURES:
        value = _safe_attr(store, attr)
        if isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value):
            out[attr] = float(value)
    return out


class _ServiceCollector:
    """prometheus-client custom collector: builds the metric families at scrape time."""

    def __init__(self, observer: ServiceObserver) -> None:
        self.observer = observer

    def describe(self) -> list[Metric]:
        return []  # no describe at registration: the service may not be running yet

    def collect(self) -> Iterator[Metric]:
        view = self.observer.observe()
        per_collector = (
            ("probeflow_readings_in", "readings parsed and accepted", "received"),
            ("probeflow_quarantined", "inputs rejected and kept aside with the reason", "quarantined"),
            ("probeflow_collector_reconnects", "reconnections to the source", "reconnects"),
            ("probeflow_collector_sessions_lost",
             "times the broker had lost the persistent session (possible data gap)", "sessions_lost"),
        )
        for name, help_text, attr in per_collector:
            family = CounterMetricFamily(name, help_text, labels=["collector"])
            for c in view.collectors:
                family.add_metric([c.name], getattr(c, attr))
            yield family
        connected = GaugeMetricFamily("probeflow_collector_connected",
                                      "1 when the collector is connected (or running), 0 when not",
                                      labels=["collector", "type"])
        for c in view.collectors:
            connected.add_metric([c.name, c.type], 1.0 if c.up else 0.0)
        yield connected
        totals = (
            ("probeflow_readings_converted", "readings converted to pH", view.readings_converted),
            ("probeflow_conversion_failed", "readings that failed conversion", view.conversion_failed),
            ("probeflow_quarantine_lost", "rejected inputs the quarantine backlog could not keep",
             view.quarantine_lost),
            ("probeflow_alerts", "alert events (every alarm transition)", view.alerts),
            ("probeflow_rule_errors", "errors inside the rules stage", view.rule_errors),
        )
        for name, help_text, value in totals:
            yield CounterMetricFamily(name, help_text, value=value)
        alarms = GaugeMetricFamily("probeflow_alarms_active", "alarms not in the normal state",
                                   labels=["state"])
        for state, count in sorted(view.alarms_active.items()):
            alarms.add_metric([state], count)
        yield alarms
        yield GaugeMetricFamily("probeflow_lag_seconds",
                                "seconds between now and the newest converted reading's time "
                                "(NaN before the first)", value=view.lag_s)
        yield GaugeMetricFamily("probeflow_input_queue_batches",
                                "reading batches waiting for the pipeline", value=view.input_queue_batches)
        per_store = (
            ("probeflow_readings_out", "rows the store accepted", "rows"),
            ("probeflow_store_errors", "failed store writes (each is retried)", "errors"),
            ("probeflow_store_lost_rows", "rows the store had to give up", "lost_rows"),
        )
        for name, help_text, attr in per_store:
            family = CounterMetricFamily(name, help_text, labels=["store"])
            for s in view.stores:
                family.add_metric([s.name], getattr(s, attr))
            yield family
        ok = GaugeMetricFamily("probeflow_store_ok", "1 when the store writes normally, 0 when it "
                               "is retrying or its server is unreachable", labels=["store", "type"])
        for s in view.stores:
            ok.add_metric([s.name, s.type], 1.0 if s.state == "ok" else 0.0)
        yield ok
        for attr, name, help_text, is_counter in _OUTBOX_FIGURES:
            stores = [s for s in view.stores if attr in s.outbox]
            if not stores:
                continue
            fam: Metric
            if is_counter:
                fam = CounterMetricFamily(name, help_text, labels=["store"])
            else:
                fam = GaugeMetricFamily(name, help_text, labels=["store"])
            for s in stores:
                fam.add_metric([s.name], s.outbox[attr])
            yield fam


class _Server(ThreadingHTTPServer):
    daemon_threads = True
    allow_reuse_address = True
    exporter: MetricsExporter


class _Handler(BaseHTTPRequestHandler):
    server: _Server

    def do_GET(self) -> None:
        exporter = self.server.exporter
        path = self.path.split("?", 1)[0]
        try:
            if path == "/metrics":
                body, ctype, code = generate_latest(exporter.registry), CONTENT_TYPE_LATEST, 200
            elif path == "/health":
                health = exporter.observer.observe().health()
                body = json.dumps(health, allow_nan=False, default=str).encode()
                ctype, code = "application/json", 200 if health["status"] == "ok" else 503
            else:
                body, ctype, code = b"not found: try /metrics or /health\n", "text/plain", 404
        except Exception as exc:  # noqa: BLE001 - one bad request must not end the server
            exporter.log.error("metrics_request_failed", path=path, error=f"{type(exc).__name__}: {exc}")
            body, ctype, code = b"internal error, see the service log\n", "text/plain", 500
        self.send_response(code)
        self.send_header("Content-Type", ctype)
        self.send_header("Content-Length", str(len(body)))
        self.end_headers()
        self.wfile.write(body)

    def version_string(self) -> str:
        return "probeflow"

    def log_message(self, format: str, *args: Any) -> None:
        """No log line per request (a scrape every few seconds would flood the log)."""


class MetricsExporter:
    """The ``/metrics`` and ``/health`` endpoint of one service.

    ``port=0`` means off: :meth:`start` then does nothing.  Use
    :attr:`registry` directly (``generate_latest(exporter.registry)``) to read
    the figures without HTTP.
    """

    def __init__(self, service: Any, *, host: str = "127.0.0.1", port: int = 0,
                 log: Log | None = None) -> None:
        self.service = service
        self.host = host
        self.port = port
        self.log = log or getattr(service, "log", None) or Log()
        self.observer = ServiceObserver(service)
        self.registry = CollectorRegistry(auto_describe=False)
        self.registry.register(_ServiceCollector(self.observer))  # type: ignore[arg-type]
        self._server: _Server | None = None
        self._thread: threading.Thread | None = None

    @property
    def address(self) -> tuple[str, int] | None:
        """``(host, port)`` the server listens on, or None when it is off."""
        if self._server is None:
            return None
        host, port = self._server.server_address[:2]
        return str(host), int(port)

    def start(self) -> None:
        """Listen and serve on a background thread (no-op when the port is 0)."""
        if self.port == 0 or self._server is not None:
            return
        family, address = _resolve(self.host, self.port)
        server_class = type("_ServerForFamily", (_Server,), {"address_family": family})
        try:
            server = server_class(address, _Handler)
        except OSError as exc:
            raise ProbeflowError(
                f"service.metrics: cannot listen on {self.host} port {self.port}: {exc.strerror}; "
                "choose another port, or set port: 0 to turn the endpoint off") from exc
        server.exporter = self
        self._server = server
        self._thread = threading.Thread(target=server.serve_forever, kwargs={"poll_interval": 0.2},
                                        name="metrics-http", daemon=True)
        self._thread.start()
        host, port = self.address or (self.host, self.port)
        self.log.info("metrics_listening", url=f"http://{_url_host(host)}:{port}/metrics")
        if not ipaddress.ip_address(address[0]).is_loopback:
            self.log.warning("metrics_not_local", host=host,
                             hint="the endpoint has no authentication; keep it behind a firewall")

    def stop(self) -> None:
        server, self._server = self._server, None
        if server is None:
            return
        server.shutdown()
        server.server_close()
        if self._thread is not None:
            self._thread.join(2.0)


def _resolve(host: str, port: int) -> tuple[socket.AddressFamily, tuple[Any, ...]]:
    try:
        infos = socket.getaddrinfo(host, port, type=socket.SOCK_STREAM)
    except socket.gaierror as exc:
        raise ProbeflowError(f"service.metrics.host: cannot resolve {host!r}: {exc.strerror}") from exc
    family, _type, _proto, _name, address = infos[0]
    return family, (address[0], address[1])


def _url_host(host: str) -> str:
    return f"[{host}]" if ":" in host else host
