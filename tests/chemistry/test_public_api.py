"""The public surface of probeflow.chemistry: names other parts and outside checks call."""

from __future__ import annotations

import probeflow.chemistry as chemistry

EXPECTED = [
    "ConvertedReadings",
    "IonConcentrations",
    "NeutralPhTable",
    "PKW_RELEASES",
    "ReadingConverter",
    "WaterState",
    "compensate_to_reference",
    "convert_readings",
    "davies_log_gamma",
    "debye_huckel_a",
    "ion_concentrations",
    "nernst_slope_mv",
    "neutral_ph",
    "neutral_ph_table",
    "ph_from_potential",
    "pkw",
    "pkw_from_density",
    "potential_from_ph",
    "relative_permittivity",
    "saturation_pressure_kpa",
    "temperature_in_range",
    "water_density",
    "water_state",
]


def test_all_is_pinned_and_sorted() -> None:
    assert chemistry.__all__ == EXPECTED
    assert chemistry.__all__ == sorted(chemistry.__all__)


def test_every_public_name_exists() -> None:
    missing = [name for name in chemistry.__all__ if not hasattr(chemistry, name)]
    assert missing == []
