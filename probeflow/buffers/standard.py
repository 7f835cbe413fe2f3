"""The reference buffers shipped with probeflow, by name, and ready-made buffer sets.

Buffer names (pH(S) at 25 °C in brackets; sources in :mod:`probeflow.buffers.published`):

=============================  ==========================================  =========
name                           solution                                     range °C
=============================  ==========================================  =========
tetroxalate_0.05               potassium tetroxalate 0.05 mol/kg (1.679)    0-95
tartrate_saturated             potassium hydrogen tartrate sat. 25 °C       25-95
citrate_0.05                   potassium dihydrogen citrate 0.05 (3.776)    0-50
phthalate_0.05                 potassium hydrogen phthalate 0.05 (4.005)    0-95
phosphate_1_1                  Na2HPO4 0.025 + KH2PO4 0.025 (6.865)         0-95
phosphate_1_3.5                Na2HPO4 0.03043 + KH2PO4 0.008695 (7.413)    0-50
borax_0.01                     disodium tetraborate 0.01 (9.180)            0-95
carbonate_0.025                NaHCO3 0.025 + Na2CO3 0.025 (10.012)         0-50
calcium_hydroxide_saturated    Ca(OH)2 saturated at 25 °C (12.454)          0-60
=============================  ==========================================  =========
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from probeflow.buffers.published import PUBLISHED_TABLES
from probeflow.buffers.table import BufferTable
from probeflow.errors import ChemistryError

__all__ = ["BUFFER_NAMES", "BUFFER_SETS", "STANDARD_BUFFERS", "buffer_ph", "standard_buffer"]

STANDARD_BUFFERS: dict[str, BufferTable] = {
    p.name: BufferTable(p.name, p.nominal_ph, p.temps_c, p.ph, source=p.source, description=p.description)
    for p in PUBLISHED_TABLES
}

BUFFER_NAMES: tuple[str, ...] = tuple(STANDARD_BUFFERS)
"""Names of the shipped reference buffers, in rising pH order."""

BUFFER_SETS: dict[str, tuple[str, ...]] = {
    # the usual three-point set of primary standards
    "primary_4_7_9": ("phthalate_0.05", "phosphate_1_1", "borax_0.01"),
    # the widest set covering 0-50 °C, one buffer per pH region
    "primary_wide": (
        "tetroxalate_0.05",
        "phthalate_0.05",
        "phosphate_1_1",
        "borax_0.01",
        "carbonate_0.025",
        "calcium_hydroxide_saturated",
    ),
    "primary_acid_alkaline": ("citrate_0.05", "phosphate_1_3.5", "carbonate_0.025"),
}
"""Named sets for buffer recognition; members lie more than 1 pH apart."""


def standard_buffer(name: str) -> BufferTable:
    """The shipped buffer called name; ChemistryError listing the known names otherwise."""
    try:
        return STANDARD_BUFFERS[name]
    except KeyError:
        raise ChemistryError(
            f"Unknown buffer {name!r}. Known buffers: {', '.join(BUFFER_NAMES)}."
        ) from None


def buffer_ph(name: str, temp_c: ArrayLike) -> float | np.ndarray:
    """pH(S) [-] of the reference buffer name at temp_c [°C].

    Tabulated values are reproduced exactly; in between, the not-a-knot cubic
    spline through the published table.  Raises BufferRangeError outside the
    table, ChemistryError for an unknown name.  NaN temperature gives NaN.

    >>> buffer_ph("phosphate_1_1", 25.0)
    6.865
    >>> round(buffer_ph("borax_0.01", 22.5), 3)
    9.202
    """
    return standard_buffer(name).ph(temp_c)
