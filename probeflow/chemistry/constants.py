"""Physical constants, each with its unit and source.

Derived constants are computed from the primary ones, never retyped.
"""

from __future__ import annotations

import math

# CODATA 2018 (exact since the 2019 SI redefinition):
# Tiesinga et al., "CODATA recommended values of the fundamental physical
# constants: 2018", Rev. Mod. Phys. 93, 025010 (2021).
ELEMENTARY_CHARGE_C = 1.602176634e-19   # e [C], exact
AVOGADRO_PER_MOL = 6.02214076e23        # N_A [1/mol], exact
BOLTZMANN_J_PER_K = 1.380649e-23        # k [J/K], exact

GAS_CONSTANT_J_PER_MOL_K = AVOGADRO_PER_MOL * BOLTZMANN_J_PER_K   # R = N_A k [J/(mol K)]
FARADAY_C_PER_MOL = AVOGADRO_PER_MOL * ELEMENTARY_CHARGE_C        # F = N_A e [C/mol]

ZERO_CELSIUS_K = 273.15                 # [K], definition of the Celsius scale
LN10 = math.log(10.0)

STANDARD_PRESSURE_KPA = 101.325         # one standard atmosphere [kPa], definition

# CODATA 2018 (measured, not exact since 2019): vacuum electric permittivity
# eps0 [F/m], Tiesinga et al., Rev. Mod. Phys. 93, 025010 (2021).
VACUUM_PERMITTIVITY_F_PER_M = 8.8541878128e-12
