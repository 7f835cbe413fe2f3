"""Typed models of the config file's own sections (site, probes, service).

Collector and store sections are validated by their plugin's ``Config`` model
and the ``rules:`` section by the rules engine's model; see ``load.py``.

Plausibility bounds below are sanity limits for catching typing mistakes, not
acceptance criteria for a calibration (common practice, no source).
"""

from __future__ import annotations

import re
from typing import Any, Literal

from pydantic import AliasChoices, BaseModel, ConfigDict, Field, field_validator, model_validator

from probeflow.config.fields import describe_value, number, whole_number

__all__ = [
    "ATMOSPHERIC_PRESSURE_KPA",
    "AcceptanceSpec",
    "CalibrationSpec",
    "ConfigFileModel",
    "MetricsSettings",
    "NotifySettings",
    "ProbeConfig",
    "RtdSpec",
    "ServiceSettings",
    "TempCompSpec",
    "WebhookSettings",
]

ATMOSPHERIC_PRESSURE_KPA = 101.325
"""Standard atmosphere [kPa] (ISO 2533 / CGPM 1954 definition of 1 atm = 101 325 Pa)."""

PROBE_ID_PATTERN = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._:/-]{0,63}$")


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class CalibrationSpec(_Strict):
    """Electrode calibration: E = offset - slope * k(T) * (pH - zero_ph)."""

    offset_mv: number(-500.0, 500.0)  # type: ignore[valid-type]
    slope_pct: number(50.0, 120.0)  # type: ignore[valid-type]
    zero_ph: number(0.0, 14.0) = 7.0  # type: ignore[valid-type]


class TempCompSpec(_Strict):
    """Process temperature compensation: report pH referred to ``reference_c``
    with a linear solution coefficient [pH per °C]."""

    reference_c: number(-5.0, 150.0) = 25.0  # type: ignore[valid-type]
    coefficient_ph_per_c: number(-0.1, 0.1)  # type: ignore[valid-type]


class RtdSpec(_Strict):
    """Platinum resistance thermometer on the probe: Pt100 or Pt1000."""

    r0: Literal[100, 1000] = 100


class AcceptanceSpec(_Strict):
    """Calibration acceptance limits for one probe (``acceptance:``); a key left out
    keeps the default of :class:`probeflow.calibration.AcceptanceLimits`.  A
    ``--limits`` file given to ``calibrate``/``grab`` overrides these."""

    slope_min_pct: number(50.0, 120.0) | None = None  # type: ignore[valid-type]
    slope_max_pct: number(50.0, 120.0) | None = None  # type: ignore[valid-type]
    offset_max_abs_mv: number(0.1, 500.0) | None = Field(  # type: ignore[valid-type]
        default=None, validation_alias=AliasChoices("offset_max_abs_mv", "offset_max_mv"))
    residual_max_ph: number(0.001, 2.0) | None = None  # type: ignore[valid-type]

    @model_validator(mode="after")
    def _slope_order(self) -> AcceptanceSpec:
        lo, hi = self.slope_min_pct, self.slope_max_pct
        if lo is not None and hi is not None and lo >= hi:
            raise ValueError(f"slope_min_pct {lo:g} must be below slope_max_pct {hi:g}")
        return self

    def given(self) -> dict[str, float]:
        """The limits set here, by AcceptanceLimits field name."""
        return {k: float(v) for k, v in self.model_dump().items() if v is not None}


class ProbeConfig(_Strict):
    """One pH probe: where its numbers come from and how to convert them.

    Calibration: ``calibration: store`` takes it from the calibration store
    only; an inline ``calibration: {offset_mv, slope_pct}`` is the starting
    point.  Either way, every accepted calibration a technician records in the
    store (``probeflow calibrate``, ``probeflow grab --apply``) is used by the
    running service for readings stamped at or after its ``applies_from``.
    """

    id: str
    calibration: CalibrationSpec | None = None
    calibration_from_store: bool = False
    pressure_kpa: number(1.0, 100000.0) = ATMOSPHERIC_PRESSURE_KPA  # type: ignore[valid-type]
    fixed_temp_c: number(-5.0, 150.0) | None = None  # type: ignore[valid-type]
    temp_comp: TempCompSpec | None = None
    rtd: RtdSpec | None = None
    calibration_due_days: whole_number(1, 3650) | None = None  # type: ignore[valid-type]
    acceptance: AcceptanceSpec | None = None
    maintenance: bool = False
    description: str = ""

    @model_validator(mode="before")
    @classmethod
    def _calibration_store(cls, data: Any) -> Any:
        if isinstance(data, dict) and data.get("calibration") == "store":
            data = dict(data)
            data["calibration"] = None
            data["calibration_from_store"] = True
        return data

    @field_validator("id", mode="before")
    @classmethod
    def _probe_id(cls, value: Any) -> Any:
        if not isinstance(value, str) or not PROBE_ID_PATTERN.match(value):
            raise ValueError(
                "expected a probe id of letters, digits and . _ - : / "
                f"(starting with a letter or digit, at most 64 characters), got {describe_value(value)}"
            )
        return value


class MetricsSettings(_Strict):
    """The HTTP endpoint for ``/metrics`` (Prometheus text) and ``/health`` (JSON).

    ``port: 0`` (the default) leaves it off.  It listens on 127.0.0.1 unless
    ``host`` says otherwise; the endpoint has no authentication, so expose it
    beyond this computer only behind a firewall or a reverse proxy.
    """

    host: str = Field(default="127.0.0.1", min_length=1, max_length=255)
    port: whole_number(0, 65535) = 0  # type: ignore[valid-type]


class WebhookSettings(_Strict):
    """``notify.webhook``: where and how alert events are POSTed."""

    url: str = Field(min_length=1, max_length=2000)
    timeout_s: number(0.1, 120.0) = 5.0  # type: ignore[valid-type]
    max_retries: whole_number(0, 100) = 5  # type: ignore[valid-type]
    backoff_s: number(0.01, 60.0) = 0.5  # type: ignore[valid-type]
    backoff_max_s: number(0.01, 3600.0) = 30.0  # type: ignore[valid-type]
    queue_events: whole_number(1, 1_000_000) = 10_000  # type: ignore[valid-type]
    events: Literal["all", "raise"] = "all"

    @field_validator("url")
    @classmethod
    def _http(cls, value: str) -> str:
        if not value.startswith(("http://", "https://")):
            raise ValueError(f"expected an http:// or https:// URL, got {value!r}")
        return value


class NotifySettings(_Strict):
    """``notify:``: where alert events go besides the stores (none block the reading path)."""

    webhook: WebhookSettings | None = None


class ServiceSettings(_Strict):
    """How the service moves readings: micro-batches, queues, retries, logs."""

    batch_rows: whole_number(1, 1_000_000) = 5000  # type: ignore[valid-type]
    batch_ms: number(0.0, 10_000.0) = 50.0  # type: ignore[valid-type]
    queue_batches: whole_number(1, 100_000) = 256  # type: ignore[valid-type]
    store_queue_batches: whole_number(1, 100_000) = 1024  # type: ignore[valid-type]
    store_retry_max_s: number(0.1, 3600.0) = 30.0  # type: ignore[valid-type]
    stop_timeout_s: number(0.1, 600.0) = 5.0  # type: ignore[valid-type]
    log_format: Literal["kv", "json"] = "kv"
    state_path: str | None = None
    metrics: MetricsSettings = Field(default_factory=MetricsSettings)
    command_topic: str | None = Field(default=None, min_length=1, max_length=512)
    """MQTT topic for alarm commands (ack, shelve, unshelve) as JSON; needs a broker."""
    command_broker: Any = None
    """MQTT connection keys for ``command_topic`` (url, client_id, tls, username,
    password_env ...); by default the first MQTT collector's broker is used."""

    @field_validator("command_broker")
    @classmethod
    def _command_broker(cls, value: Any) -> Any:
        if value is None:
            return None
        from probeflow.mqtt_common import MqttConnectionConfig  # paho only when it is used

        return MqttConnectionConfig.model_validate(value)


class ConfigFileModel(_Strict):
    """The top level of a config file."""

    site: str = Field(default="site", min_length=1, max_length=128)
    probes: list[ProbeConfig] = Field(default_factory=list)
    collectors: list[dict[str, Any]] = Field(default_factory=list)
    stores: list[dict[str, Any]] = Field(default_factory=list)
    rules: Any = None
    service: ServiceSettings = Field(default_factory=ServiceSettings)
    notify: NotifySettings = Field(default_factory=NotifySettings)
