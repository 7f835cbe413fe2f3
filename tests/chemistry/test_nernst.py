"""Nernst slope against values computed here from the CODATA 2018 constants."""

from __future__ import annotations

import math

import numpy as np
import pytest

from probeflow.chemistry import nernst_slope_mv

# CODATA 2018 recommended values (Tiesinga et al., Rev. Mod. Phys. 93, 025010 (2021)),
# typed here independently of probeflow/chemistry/constants.py:
R_CODATA_2018 = 8.314462618     # molar gas constant [J/(mol K)] (exact, truncated to 10 digits)
F_CODATA_2018 = 96485.33212     # Faraday constant [C/mol] (exact, truncated to 10 digits)


@pytest.mark.parametrize("temp_c", [0.0, 20.0, 25.0, 37.0, 50.0, 80.0, 100.0, 150.0])
def test_slope_from_codata(temp_c: float) -> None:
    expected = 1000.0 * math.log(10.0) * R_CODATA_2018 * (temp_c + 273.15) / F_CODATA_2018
    assert nernst_slope_mv(temp_c) == pytest.approx(expected, rel=1e-9)


def test_slope_at_25_c_is_59_159_mv() -> None:
    """59.159 mV per pH at 25 °C (IUPAC 2002 pH recommendations, Buck et al., table of k)."""
    assert round(nernst_slope_mv(25.0), 3) == 59.159


def test_array_matches_scalars() -> None:
    temps = np.array([0.0, 25.0, 60.0])
    arr = nernst_slope_mv(temps)
    assert [nernst_slope_mv(float(t)) for t in temps] == arr.tolist()
