"""The time-series database store: InfluxDB v2 write API through a durable outbox.

Works with InfluxDB 2.x/3.x, the 1.8+ compatibility endpoint and
victoria-metrics (all accept ``POST /api/v2/write``).

Point layout
------------
Readings, measurement ``ph`` (``measurement:`` in the config)::

    ph,probe=tank-3,quality=good,site=demo-works ph=7.12,mv=-12.34,temp_c=41.7,neutral_ph=6.72,neutral_dev=0.4 1764633600250

* tags: ``probe`` (probe id), ``quality`` (good, uncalibrated, temp_fault,
  mv_out_of_range, maintenance), ``site`` (the config's ``site:``; left out
  when empty);
* fields (floats): ``ph``, ``mv`` [mV], ``temp_c`` [°C], ``neutral_ph``,
  ``neutral_dev`` (pH minus neutral pH); a field that is NaN or infinite is
  left out of its line (mv is kept whenever it is finite, so a reading that
  could not be converted still records its raw potential);
* timestamp: the reading's own time, at ``precision`` (default ``ms``).

Alert events, measurement ``ph_alert`` (``alert_measurement:``)::

    ph_alert,limit=high,probe=tank-3,rule=effluent-band,site=demo-works value=9.4,threshold=9.0,state="unack_active",event="raise" 1764633600250

* tags ``rule``, ``probe``, ``limit``, ``site``; fields ``value``,
  ``threshold`` (floats, left out when not finite), ``state`` and ``event``
  (strings).  InfluxDB keeps all four; victoria-metrics keeps numbers only
  and records a string field as 0.

A point's identity is measurement + tag set + timestamp: writing the same
reading again overwrites it with itself, so re-sending after a crash or an
outage is harmless and the store can deliver at least once.

Precision
---------
``ms`` by default: victoria-metrics stores millisecond timestamps (finer ones
are truncated) and probe readings carry no meaningful sub-millisecond time.
``s``, ``us`` and ``ns`` are accepted for InfluxDB.  Timestamps are float64
epoch seconds, so ``ns`` is exact only to about a microsecond.

Store and forward
-----------------
``write`` turns the batch into line protocol and appends it to an on-disk
outbox (:mod:`probeflow.stores.outbox`), then returns: it never waits for the
network.  A forwarder thread sends the oldest rows (up to ``batch_lines``
lines) with influxdb-client's *synchronous* write API and deletes them only
after the server confirms.  The library's batching write API is not used: it
drops data on errors and at shutdown.

* connection errors, timeouts, 429, 5xx (and 401/403/404, which need a
  person to fix the token or bucket) are retried forever with exponential
  backoff capped at ``retry_max_s``; nothing is deleted;
* 400, 413 and 422 mean the server refuses something in the body: the batch
  is split in halves until each refused line is alone; refused lines move to
  the outbox's ``rejected`` table with the server's message, the rest land;
* the outbox has a quota (``outbox_quota_mb``): ``on_quota: block`` (default)
  holds ``write`` until there is room, so the pipeline is back-pressured;
  ``drop_oldest`` deletes the oldest unsent points, counts them in
  ``dropped_lines`` and logs every loss.  A warning is logged when the outbox
  passes ``quota_warn_fraction`` of its quota;
* on start the forwarder sends whatever a previous run left in the outbox.

The token (``token_env``, ``token_file`` or ``token``) is never logged, printed
or put in an error message.

Caution: alerts support operators; they are not a safety system.
"""

from __future__ import annotations

import logging
import os
import threading
import time
from collections.abc import Sequence
from pathlib import Path
from typing import Any, Literal

from pydantic import Field, SecretStr, field_validator, model_validator

from probeflow.batch import ProcessedBatch, QuarantineItem
from probeflow.errors import ConfigError, StoreError
from probeflow.events import AlertEvent
from probeflow.stores.base import StoreConfigBase, StoreContext
from probeflow.stores.line_protocol import alert_lines, escape_measurement, reading_lines
from probeflow.stores.outbox import Outbox, OutboxRow

__all__ = ["InfluxStore", "InfluxStoreConfig"]

_RETRY_STATUSES_NOTE = "connection errors, timeouts, 429 and 5xx"
_SPLIT_STATUSES = frozenset({400, 413, 422})
_MESSAGE_CHARS = 1000


class InfluxStoreConfig(StoreConfigBase):
    """The ``type: influx`` section of ``stores:``."""

    type: Literal["influx"] = "influx"
    url: str
    org: str
    bucket: str
    token_env: str | None = None
    token_file: str | None = None
    token: SecretStr | None = None
    measurement: str = "ph"
    alert_measurement: str = "ph_alert"
    precision: Literal["s", "ms", "us", "ns"] = "ms"
    outbox_path: str | None = None
    outbox_quota_mb: float = Field(default=512.0, gt=0)
    on_quota: Literal["block", "drop_oldest"] = "block"
    quota_warn_fraction: float = Field(default=0.8, gt=0, le=1)
    batch_lines: int = Field(default=5000, ge=1, le=1_000_000)
    timeout_s: float = Field(default=10.0, gt=0)
    verify_ssl: bool = True
    retry_initial_s: float = Field(default=0.5, gt=0)
    retry_max_s: float = Field(default=30.0, gt=0)
    flush_timeout_s: float = Field(default=5.0, ge=0)

    @field_validator("url")
    @classmethod
    def _url_is_http(cls, value: str) -> str:
        if not value.startswith(("http://", "https://")):
            raise ValueError(f"expected an http:// or https:// address, got {value!r}")
        return value.rstrip("/")

    @field_validator("token_env")
    @classmethod
    def _env_is_set(cls, value: str | None) -> str | None:
        if value is not None and value not in os.environ:
            raise ValueError(f"the environment variable {value} is not set (it should hold the token)")
        return value

    @field_validator("token_file")
    @classmethod
    def _file_is_readable(cls, value: str | None) -> str | None:
        if value is not None and not os.access(value, os.R_OK):
            raise ValueError(f"cannot read the token file {value}")
        return value

    @field_validator("measurement", "alert_measurement")
    @classmethod
    def _measurement_is_writable(cls, value: str) -> str:
        if not value:
            raise ValueError("must not be empty")
        escape_measurement(value)  # raises on a line break
        return value

    @model_validator(mode="after")
    def _one_token_source(self) -> InfluxStoreConfig:
        given = [k for k in ("token_env", "token_file", "token") if getattr(self, k) is not None]
        if len(given) > 1:
            raise ValueError(f"give the token one way only; found {', '.join(given)}")
        if self.retry_initial_s > self.retry_max_s:
            raise ValueError("retry_initial_s must not exceed retry_max_s")
        return self


def resolve_token(config: InfluxStoreConfig) -> str | None:
    """The token from the environment, a file or the config (``None``: no token).

    Errors name the config key, never the token.
    """
    if config.token is not None:
        return config.token.get_secret_value()
    if config.token_env is not None:
        value = os.environ.get(config.token_env)
        if value is None:
            raise ConfigError(
                f"stores.influx.token_env: the environment variable {config.token_env} is not set",
                problems=[("token_env", f"environment variable {config.token_env} is not set")],
            )
        return value.strip()
    if config.token_file is not None:
        try:
            return Path(config.token_file).read_text(encoding="utf-8").strip()
        except OSError as exc:
            raise ConfigError(
                f"stores.influx.token_file: cannot read {config.token_file} ({exc.strerror})",
                problems=[("token_file", f"cannot read {config.token_file}")],
            ) from None
    return None


class _Retry(Exception):
    """The send failed in a way that passes (network, 429, 5xx): try again later."""


class _Refused(Exception):
    """The server refused the body (400/413/422); ``message`` is what it said."""

    def __init__(self, status: int, message: str) -> None:
        super().__init__(f"HTTP {status}: {message}")
        self.status = status
        self.message = f"HTTP {status}: {message}"


class _Sender:
    """One synchronous write to the server, with its errors sorted into retry / refused."""

    def __init__(self, config: InfluxStoreConfig, token: str | None) -> None:
        from influxdb_client import InfluxDBClient, WritePrecision
        from influxdb_client.client.write_api import SYNCHRONOUS

        self._bucket = config.bucket
        self._org = config.org
        self._client = InfluxDBClient(
            url=config.url,
            token=token or "",
            org=config.org,
            timeout=int(config.timeout_s * 1000),
            verify_ssl=config.verify_ssl,
            debug=False,
        )
        self._api = self._client.write_api(write_options=SYNCHRONOUS)
        # WritePrecision's members are plain strings; the library's annotations want the class.
        self._precisions: dict[str, Any] = {"s": WritePrecision.S, "ms": WritePrecision.MS,
                            "us": WritePrecision.US, "ns": WritePrecision.NS}

    def send(self, body: bytes, precision: str) -> None:
        from influxdb_client.rest import ApiException

        try:
            self._api.write(self._bucket, self._org, body, write_precision=self._precisions[precision])
        except ApiException as exc:
            status = int(exc.status or 0)
            text = exc.body.decode("utf-8", "replace") if isinstance(exc.body, bytes) else str(exc.body or exc.reason)
            text = text.strip()[:_MESSAGE_CHARS]
            if status in _SPLIT_STATUSES:
                raise _Refused(status, text) from None
            raise _Retry(f"HTTP {status}: {text}") from None
        except Exception as exc:  # noqa: BLE001 - urllib3 / socket errors: the server is unreachable
            raise _Retry(f"{type(exc).__name__}: {exc}"[:_MESSAGE_CHARS]) from None

    def close(self) -> None:
        try:
            self._api.close()
        finally:
            self._client.close()


class _Forwarder:
    """The thread that moves the outbox's oldest rows to the server."""

    def __init__(self, outbox: Outbox, sender: _Sender, config: InfluxStoreConfig, log: logging.Logger) -> None:
        self.outbox = outbox
        self.sender = sender
        self.batch_lines = config.batch_lines
        self.retry_initial_s = config.retry_initial_s
        self.retry_max_s = config.retry_max_s
        self.log = log
        self.failures = 0           # failed attempts since start
        self.forwarded_lines = 0
        self.reachable: bool | None = None  # None until the first attempt
        self.busy = False
        self._delay = config.retry_initial_s
        self._stop = threading.Event()
        self._wake = threading.Event()       # new rows appended
        self._interrupt = threading.Event()  # stop waiting in a backoff (flush / close)
        self._thread = threading.Thread(target=self._run, name="influx-forwarder", daemon=True)

    def start(self) -> None:
        self._thread.start()

    def wake(self) -> None:
        self._wake.set()

    def retry_now(self) -> None:
        self._interrupt.set()
        self._wake.set()

    def stop(self, timeout: float) -> bool:
        self._stop.set()
        self.retry_now()
        self._thread.join(timeout)
        return not self._thread.is_alive()

    def _run(self) -> None:
        while not self._stop.is_set():
            try:
                self._wake.clear()
                rows = self.outbox.oldest(self.batch_lines)
                if not rows:
                    self._wake.wait(1.0)
                    continue
                self.busy = True
                self._forward(rows)
                self._delay = self.retry_initial_s
            except _Retry as exc:
                self._failed(str(exc))
            except Exception as exc:
                if self._stop.is_set():
                    break
                self.log.exception("influx forwarder: unexpected error, retrying: %s", type(exc).__name__)
                self._failed(f"{type(exc).__name__}: {exc}")
            finally:
                if self.busy:
                    self.busy = False
                    self.outbox.notify_waiters()   # a flush waiting on busy returns at once

    def _forward(self, rows: list[OutboxRow]) -> None:
        precision = rows[0].precision
        body = rows[0].body if len(rows) == 1 else b"\n".join(r.body for r in rows)
        ids = [r.id for r in rows]
        try:
            self.sender.send(body, precision)
        except _Refused as exc:
            lines = body.split(b"\n")
            self.log.warning(
                "influx server refused a batch of %d points (%s); splitting it to find the bad lines",
                len(lines), exc.message[:200],
            )
            bad: list[tuple[bytes, str]] = []
            half = len(lines) // 2
            self._isolate(lines[:half], precision, bad)
            self._isolate(lines[half:], precision, bad)
            if self._stop.is_set():
                return
            self.outbox.reject(ids, [(b.decode("utf-8", "replace"), m) for b, m in bad])
            self.log.error(
                "influx server refused %d of %d points; they are kept in the 'rejected' table of %s "
                "with its message (first: %s)",
                len(bad), len(lines), self.outbox.path, bad[0][1][:200] if bad else "-",
            )
            self.forwarded_lines += len(lines) - len(bad)
        else:
            self.forwarded_lines += self.outbox.delete(ids)
        if self.reachable is False:
            self.log.warning("influx server reachable again; %d points still queued", self.outbox.lines)
        self.reachable = True

    def _isolate(self, lines: list[bytes], precision: str, bad: list[tuple[bytes, str]]) -> None:
        """Send ``lines``; on refusal split in halves until each refused line is alone."""
        if not lines:
            return
        try:
            self.sender.send(b"\n".join(lines), precision)
        except _Refused as exc:
            if len(lines) == 1:
                bad.append((lines[0], exc.message))
                return
            half = len(lines) // 2
            self._isolate(lines[:half], precision, bad)
            self._isolate(lines[half:], precision, bad)

    def _failed(self, reason: str) -> None:
        self.failures += 1
        if reason.startswith(("HTTP 401", "HTTP 403", "HTTP 404")) and self.reachable is not False:
            self.log.error(
                "influx server refuses the token, org or bucket (%s): check the store's url, org, "
                "bucket and token; points stay in the outbox until then", reason[:200],
            )
        elif self.reachable is not False:
            self.log.warning(
                "influx server not taking points (%s); %d points kept in the outbox, retrying "
                "(%s are retried with backoff up to %g s)",
                reason, self.outbox.lines, _RETRY_STATUSES_NOTE, self.retry_max_s,
            )
        else:
            self.log.info("influx server still not taking points (%s); %d queued", reason, self.outbox.lines)
        self.reachable = False
        self._interrupt.clear()
        if not self._stop.is_set():
            self._interrupt.wait(self._delay)
        self._delay = min(self._delay * 2, self.retry_max_s)


class InfluxStore:
    """Readings and alert events to an InfluxDB v2 write API, through a durable outbox.

    Depth attributes for metrics: ``outbox_rows``, ``outbox_lines``,
    ``outbox_bytes``, ``rejected_lines``, ``dropped_lines``,
    ``forwarded_lines``, ``failed_attempts``, ``server_reachable``, ``quota_fraction``.
    """

    Config = InfluxStoreConfig
    durable = True  # sources are acked only once the points are in the outbox; block back-pressures

    def __init__(self, config: InfluxStoreConfig, context: StoreContext) -> None:
        self.config = config
        self.site = context.site or ""
        # printf-style log calls below: both the standard library's loggers and the
        # service's structured Log (probeflow.service.log) take them.
        self.log = context.log if context.log is not None else logging.getLogger(__name__)
        token = resolve_token(config)
        path = Path(config.outbox_path) if config.outbox_path else Path(
            "data", f"influx-{config.name}-outbox.sqlite" if config.name else "influx-outbox.sqlite"
        )
        if not path.is_absolute():
            path = Path(context.base_dir) / path
        self._outbox = Outbox(
            path,
            quota_bytes=int(config.outbox_quota_mb * 1024 * 1024),
            on_quota=config.on_quota,
            warn_fraction=config.quota_warn_fraction,
            log=self.log,
        )
        if self._outbox.lines:
            self.log.info("influx outbox %s holds %d points from an earlier run; sending them first",
                          path, self._outbox.lines)
        try:
            self._sender = _Sender(config, token)
        except Exception as exc:  # noqa: BLE001 - any client set-up failure is reported the same way
            self._outbox.close()
            raise StoreError(f"cannot set up the influx client for {config.url}: {type(exc).__name__}") from None
        del token
        self._forwarder = _Forwarder(self._outbox, self._sender, config, self.log)
        self._closed = False
        self._forwarder.start()

    def __repr__(self) -> str:
        return (f"InfluxStore(url={self.config.url!r}, org={self.config.org!r}, "
                f"bucket={self.config.bucket!r}, outbox={str(self._outbox.path)!r})")

    # -- metrics --------------------------------------------------------------
    @property
    def outbox_rows(self) -> int:
        return self._outbox.rows

    @property
    def outbox_lines(self) -> int:
        return self._outbox.lines

    @property
    def outbox_bytes(self) -> int:
        return self._outbox.bytes

    @property
    def rejected_lines(self) -> int:
        return self._outbox.rejected

    @property
    def dropped_lines(self) -> int:
        return self._outbox.dropped_lines

    @property
    def forwarded_lines(self) -> int:
        return self._forwarder.forwarded_lines

    @property
    def failed_attempts(self) -> int:
        """Sends that failed and will be retried, since start."""
        return self._forwarder.failures

    @property
    def server_reachable(self) -> bool | None:
        return self._forwarder.reachable

    @property
    def quota_fraction(self) -> float:
        return self._outbox.quota_fraction

    @property
    def outbox(self) -> Outbox:
        return self._outbox

    def metrics(self) -> dict[str, float]:
        """All depth figures at once, for a metrics exporter."""
        return {
            "outbox_rows": self.outbox_rows,
            "outbox_lines": self.outbox_lines,
            "outbox_bytes": self.outbox_bytes,
            "outbox_quota_fraction": self.quota_fraction,
            "rejected_lines": self.rejected_lines,
            "dropped_lines": self.dropped_lines,
            "forwarded_lines": self.forwarded_lines,
            "failed_attempts": self.failed_attempts,
            "server_reachable": float(bool(self.server_reachable)),
        }

    # -- Store protocol -------------------------------------------------------
    def write(self, batch: ProcessedBatch, alerts: Sequence[AlertEvent]) -> None:
        """Append the batch's lines to the outbox (durable on return); never waits for the network.

        With ``on_quota: block`` and a full outbox this waits for room instead.
        """
        if self._closed:
            raise StoreError("the influx store is closed; cannot accept more readings")
        cfg = self.config
        built = reading_lines(batch, measurement=cfg.measurement, site=self.site, precision=cfg.precision)
        built.extend(alert_lines(alerts, measurement=cfg.alert_measurement, site=self.site,
                                 precision=cfg.precision))
        if built.rejected:
            self.log.warning(
                "influx store: %d rows cannot be written as line protocol and were kept in the "
                "'rejected' table of %s (first: %s)",
                len(built.rejected), self._outbox.path, built.rejected[0][1],
            )
        self._outbox.append(built.lines, cfg.precision, cfg.batch_lines, built.rejected)
        self._forwarder.wake()

    def write_quarantine(self, items: Sequence[QuarantineItem]) -> None:
        """Quarantined input is kept by the SQLite or JSON Lines store, not here."""

    def flush(self, timeout: float | None = None) -> bool:
        """Wait until the outbox is empty (True), or the server is unreachable or time is up (False).

        Nothing is lost either way: what is not sent stays in the outbox file.
        """
        limit = self.config.flush_timeout_s if timeout is None else timeout
        deadline = time.monotonic() + limit
        failures_before = self._forwarder.failures
        self._forwarder.retry_now()
        while True:
            if self._outbox.rows == 0 and not self._forwarder.busy:
                return True
            if self._forwarder.failures > failures_before or time.monotonic() >= deadline:
                self.log.info("influx flush: %d points stay queued in %s for later",
                              self._outbox.lines, self._outbox.path)
                return False
            self._outbox.wait_for_change(min(0.05, max(0.0, deadline - time.monotonic())))

    def close(self) -> None:
        """Flush (bounded), stop the forwarder and close the client and the outbox."""
        if self._closed:
            return
        self.flush()
        self._closed = True
        self._outbox.release_waiters()
        stopped = self._forwarder.stop(self.config.timeout_s + 2.0)
        if not stopped:
            self.log.warning("influx forwarder did not stop in time; unsent points stay in the outbox")
        try:
            self._sender.close()
        except Exception as exc:  # noqa: BLE001 - closing a client must not fail shutdown
            self.log.debug("influx client close: %s", type(exc).__name__)
        if stopped:
            self._outbox.close()
