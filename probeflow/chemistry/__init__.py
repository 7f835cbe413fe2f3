"""pH chemistry core: Nernst slope, water density, Kw, neutral pH, conversion.

Every function accepts scalars or numpy arrays (broadcasting) and returns a
float for scalar input, an array otherwise.  Temperature in °C, potential in
mV, pressure in kPa absolute.
"""

from probeflow.chemistry.nernst import nernst_slope_mv, ph_from_potential, potential_from_ph

__all__ = ["nernst_slope_mv", "ph_from_potential", "potential_from_ph"]
