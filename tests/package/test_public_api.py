"""The package's public surface: pinned, sorted and importable."""

from __future__ import annotations

import doctest

import probeflow

EXPECTED = [
    "BUFFER_NAMES", "BufferRangeError", "Calibration", "CalibrationError", "ChemistryError",
    "CollectorError", "ConfigError", "ParseError", "PluginError", "ProbeflowError", "StoreError",
    "__version__", "buffer_ph", "convert_readings", "fit_calibration", "load_config",
    "nernst_slope_mv", "neutral_ph", "ph_from_potential", "pkw", "potential_from_ph",
    "temp_from_resistance", "water_density",
]


def test_all_is_pinned_and_sorted() -> None:
    assert probeflow.__all__ == sorted(EXPECTED)


def test_every_public_name_resolves() -> None:
    for name in probeflow.__all__:
        assert getattr(probeflow, name) is not None, name


def test_every_error_derives_from_the_root() -> None:
    for name in probeflow.__all__:
        obj = getattr(probeflow, name)
        if isinstance(obj, type) and issubclass(obj, Exception):
            assert issubclass(obj, probeflow.ProbeflowError), name


def test_package_doctest_runs() -> None:
    result = doctest.testmod(probeflow)
    assert result.attempted >= 1 and result.failed == 0
