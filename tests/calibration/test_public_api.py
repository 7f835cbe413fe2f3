"""The public surface of probeflow.buffers, probeflow.calibration and probeflow.rtd is pinned."""

from __future__ import annotations

import importlib

import pytest

EXPECTED = {
    "probeflow.buffers": [
        "BUFFER_NAMES", "BUFFER_SETS", "DEFAULT_TOLERANCE_PH", "BufferMatch", "BufferSet",
        "BufferTable", "buffer_ph", "identify_buffer", "load_buffer_set", "recognise_buffer",
        "standard_buffer",
    ],
    "probeflow.calibration": [
        "MIN_PH_SPAN", "AcceptanceLimits", "Calibration", "CalibrationPoint", "Verdict",
        "design_matrix", "fit_calibration", "judge",
    ],
    "probeflow.rtd": [
        "CVD_A", "CVD_B", "CVD_C", "RTD_MAX_C", "RTD_MIN_C", "resistance_from_temp",
        "temp_from_resistance",
    ],
}


@pytest.mark.parametrize("module", sorted(EXPECTED))
def test_all_is_pinned_and_importable(module: str) -> None:
    """__all__ in isort order (constants, classes, functions), as ruff's RUF022 wants."""
    mod = importlib.import_module(module)
    assert mod.__all__ == EXPECTED[module]
    assert len(set(mod.__all__)) == len(mod.__all__)
    for name in mod.__all__:
        assert hasattr(mod, name), name


def test_iec_60751_coefficients() -> None:
    """IEC 60751:2008 clause 4.2 coefficients, as given in the standard."""
    from probeflow.rtd import CVD_A, CVD_B, CVD_C

    assert (CVD_A, CVD_B, CVD_C) == (3.9083e-3, -5.775e-7, -4.183e-12)
