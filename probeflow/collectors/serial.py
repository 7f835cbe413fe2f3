"""Serial collector: ASCII lines from one port, on one reader thread.

* The port is read with a timeout through our own line buffer over
  ``read(in_waiting or 1)``; only complete lines (ending in ``\\n``, a ``\\r``
  before it is removed) are parsed.  pyserial's ``readline()`` returns a
  fragment on timeout, which would be parsed as a wrong value.
* The first line after every (re)open may be cut off (we may have opened the
  port in the middle of a line): it is not parsed but kept aside in the
  quarantine.  A device that begins with an empty line loses nothing.
* Each line is timestamped on arrival (unless it carries a ``ts``).  Lines that
  arrive together get times at least 1 µs apart, so two readings of one probe
  never share a (probe, ts) key and are both stored.
* A device that vanishes (``SerialException``/``OSError``: unplugged adapter,
  closed pseudo-terminal) is closed and reopened with doubling backoff up to
  ``reopen_backoff_max_s``; a fragment left in the buffer is quarantined.
* Malformed lines are counted and quarantined with the reason; nothing stops
  the reader.

Prefer stable port paths such as ``/dev/serial/by-id/...``: the ``ttyUSBn``
number can change when an adapter is plugged back in.
"""

from __future__ import annotations

import codecs
import threading
import time
from typing import Any, ClassVar, Literal

import serial  # type: ignore[import-untyped]
from pydantic import ConfigDict, Field, field_validator, model_validator

from probeflow.collectors.base import CollectorConfigBase, CollectorContext
from probeflow.collectors.lines import LineFormat, LineParser
from probeflow.collectors.parse import ParsedReadings, RecordParser
from probeflow.collectors.ratelog import RateLimitedLog, default_logger
from probeflow.errors import ParseError

__all__ = ["SerialCollector", "SerialCollectorConfig"]

_PARITY = {"none": serial.PARITY_NONE, "even": serial.PARITY_EVEN, "odd": serial.PARITY_ODD,
           "mark": serial.PARITY_MARK, "space": serial.PARITY_SPACE}
_PARITY_LETTERS = {"n": "none", "e": "even", "o": "odd", "m": "mark", "s": "space"}

TS_STEP_S = 1e-3
"""Smallest gap between arrival times of two lines from one port [s].

Lines that arrive in one burst get times at least this far apart, so that each
keeps its own identity in a time-series database written at millisecond
precision (the influx store's default).  A line takes longer than 1 ms on the
wire even at 115200 baud, so the spacing hardly runs ahead of real time."""


class SerialCollectorConfig(CollectorConfigBase):
    """The ``collectors: - type: serial`` section."""

    model_config = ConfigDict(extra="forbid")
    type: Literal["serial"] = "serial"
    port: str = Field(min_length=1)
    baud: int = Field(default=9600, gt=0, le=4_000_000)
    bytesize: Literal[5, 6, 7, 8] = 8
    parity: Literal["none", "even", "odd", "mark", "space"] = "none"
    stopbits: float = 1
    format: LineFormat = "csv"
    fields: list[str] | None = None
    delimiter: str = ","
    keys: dict[str, str] = Field(default_factory=dict)
    pattern: str | None = None
    probe: str | None = None
    timeout_s: float = Field(default=0.2, gt=0, le=5.0)
    reopen_backoff_min_s: float = Field(default=0.5, gt=0, le=60)
    reopen_backoff_max_s: float = Field(default=30.0, gt=0, le=3600)
    encoding: str = "ascii"
    max_line_bytes: int = Field(default=4096, ge=16)
    drop_first_line: bool = True

    @field_validator("parity", mode="before")
    @classmethod
    def _parity_letters(cls, value: Any) -> Any:
        if isinstance(value, str):
            low = value.lower()
            return _PARITY_LETTERS.get(low, low)
        return value

    @field_validator("stopbits")
    @classmethod
    def _stopbits(cls, value: float) -> float:
        if value not in (1, 1.5, 2):
            raise ValueError(f"expected 1, 1.5 or 2 stop bits, got {value:g}")
        return value

    @field_validator("encoding")
    @classmethod
    def _known_encoding(cls, value: str) -> str:
        try:
            codecs.lookup(value)
        except LookupError:
            raise ValueError(f"unknown text encoding {value!r} (ascii, latin-1 or utf-8 are usual)") from None
        return value

    @model_validator(mode="after")
    def _layout_works(self) -> SerialCollectorConfig:
        if self.reopen_backoff_max_s < self.reopen_backoff_min_s:
            raise ValueError("reopen_backoff_max_s must not be smaller than reopen_backoff_min_s")
        self.line_parser()
        return self

    def line_parser(self) -> LineParser:
        return LineParser(self.format, fields=self.fields, pattern=self.pattern,
                          delimiter=self.delimiter, keys=self.keys, probe=self.probe)


class SerialCollector:
    """Readings from ASCII lines on one serial port (see the module docstring)."""

    Config: ClassVar[type[SerialCollectorConfig]] = SerialCollectorConfig

    def __init__(self, config: SerialCollectorConfig, context: CollectorContext) -> None:
        self.config = config
        self.context = context
        self._lines = config.line_parser()
        self._records = RecordParser(context.known_probes, max_bytes=config.max_line_bytes)
        self._log = RateLimitedLog(default_logger(context.log, "probeflow.collectors.serial"))
        self._stop = threading.Event()
        self._port: serial.Serial | None = None
        self._last_arrival = 0.0
        self.opens = 0
        self._thread = threading.Thread(target=self._run, name=f"{context.name}-reader", daemon=True)

    # -- Collector interface ------------------------------------------------------
    def start(self) -> None:
        self._thread.start()

    def stop(self, timeout: float = 5.0) -> None:
        self._stop.set()
        port = self._port
        if port is not None:
            try:
                port.cancel_read()
            except Exception:  # noqa: BLE001 - the port may be closing on the reader thread
                self._log.say("debug", "serial_cancel_read", "port closing")
        if self._thread.is_alive():
            self._thread.join(timeout)

    @property
    def done(self) -> bool:
        return False

    # -- reader thread --------------------------------------------------------------
    def _stopping(self) -> bool:
        return self._stop.is_set() or self.context.stop_event.is_set()

    def _open(self) -> serial.Serial:
        cfg = self.config
        return serial.Serial(
            port=cfg.port, baudrate=cfg.baud, bytesize=cfg.bytesize, parity=_PARITY[cfg.parity],
            stopbits=cfg.stopbits, timeout=cfg.timeout_s, exclusive=True,
        )

    def _run(self) -> None:
        cfg = self.config
        counters = self.context.counters
        backoff = cfg.reopen_backoff_min_s
        while not self._stopping():
            try:
                port = self._open()
            except (serial.SerialException, OSError, ValueError) as exc:
                counters.last_error = f"cannot open {cfg.port}: {exc}"
                self._log.warning(
                    "serial_open_failed", f"cannot open {cfg.port} ({exc}); "
                    f"trying again in {backoff:g} s"
                )
                self._wait(backoff)
                backoff = min(backoff * 2, cfg.reopen_backoff_max_s)
                continue
            self._port = port
            backoff = cfg.reopen_backoff_min_s
            self.opens += 1
            if self.opens > 1:
                counters.add(reconnects=1)
            counters.connected = True
            self._log.say("info", "serial_opened", f"reading {cfg.port} at {cfg.baud} baud")
            try:
                self._read_until_gone(port)
            except (serial.SerialException, OSError) as exc:
                counters.last_error = f"{cfg.port} went away: {exc}"
                self._log.warning(
                    "serial_device_gone", f"{cfg.port} went away ({exc}); reopening with backoff"
                )
            except Exception as exc:  # noqa: BLE001 - a bug must not end the reader: log, reopen
                counters.last_error = f"reader error: {exc!r}"
                self._log.error("serial_reader_error", f"unexpected error reading {cfg.port}: {exc!r}")
            finally:
                self._port = None
                counters.connected = False
                try:
                    port.close()
                except Exception as exc:  # noqa: BLE001 - closing a vanished device may fail
                    self._log.say("debug", "serial_close_failed", f"closing {cfg.port}: {exc!r}")
            if not self._stopping():
                self._wait(backoff)
                backoff = min(backoff * 2, cfg.reopen_backoff_max_s)

    def _wait(self, seconds: float) -> None:
        deadline = time.monotonic() + seconds
        while not self._stopping():
            left = deadline - time.monotonic()
            if left <= 0:
                return
            self._stop.wait(min(left, 0.2))

    def _read_until_gone(self, port: serial.Serial) -> None:
        limit = self.config.max_line_bytes
        buf = bytearray()
        cut_off = self.config.drop_first_line   # the next line end closes a possibly partial line
        try:
            while not self._stopping():
                chunk = port.read(port.in_waiting or 1)
                if not chunk:
                    continue
                arrival = time.time()
                buf += chunk
                if b"\n" in chunk:
                    lines = buf.split(b"\n")
                    buf = bytearray(lines.pop())
                    if cut_off:
                        first = lines.pop(0)
                        cut_off = False
                        if first.strip():
                            self._reject("first line after opening the port, possibly cut off", bytes(first))
                    self._handle(lines, arrival)
                if len(buf) > limit:
                    self._reject(f"too long: more than {limit} bytes without a line end", bytes(buf))
                    buf.clear()
                    cut_off = True  # the rest of that line is a fragment too
        finally:
            if buf.strip():
                self._reject("incomplete line when the port closed", bytes(buf))

    def _reject(self, reason: str, raw: bytes) -> None:
        self.context.quarantine(reason, raw)

    def _arrival_ts(self, arrival: float) -> float:
        ts = max(arrival, self._last_arrival + TS_STEP_S)
        self._last_arrival = ts
        return ts

    def _handle(self, lines: list[bytearray], arrival: float) -> None:
        out = ParsedReadings()
        encoding = self.config.encoding
        default_probe = self.config.probe
        limit = self.config.max_line_bytes
        for raw in lines:
            if raw.endswith(b"\r"):
                raw = raw[:-1]
            if not raw.strip():
                continue
            try:
                if len(raw) > limit:
                    raise ParseError(f"too long: {len(raw)} bytes, the limit is {limit}")
                try:
                    text = raw.decode(encoding)
                except UnicodeDecodeError:
                    raise ParseError(f"not {encoding} text") from None
                values = self._lines.values(text)
                if "ts" not in values:
                    values["ts"] = self._arrival_ts(arrival)
                out.add(self._records.record(values, default_probe))
            except ParseError as exc:
                self._reject(exc.reason, bytes(raw))
        if len(out):
            try:
                self.context.emit(out.batch())
            except Exception as exc:  # noqa: BLE001 - keep reading; a serial line cannot be read twice
                self.context.counters.last_error = f"pipeline refused {len(out)} reading(s): {exc!r}"
                self._log.error("serial_emit_failed", self.context.counters.last_error)
