"""Typed models of the config file's own sections (site, probes, service).

Collector and store sections are validated by their plugin's ``Config`` model
and the ``rules:`` section by the rules engine's model; see ``load.py``.

Plausibility bounds below are sanity limits for catching typing mistakes, not
acceptance criteria for a calibration (common practice, no source).
"""

from __future__ import annotations

import re
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator

from probeflow.config.fields import describe_value, number, whole_number

__all__ = [
    "ATMOSPHERIC_PRESSURE_KPA",
    "CalibrationSpec",
    "ConfigFileModel",
    "ProbeConfig",
    "RtdSpec",
    "ServiceSettings",
    "TempCompSpec",
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


class ProbeConfig(_Strict):
    """One pH probe: where its numbers come from and how to convert them."""

    id: str
    calibration: CalibrationSpec | None = None
    calibration_from_store: bool = False
    pressure_kpa: number(1.0, 100000.0) = ATMOSPHERIC_PRESSURE_KPA  # type: ignore[valid-type]
    fixed_temp_c: number(-5.0, 150.0) | None = None  # type: ignore[valid-type]
    temp_comp: TempCompSpec | None = None
    rtd: RtdSpec | None = None
    calibration_due_days: whole_number(1, 3650) | None = None  # type: ignore[valid-type]
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


class ConfigFileModel(_Strict):
    """The top level of a config file."""

    site: str = Field(default="site", min_length=1, max_length=128)
    probes: list[ProbeConfig] = Field(default_factory=list)
    collectors: list[dict[str, Any]] = Field(default_factory=list)
    stores: list[dict[str, Any]] = Field(default_factory=list)
    rules: Any = None
    service: ServiceSettings = Field(default_factory=ServiceSettings)
