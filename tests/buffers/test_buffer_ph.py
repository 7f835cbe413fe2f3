"""buffer_ph against the published tables (tests/data/buffer_*.csv, sources on line 1).

Both tables were transcribed FROM MEMORY (see the CSV headers); the module's own
copy (probeflow/buffers/published.py) was typed separately, so these tests at least
catch a typing slip in either copy.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.interpolate import CubicSpline

from probeflow.buffers import BUFFER_NAMES, buffer_ph, standard_buffer
from probeflow.errors import BufferRangeError, ChemistryError

from .reference_tables import ALL_ROWS, IUPAC_ROWS


def _row(name: str) -> tuple[np.ndarray, np.ndarray]:
    pairs = sorted((t, v) for n, t, v in ALL_ROWS if n == name)
    return np.array([p[0] for p in pairs]), np.array([p[1] for p in pairs])


def test_buffer_names_are_exactly_the_tabulated_buffers() -> None:
    assert set(BUFFER_NAMES) == {n for n, _, _ in ALL_ROWS}
    assert len(BUFFER_NAMES) == 9


@pytest.mark.parametrize(("name", "temp_c", "expected"), ALL_ROWS)
def test_every_tabulated_point(name: str, temp_c: float, expected: float) -> None:
    """IUPAC 2002 Table 2 / NBS 1973 values (CSV in tests/data), exact to the table's 3 decimals."""
    assert round(buffer_ph(name, temp_c), 3) == expected
    assert buffer_ph(name, temp_c) == pytest.approx(expected, abs=1e-12)


@pytest.mark.parametrize(
    ("name", "expected"),
    [
        # independent of the transcribed tables: values quoted in the abstracts of the NBS papers
        ("citrate_0.05", 3.776),     # Bates & Pinching et al., J. Res. NBS 73A, 37 (1969), abstract
        ("carbonate_0.025", 10.012),  # J. Res. NBS 73A, 37 (1969), abstract
        ("borax_0.01", 9.180),       # J. Res. NBS 73A, 37 (1969), abstract ("upper limit 9.180")
        ("phthalate_0.05", 4.005),   # Hamer, Pinching & Acree, J. Res. NBS 36, 47 (1946), abstract
    ],
)
def test_25c_values_against_nbs_abstracts(name: str, expected: float) -> None:
    assert buffer_ph(name, 25.0) == pytest.approx(expected, abs=5e-4)


def test_calcium_hydroxide_25c_against_nbs_abstract() -> None:
    # Bates, Bower & Smith, J. Res. NBS 56, 305 (1956), abstract: "pH of 12.45 at 25 °C"
    assert buffer_ph("calcium_hydroxide_saturated", 25.0) == pytest.approx(12.45, abs=0.005)
    # same abstract: temperature coefficient about -0.033 pH per °C
    slope = (buffer_ph("calcium_hydroxide_saturated", 26.0) - buffer_ph("calcium_hydroxide_saturated", 24.0)) / 2
    assert slope == pytest.approx(-0.033, abs=0.002)


@pytest.mark.parametrize("name", BUFFER_NAMES)
def test_interpolation_equals_reference_cubic_spline(name: str) -> None:
    """Between table points: the not-a-knot cubic spline of scipy (reference library) to 1e-12."""
    t, v = _row(name)
    q = np.linspace(t[0], t[-1], 997)
    assert np.max(np.abs(buffer_ph(name, q) - CubicSpline(t, v)(q))) < 1e-12


def _inner_points(name: str) -> list[tuple[str, int]]:
    t, _ = _row(name)
    return [(name, i) for i in range(2, t.size - 2)]


@pytest.mark.parametrize(
    ("name", "index"),
    [
        pytest.param(n, i, marks=pytest.mark.xfail(
            strict=True,
            reason="phthalate row above 50 °C as transcribed from memory is not smooth to "
                   "0.002 pH (70-90 °C values suspect); check against the printed table"))
        if n == "phthalate_0.05" and _row(n)[0][i] >= 60 else pytest.param(n, i)
        for name in BUFFER_NAMES for n, i in _inner_points(name)
    ],
)
def test_leave_one_out_interpolation_within_0_002(name: str, index: int) -> None:
    """Drop one tabulated value, interpolate it from the others: within 0.002 pH of the table.

    Checks that the interpolation between table points follows the published values' own
    smooth curve (needs two neighbours on each side; ends are not interpolated).
    """
    t, v = _row(name)
    keep = np.ones(t.size, dtype=bool)
    keep[index] = False
    predicted = CubicSpline(t[keep], v[keep])(t[index])
    assert abs(predicted - v[index]) <= 0.002


@pytest.mark.parametrize("name", BUFFER_NAMES)
def test_midpoints_within_0_002_of_local_cubic_through_neighbours(name: str) -> None:
    """Midway between table points, within 0.002 of the cubic through the 4 nearest table values."""
    t, v = _row(name)
    for i in range(1, t.size - 2):
        mid = 0.5 * (t[i] + t[i + 1])
        local = np.polyval(np.polyfit(t[i - 1:i + 3], v[i - 1:i + 3], 3), mid)
        assert abs(buffer_ph(name, mid) - local) <= 0.002, (name, mid)


@pytest.mark.parametrize("name", BUFFER_NAMES)
def test_refuses_temperatures_outside_table(name: str) -> None:
    lo, hi = standard_buffer(name).range_c
    for bad in (lo - 0.5, hi + 0.5):
        with pytest.raises(BufferRangeError) as info:
            buffer_ph(name, bad)
        text = str(info.value)
        assert name in text and f"{bad:g}" in text and f"{lo:g} to {hi:g}" in text
    with pytest.raises(BufferRangeError):
        buffer_ph(name, np.array([25.0 if lo <= 25 <= hi else lo, hi + 1.0]))
    assert isinstance(buffer_ph(name, lo), float) and isinstance(buffer_ph(name, hi), float)


def test_tartrate_starts_at_25c() -> None:
    """IUPAC 2002 Table 2: saturated tartrate tabulated from 25 °C only."""
    with pytest.raises(BufferRangeError):
        buffer_ph("tartrate_saturated", 20.0)


def test_scalar_and_array_agree_and_nan_passes_through() -> None:
    temps = np.array([[5.0, 12.5], [37.0, 49.9]])
    arr = buffer_ph("phosphate_1_1", temps)
    assert isinstance(arr, np.ndarray) and arr.shape == (2, 2)
    for idx in np.ndindex(temps.shape):
        assert arr[idx] == buffer_ph("phosphate_1_1", float(temps[idx]))
    assert isinstance(buffer_ph("phosphate_1_1", 25.0), float)
    assert math.isnan(buffer_ph("phosphate_1_1", float("nan")))
    mixed = buffer_ph("phosphate_1_1", np.array([np.nan, 25.0]))
    assert np.isnan(mixed[0]) and mixed[1] == pytest.approx(6.865, abs=1e-12)


def test_unknown_buffer_names_the_known_ones() -> None:
    with pytest.raises(ChemistryError, match="phthalate_0.05"):
        buffer_ph("phthalate", 25.0)


def test_iupac_rows_cover_all_seven_primary_standards() -> None:
    assert {n for n, _, _ in IUPAC_ROWS} == {
        "tartrate_saturated", "citrate_0.05", "phthalate_0.05", "phosphate_1_1",
        "phosphate_1_3.5", "borax_0.01", "carbonate_0.025",
    }


def test_phthalate_row_against_nbs_1977_equation() -> None:
    """Guard against gross slips in the phthalate row (an independent NBS source).

    Hetzer, Durst, Robinson & Bates, "Standard pH values for the potassium hydrogen
    phthalate reference buffer solution from 0 to 60 °C", J. Res. NBS 81A, 5 (1977),
    abstract: pH(S) = 2073.44/T - 13.3270 + 0.045199 T - 3.4846e-5 T^2 (T in K).
    This equation and the IUPAC 2002 row differ systematically (by 0.010 pH at 0 °C,
    0.001 at 25 °C), so the tolerance here is 0.011 pH: it catches a wrong digit, not a
    wrong third decimal.
    """
    temps = np.arange(0.0, 60.1, 2.5)
    kelvin = temps + 273.15
    nbs_1977 = 2073.44 / kelvin - 13.3270 + 0.045199 * kelvin - 3.4846e-5 * kelvin**2
    diff = buffer_ph("phthalate_0.05", temps) - nbs_1977
    assert np.max(np.abs(diff)) <= 0.011
    assert abs(buffer_ph("phthalate_0.05", 25.0) - nbs_1977[temps == 25.0][0]) <= 0.001
