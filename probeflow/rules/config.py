"""The ``rules:`` section of the config, as typed pydantic models.

Every sub-section is optional and defaults to empty; unknown keys are
rejected with the key named.  A further key may name an installed rule-kind
plugin (entry-point group ``probeflow.rules``, see :mod:`probeflow.rules.base`):
its section is checked by that plugin's ``Config`` model.  The plain form of a band rule works as written::

    rules:
      bands:
        - id: outfall-ph
          probes: ["out-*"]
          quantity: ph
          low: 6.5
          high: 8.5
          deadband: 0.1
          on_delay_s: 30
          off_delay_s: 20

A limit is a number, or the richer form ``{value: 8.5, severity: high}``.

Defaults marked "common practice, no source" are starting points an operator
should tune for the site; alerts support operators, they are not a safety
system.
"""

from __future__ import annotations

import difflib
import functools
import math
from collections.abc import Mapping
from itertools import pairwise
from typing import Any, Literal

from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    ModelWrapValidatorHandler,
    TypeAdapter,
    ValidationError,
    ValidationInfo,
    field_validator,
    model_validator,
)
from pydantic_core import InitErrorDetails, PydanticCustomError

from probeflow.errors import ConfigError, PluginError

__all__ = [
    "BAND_LIMITS",
    "BUILTIN_SECTIONS",
    "SETTINGS_SECTIONS",
    "BandRuleConfig",
    "DiagnosticsConfig",
    "DriftRuleConfig",
    "FlatlineConfig",
    "LabChecksConfig",
    "LimitSpec",
    "MvRangeConfig",
    "NoiseConfig",
    "RateOfChangeRuleConfig",
    "RedundancyRuleConfig",
    "RulesConfig",
    "Severity",
    "StaleConfig",
    "TempFaultConfig",
    "parse_rules_config",
]

Severity = Literal["low", "medium", "high", "critical"]
Quantity = Literal["ph", "neutral_dev", "temp_c", "mv"]

BAND_LIMITS: tuple[str, ...] = ("low_low", "low", "high", "high_high")
"""Limit names of a band rule, lowest first."""

DEFAULT_SEVERITY: dict[str, Severity] = {
    "low_low": "high", "low": "medium", "high": "medium", "high_high": "high",
}


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


def _finite(value: float, what: str) -> float:
    if not math.isfinite(value):
        raise ValueError(f"{what} must be a finite number, got {value}")
    return value


class LimitSpec(_Strict):
    """A limit with its own severity: ``{value: 8.5, severity: high}``."""

    value: float
    severity: Severity | None = None

    @field_validator("value")
    @classmethod
    def _value_finite(cls, v: float) -> float:
        return _finite(v, "a limit value")


def _non_empty_ids(values: list[str], what: str) -> list[str]:
    for v in values:
        if not v.strip():
            raise ValueError(f"{what} must not contain an empty name")
    return values


class BandRuleConfig(_Strict):
    """Out-of-band rule on one quantity for every probe matching ``probes`` (globs)."""

    id: str = Field(min_length=1)
    probes: list[str] = Field(min_length=1)
    quantity: Quantity = "ph"
    low_low: float | LimitSpec | None = None
    low: float | LimitSpec | None = None
    high: float | LimitSpec | None = None
    high_high: float | LimitSpec | None = None
    deadband: float = Field(default=0.0, ge=0.0)
    on_delay_s: float = Field(default=0.0, ge=0.0)
    off_delay_s: float = Field(default=0.0, ge=0.0)
    severity: Severity | None = None

    @field_validator("probes")
    @classmethod
    def _probes(cls, v: list[str]) -> list[str]:
        return _non_empty_ids(v, "probes")

    @field_validator("low_low", "low", "high", "high_high")
    @classmethod
    def _limit_finite(cls, v: float | LimitSpec | None) -> float | LimitSpec | None:
        if isinstance(v, float):
            _finite(v, "a limit")
        return v

    @field_validator("deadband", "on_delay_s", "off_delay_s")
    @classmethod
    def _param_finite(cls, v: float) -> float:
        return _finite(v, "this setting")

    @model_validator(mode="after")
    def _limits_ordered(self) -> BandRuleConfig:
        given = [(name, self.limit_value(name)) for name in BAND_LIMITS]
        present = [(n, v) for n, v in given if v is not None]
        if not present:
            raise ValueError("a band rule needs at least one of low_low, low, high, high_high")
        for (n1, v1), (n2, v2) in pairwise(present):
            if v1 is not None and v2 is not None and v1 > v2:
                raise ValueError(f"limits out of order: {n1} ({v1}) is above {n2} ({v2})")
        return self

    def limit_value(self, name: str) -> float | None:
        spec = getattr(self, name)
        if spec is None:
            return None
        return float(spec.value) if isinstance(spec, LimitSpec) else float(spec)

    def limit_severity(self, name: str) -> Severity:
        spec = getattr(self, name)
        if isinstance(spec, LimitSpec) and spec.severity is not None:
            return spec.severity
        return self.severity or DEFAULT_SEVERITY[name]


class RateOfChangeRuleConfig(_Strict):
    """|d quantity/dt| (least-squares slope over ``window_s``) above ``limit_per_min``."""

    id: str = Field(min_length=1)
    probes: list[str] = Field(min_length=1)
    quantity: Quantity = "ph"
    limit_per_min: float = Field(gt=0.0)
    window_s: float = Field(default=60.0, gt=0.0)
    min_points: int = Field(default=3, ge=2)
    deadband: float = Field(default=0.0, ge=0.0)
    on_delay_s: float = Field(default=0.0, ge=0.0)
    off_delay_s: float = Field(default=0.0, ge=0.0)
    severity: Severity = "medium"

    @field_validator("probes")
    @classmethod
    def _probes(cls, v: list[str]) -> list[str]:
        return _non_empty_ids(v, "probes")


class StaleConfig(_Strict):
    """No reading for ``after_s`` seconds (300 s: common practice, no source)."""

    enabled: bool = True
    after_s: float = Field(default=300.0, gt=0.0)
    severity: Severity = "medium"


class FlatlineConfig(_Strict):
    """mV spread over ``window_s`` below ``min_spread_mv``: a coated, dry or frozen electrode.

    Defaults 1800 s and 0.1 mV: common practice, no source.
    """

    enabled: bool = True
    window_s: float = Field(default=1800.0, gt=0.0)
    min_spread_mv: float = Field(default=0.1, gt=0.0)
    severity: Severity = "medium"


class NoiseConfig(_Strict):
    """mV spread over ``window_s`` above ``max_spread_mv``: a noisy or cracked electrode, ground loop.

    Defaults 60 s and 20 mV: common practice, no source.
    """

    enabled: bool = True
    window_s: float = Field(default=60.0, gt=0.0)
    max_spread_mv: float = Field(default=20.0, gt=0.0)
    on_delay_s: float = Field(default=0.0, ge=0.0)
    severity: Severity = "medium"


class MvRangeConfig(_Strict):
    """mV outside what a glass electrode can give.

    Active while readings carry the conversion stage's ``mv_out_of_range``
    quality, or lie outside ``min_mv``/``max_mv`` when those are set.
    """

    enabled: bool = True
    min_mv: float | None = None
    max_mv: float | None = None
    on_delay_s: float = Field(default=0.0, ge=0.0)
    severity: Severity = "high"


class TempFaultConfig(_Strict):
    """Quality ``temp_fault`` persisting ``for_s`` seconds (60 s: common practice, no source)."""

    enabled: bool = True
    for_s: float = Field(default=60.0, ge=0.0)
    severity: Severity = "medium"


class DiagnosticsConfig(_Strict):
    """Per-probe diagnostics; each part on with its defaults unless ``enabled: false``."""

    probes: list[str] = Field(default_factory=lambda: ["*"], min_length=1)
    stale: StaleConfig = Field(default_factory=StaleConfig)
    flatline: FlatlineConfig = Field(default_factory=FlatlineConfig)
    noise: NoiseConfig = Field(default_factory=NoiseConfig)
    mv_range: MvRangeConfig = Field(default_factory=MvRangeConfig)
    temp_fault: TempFaultConfig = Field(default_factory=TempFaultConfig)


class RedundancyRuleConfig(_Strict):
    """Two or three probes on the same stream: deviation above ``limit`` for ``for_s``.

    With three probes the odd one out is named by median voting.  Readings
    older than ``max_age_s`` are not compared (60 s: common practice, no source).
    """

    id: str = Field(min_length=1)
    probes: list[str] = Field(min_length=2, max_length=3)
    quantity: Quantity = "ph"
    limit: float = Field(gt=0.0)
    for_s: float = Field(default=0.0, ge=0.0)
    off_delay_s: float = Field(default=0.0, ge=0.0)
    deadband: float = Field(default=0.0, ge=0.0)
    max_age_s: float = Field(default=60.0, gt=0.0)
    severity: Severity = "medium"

    @field_validator("probes")
    @classmethod
    def _distinct(cls, v: list[str]) -> list[str]:
        _non_empty_ids(v, "probes")
        if len(set(v)) != len(v):
            raise ValueError("redundant probes must be distinct probe ids")
        if any(ch in p for p in v for ch in "*?["):
            raise ValueError("redundant probes are exact probe ids, not globs")
        return v


class DriftRuleConfig(_Strict):
    """Theil–Sen slope of a probe's value (or of a pair's difference) above ``limit_per_day``.

    Readings are averaged into one point per ``step_s`` (60 s) and the slope
    is computed every ``every_s`` (900 s) over the last ``window_s`` (1 day):
    common practice, no source.
    """

    id: str = Field(min_length=1)
    probes: list[str] | None = None
    pair: list[str] | None = None
    quantity: Quantity = "ph"
    limit_per_day: float = Field(gt=0.0)
    window_s: float = Field(default=86400.0, gt=0.0)
    step_s: float = Field(default=60.0, gt=0.0)
    every_s: float = Field(default=900.0, gt=0.0)
    min_points: int = Field(default=30, ge=3)
    min_span_fraction: float = Field(default=0.5, gt=0.0, le=1.0)
    max_points: int = Field(default=500, ge=10)
    severity: Severity = "low"

    @model_validator(mode="after")
    def _one_source(self) -> DriftRuleConfig:
        if (self.probes is None) == (self.pair is None):
            raise ValueError("give exactly one of 'probes' (globs) or 'pair' (two probe ids)")
        if self.pair is not None and (len(self.pair) != 2 or self.pair[0] == self.pair[1]):
            raise ValueError("'pair' must name two different probe ids")
        if self.step_s > self.window_s:
            raise ValueError("step_s must not exceed window_s")
        return self


class LabChecksConfig(_Strict):
    """Alarms from outside evidence, checked by the running service when a grab sample
    or a calibration is recorded (``rules.lab_checks``).  Defaults: common practice,
    no source; tune them for the site."""

    grab_limit_ph: float = Field(default=0.2, gt=0.0)
    """|online - lab| above this raises ``grab-sample/<probe>/deviation``."""
    grab_trend_limit_ph_per_day: float | None = Field(default=None, gt=0.0)
    """|Theil-Sen trend of (online - lab)| above this raises ``grab-sample/<probe>/trend``."""
    grab_trend_min_samples: int = Field(default=3, ge=2)
    offset_jump_mv: float = Field(default=15.0, gt=0.0)
    """Offset moved more than this between two accepted calibrations."""
    slope_jump_pct: float = Field(default=5.0, gt=0.0)
    """Slope moved more than this between two accepted calibrations."""
    slope_forecast_days: float = Field(default=30.0, gt=0.0)
    """Raise when the slope trend reaches the probe's minimum acceptable slope within this."""
    slope_forecast_min_points: int = Field(default=3, ge=3)


BUILTIN_SECTIONS: tuple[str, ...] = ("bands", "rate_of_change", "diagnostics", "redundancy", "drift")
"""Keys of ``rules:`` typed here, each the name of a built-in rule-kind plugin (build order)."""

SETTINGS_SECTIONS: tuple[str, ...] = ("lab_checks",)
"""Keys of ``rules:`` that hold settings for the service, not rules."""


class RulesConfig(_Strict):
    """The whole ``rules:`` section.

    Besides the sections below, a key may name an installed rule-kind plugin
    (entry-point group ``probeflow.rules``): its section is a list of entries
    (or one mapping, as the plugin declares), each checked by the plugin's own
    ``Config`` model.  A key that names no installed plugin is refused.
    """

    model_config = ConfigDict(extra="allow", frozen=True)

    bands: list[BandRuleConfig] = Field(default_factory=list)
    rate_of_change: list[RateOfChangeRuleConfig] = Field(default_factory=list)
    diagnostics: DiagnosticsConfig | None = None
    redundancy: list[RedundancyRuleConfig] = Field(default_factory=list)
    drift: list[DriftRuleConfig] = Field(default_factory=list)
    lab_checks: LabChecksConfig = Field(default_factory=LabChecksConfig)

    @model_validator(mode="wrap")
    @classmethod
    def _plugin_sections(cls, data: Any, handler: ModelWrapValidatorHandler[RulesConfig],
                         info: ValidationInfo) -> RulesConfig:
        """Typed sections through pydantic; any other key through its rule plugin's model."""
        if not isinstance(data, Mapping) or all(k in cls.model_fields for k in data):
            return handler(data)
        errors: list[InitErrorDetails] = []
        plugins: dict[str, Any] = {}
        for key, raw in data.items():
            if key in cls.model_fields:
                continue
            plugins[str(key)] = _validate_plugin_section(str(key), raw, info.context, errors)
        model: RulesConfig | None = None
        try:
            model = handler({k: v for k, v in data.items() if k in cls.model_fields})
        except ValidationError as exc:
            if not errors:
                raise
            errors[:0] = [_line_error(e, ()) for e in exc.errors(include_url=False)]
        if model is not None:
            errors += _duplicate_ids(model, plugins)
        if errors or model is None:
            raise ValidationError.from_exception_data(cls.__name__, errors)
        object.__setattr__(model, "__pydantic_extra__", plugins)
        return model

    @model_validator(mode="after")
    def _unique_ids(self) -> RulesConfig:
        seen: set[str] = set()
        for group in (self.bands, self.rate_of_change, self.redundancy, self.drift):
            for rule in group:
                if rule.id in seen:
                    raise ValueError(f"rule id {rule.id!r} is used twice; ids must be unique")
                seen.add(rule.id)
        return self

    @property
    def plugin_sections(self) -> dict[str, Any]:
        """Sections of rule-kind plugins that are not built in: key -> validated entries
        (a list, or one model for a ``mapping`` kind)."""
        return dict(self.model_extra or {})

    def rule_sections(self) -> dict[str, list[BaseModel]]:
        """Every non-empty rule-kind section, built-ins first, then plugins in file order:
        section key (= plugin name) -> its validated entries."""
        out: dict[str, list[BaseModel]] = {}
        sections = [(k, getattr(self, k)) for k in BUILTIN_SECTIONS] + list(self.plugin_sections.items())
        for key, value in sections:
            entries = [value] if isinstance(value, BaseModel) else list(value or [])
            if entries:
                out[key] = entries
        return out


def _line_error(err: Any, prefix: tuple[int | str, ...]) -> InitErrorDetails:
    """One pydantic error, re-raisable under ``prefix`` with its type, message and context."""
    ctx = err.get("ctx")
    detail = InitErrorDetails(type=PydanticCustomError(err["type"], err["msg"], ctx),
                              loc=prefix + tuple(err["loc"]), input=err.get("input"))
    return detail


def _problem(loc: tuple[int | str, ...], message: str, value: Any) -> InitErrorDetails:
    return InitErrorDetails(type=PydanticCustomError("value_error", "{error}", {"error": message}),
                            loc=loc, input=value)


def _validate_plugin_section(key: str, raw: Any, context: Any,
                             errors: list[InitErrorDetails]) -> Any:
    """Validate ``rules.<key>`` with the rule plugin named ``key``; problems go to ``errors``."""
    from probeflow.plugins import RULES, available_plugins
    from probeflow.rules.base import load_rule_kind, section_form_of

    if key not in available_plugins(RULES):
        installed = ", ".join(available_plugins(RULES)) or "none"
        close = difflib.get_close_matches(key, [*available_plugins(RULES), *SETTINGS_SECTIONS], n=1)
        hint = f'; did you mean "{close[0]}"?' if close else ""
        errors.append(_problem((key,), f'no rule plugin "{key}" is installed (installed: '
                               f"{installed}): unknown key{hint}", raw))
        return None
    try:
        kind = load_rule_kind(key)
    except PluginError as exc:
        errors.append(_problem((key,), str(exc), raw))
        return None
    many = section_form_of(kind) == "list"
    adapter = _adapter(kind.Config, many)
    try:
        return adapter.validate_python(raw, context=context)
    except ValidationError as exc:
        errors.extend(_line_error(e, (key,)) for e in exc.errors(include_url=False))
        return None


@functools.lru_cache(maxsize=64)
def _adapter(model: type[BaseModel], many: bool) -> TypeAdapter[Any]:
    return TypeAdapter(list[model] if many else model)  # type: ignore[valid-type]


def _duplicate_ids(model: RulesConfig, plugins: Mapping[str, Any]) -> list[InitErrorDetails]:
    """Rule ids must be unique across kinds too: an alarm id is ``rule/probe/limit``."""
    seen = {r.id for g in (model.bands, model.rate_of_change, model.redundancy, model.drift) for r in g}
    out = []
    for key, value in plugins.items():
        entries = value if isinstance(value, list) else [value] if value is not None else []
        for i, entry in enumerate(entries):
            rid = getattr(entry, "id", None)
            if not isinstance(rid, str):
                continue
            if rid in seen:
                loc = (key, i, "id") if isinstance(value, list) else (key, "id")
                out.append(_problem(loc, f"rule id {rid!r} is used twice; ids must be unique", rid))
            seen.add(rid)
    return out


def _key_path(loc: tuple[int | str, ...], prefix: str) -> str:
    out = prefix
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        elif part in ("float", "LimitSpec", "function-after[_limit_finite(), union[float,LimitSpec]]"):
            continue
        else:
            out += f".{part}" if out else str(part)
    return out


def parse_rules_config(
    data: Mapping[str, Any] | None, *, path: str | None = None, prefix: str = "rules"
) -> RulesConfig:
    """Validate a ``rules:`` mapping; a problem raises ConfigError naming file and key path."""
    try:
        return RulesConfig.model_validate(data or {})
    except ValidationError as exc:
        problems: list[tuple[str, str]] = []
        for err in exc.errors():
            key = _key_path(tuple(err["loc"]), prefix)
            msg = str(err["msg"]).removeprefix("Value error, ")
            value = err.get("input")
            if err["type"] == "extra_forbidden":
                msg = "unknown key (check the spelling)"
            elif key.rsplit(".", 1)[-1] in BAND_LIMITS and err["type"] != "value_error":
                msg = "expected a number or {value: NUMBER, severity: low|medium|high|critical}"
            if value is not None and not isinstance(value, (dict, list)) and err["type"] != "missing":
                msg = f"{msg}, got {value!r}"
            if (key, msg) not in problems:
                problems.append((key, msg))
        where = f"{path}: " if path else ""
        lines = "; ".join(f"{k}: {m}" for k, m in problems)
        raise ConfigError(f"{where}{lines}", path=path, problems=problems) from exc
