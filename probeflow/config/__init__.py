"""Config files: YAML with line numbers, typed models, plugin sections, secrets."""

from probeflow.config.load import (
    ALL_SECTIONS,
    LoadedConfig,
    PluginSection,
    load_config,
    load_config_text,
)
from probeflow.config.models import (
    ATMOSPHERIC_PRESSURE_KPA,
    CalibrationSpec,
    ProbeConfig,
    RtdSpec,
    ServiceSettings,
    TempCompSpec,
)

__all__ = [
    "ALL_SECTIONS",
    "ATMOSPHERIC_PRESSURE_KPA",
    "CalibrationSpec",
    "LoadedConfig",
    "PluginSection",
    "ProbeConfig",
    "RtdSpec",
    "ServiceSettings",
    "TempCompSpec",
    "load_config",
    "load_config_text",
]
