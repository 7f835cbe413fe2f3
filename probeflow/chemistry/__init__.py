"""pH chemistry core: Nernst slope, water density, Kw, neutral pH, conversion.

Every function accepts scalars or numpy arrays (broadcasting) and returns a
float for scalar input, an array otherwise.  Temperature in °C, potential in
mV, pressure in kPa absolute.  Outside a formula's range the result is NaN
(never a clamped value) and a mask function says where.
"""

from probeflow.chemistry.activity import (
    IonConcentrations,
    davies_log_gamma,
    debye_huckel_a,
    ion_concentrations,
    relative_permittivity,
)
from probeflow.chemistry.conversion import (
    ConvertedReadings,
    ReadingConverter,
    compensate_to_reference,
    convert_readings,
    neutral_ph_table,
)
from probeflow.chemistry.if97 import (
    WaterState,
    saturation_pressure_kpa,
    water_density,
    water_state,
)
from probeflow.chemistry.ionisation import PKW_RELEASES, pkw, pkw_from_density
from probeflow.chemistry.nernst import nernst_slope_mv, ph_from_potential, potential_from_ph
from probeflow.chemistry.neutral import NeutralPhTable, neutral_ph, temperature_in_range

__all__ = [
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
