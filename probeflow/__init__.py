"""probeflow: pH you can trust from electrode millivolts and temperature.

Pipeline: collectors -> conversion -> rules -> stores.  See README.md.

The public API is re-exported here and loaded on first use, so that
``import probeflow`` (and the command line) stays fast::

    >>> import probeflow
    >>> round(probeflow.neutral_ph(25.0), 3)
    6.997
"""

from __future__ import annotations

import importlib
from typing import Any

__version__ = "0.1.0"

_EXPORTS: dict[str, str] = {
    "BUFFER_NAMES": "probeflow.buffers",
    "BufferRangeError": "probeflow.errors",
    "Calibration": "probeflow.calibration",
    "CalibrationError": "probeflow.errors",
    "ChemistryError": "probeflow.errors",
    "CollectorError": "probeflow.errors",
    "ConfigError": "probeflow.errors",
    "ParseError": "probeflow.errors",
    "PluginError": "probeflow.errors",
    "ProbeflowError": "probeflow.errors",
    "StoreError": "probeflow.errors",
    "buffer_ph": "probeflow.buffers",
    "convert_readings": "probeflow.chemistry",
    "fit_calibration": "probeflow.calibration",
    "load_config": "probeflow.config",
    "nernst_slope_mv": "probeflow.chemistry",
    "neutral_ph": "probeflow.chemistry",
    "ph_from_potential": "probeflow.chemistry",
    "pkw": "probeflow.chemistry",
    "potential_from_ph": "probeflow.chemistry",
    "temp_from_resistance": "probeflow.rtd",
    "water_density": "probeflow.chemistry",
}

__all__ = sorted([*_EXPORTS, "__version__"])


def __getattr__(name: str) -> Any:
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'probeflow' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return __all__
