"""Published pH(S) tables of the reference buffers shipped with probeflow.

Sources
-------
IUPAC 2002: R. P. Buck et al., "Measurement of pH. Definition, standards, and
    procedures (IUPAC Recommendations 2002)", Pure Appl. Chem. 74(11), 2169-2200
    (2002), Table 2: values of pH(PS) of the primary standards, 0-95 °C.
    Used for tartrate, citrate, phthalate, both phosphates, borax, carbonate.
NBS 1962/1973: R. G. Bates, "Revised standard values for pH measurements from 0
    to 95 °C", J. Res. NBS 66A(2), 179 (1962), as reprinted in R. G. Bates,
    "Determination of pH", 2nd ed., Wiley 1973.  Used for potassium tetroxalate
    and calcium hydroxide, which the IUPAC 2002 document no longer lists as
    primary standards (it gives them only to two decimals as secondary standards).

FROM MEMORY: no open copy of either table could be reached while this module was
written, so every number below was transcribed from memory of the printed tables,
not checked against the page.  The 25 °C values of citrate (3.776), phthalate
(4.005), borax (9.180), carbonate (10.012) and calcium hydroxide (12.45) agree with
the abstracts of the original NBS papers (J. Res. NBS 36, 47 (1946); 56, 305
(1956); 73A, 37 (1969)).  Check the full rows against the printed tables before
relying on the third decimal.

Temperatures are in °C, pH(S) on the conventional (Bates-Guggenheim) scale,
molalities in mol/kg.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["PUBLISHED_TABLES", "PublishedTable"]

IUPAC_2002 = (
    "IUPAC 2002 (Buck et al., Pure Appl. Chem. 74 (2002) 2169, Table 2), "
    "transcribed from memory"
)
NBS_1973 = (
    "NBS (Bates, J. Res. NBS 66A (1962) 179; Determination of pH, 2nd ed., 1973), "
    "transcribed from memory"
)

_IUPAC_T = (0.0, 5.0, 10.0, 15.0, 20.0, 25.0, 30.0, 35.0, 37.0, 40.0, 50.0,
            60.0, 70.0, 80.0, 90.0, 95.0)


@dataclass(frozen=True)
class PublishedTable:
    """One buffer's row of a published table."""

    name: str
    description: str
    nominal_ph: float
    temps_c: tuple[float, ...]
    ph: tuple[float, ...]
    source: str


def _iupac(name: str, description: str, nominal: float, row: tuple[float | None, ...]) -> PublishedTable:
    pairs = [(t, v) for t, v in zip(_IUPAC_T, row, strict=True) if v is not None]
    return PublishedTable(
        name, description, nominal, tuple(t for t, _ in pairs), tuple(v for _, v in pairs), IUPAC_2002
    )


NT: None = None  # not tabulated
PUBLISHED_TABLES: tuple[PublishedTable, ...] = (
    PublishedTable(
        "tetroxalate_0.05",
        "potassium tetroxalate KH3(C2O4)2, 0.05 mol/kg",
        1.68,
        (0.0, 5.0, 10.0, 15.0, 20.0, 25.0, 30.0, 35.0, 38.0, 40.0, 45.0, 50.0, 55.0, 60.0,
         70.0, 80.0, 90.0, 95.0),
        (1.666, 1.668, 1.670, 1.672, 1.675, 1.679, 1.683, 1.688, 1.691, 1.694, 1.700, 1.707,
         1.715, 1.723, 1.743, 1.766, 1.792, 1.806),
        NBS_1973,
    ),
    _iupac("tartrate_saturated", "potassium hydrogen tartrate, saturated at 25 °C", 3.56,
           (NT, NT, NT, NT, NT, 3.557, 3.552, 3.549, 3.548, 3.547, 3.549, 3.560, 3.580, 3.609,
            3.650, 3.674)),
    _iupac("citrate_0.05", "potassium dihydrogen citrate, 0.05 mol/kg", 3.78,
           (3.863, 3.840, 3.820, 3.802, 3.788, 3.776, 3.766, 3.759, 3.756, 3.754, 3.749,
            NT, NT, NT, NT, NT)),
    _iupac("phthalate_0.05", "potassium hydrogen phthalate, 0.05 mol/kg", 4.01,
           (4.000, 3.998, 3.997, 3.998, 4.000, 4.005, 4.011, 4.018, 4.022, 4.027, 4.050,
            4.080, 4.112, 4.159, 4.204, 4.230)),
    _iupac("phosphate_1_1",
           "disodium hydrogen phosphate 0.025 + potassium dihydrogen phosphate 0.025 mol/kg",
           6.86,
           (6.984, 6.951, 6.923, 6.900, 6.881, 6.865, 6.853, 6.844, 6.841, 6.838, 6.833,
            6.836, 6.845, 6.859, 6.877, 6.886)),
    _iupac("phosphate_1_3.5",
           "disodium hydrogen phosphate 0.03043 + potassium dihydrogen phosphate 0.008695 mol/kg",
           7.41,
           (7.534, 7.500, 7.472, 7.448, 7.429, 7.413, 7.400, 7.389, 7.386, 7.380, 7.367,
            NT, NT, NT, NT, NT)),
    _iupac("borax_0.01", "disodium tetraborate (borax), 0.01 mol/kg", 9.18,
           (9.464, 9.395, 9.332, 9.276, 9.225, 9.180, 9.139, 9.102, 9.088, 9.068, 9.011,
            8.962, 8.921, 8.885, 8.850, 8.833)),
    _iupac("carbonate_0.025",
           "sodium hydrogen carbonate 0.025 + sodium carbonate 0.025 mol/kg", 10.01,
           (10.317, 10.245, 10.179, 10.118, 10.062, 10.012, 9.966, 9.926, 9.910, 9.889, 9.828,
            NT, NT, NT, NT, NT)),
    PublishedTable(
        "calcium_hydroxide_saturated",
        "calcium hydroxide, saturated at 25 °C",
        12.45,
        (0.0, 5.0, 10.0, 15.0, 20.0, 25.0, 30.0, 35.0, 38.0, 40.0, 45.0, 50.0, 55.0, 60.0),
        (13.423, 13.207, 13.003, 12.810, 12.627, 12.454, 12.289, 12.133, 12.043, 11.984,
         11.841, 11.705, 11.574, 11.449),
        NBS_1973,
    ),
)
