"""Cross-check of the buffer tables against a second, independent published table.

Reference: JIS Z 8802 (reconfirmed 2011), standard pH values versus temperature,
given to 2 decimals (tests/data/buffer_jis_z8802.csv).  The buffer tables in
probeflow.buffers were transcribed from memory of IUPAC 2002 Table 2, so this
check catches a memory slip larger than the JIS rounding.

Tolerances: phosphate 1:1, borax and carbonate within 0.010 (JIS rounding of
0.005 plus small differences between the two sources).  Phthalate within
0.021: the JIS phthalate column runs up to 0.02 above the IUPAC/NBS values at
50-60 °C (the NBS 1977 equation of Hetzer et al. gives 4.057 at 50 °C and 4.087
at 60 °C, between the two), so it bounds a gross error only.
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

import pytest

from probeflow.buffers import buffer_ph

DATA = Path(__file__).parent.parent / "data" / "buffer_jis_z8802.csv"
TOLERANCE = {"phthalate_0.05": 0.021, "phosphate_1_1": 0.010, "borax_0.01": 0.010, "carbonate_0.025": 0.010}


def _rows() -> list[tuple[str, float, float]]:
    lines = [ln for ln in DATA.read_text().splitlines() if not ln.startswith("#")]
    out = []
    for row in csv.DictReader(lines):
        t = float(row.pop("temp_c"))
        for name, value in row.items():
            if value:
                out.append((name, t, float(value)))
    return out


@pytest.mark.parametrize(("name", "temp_c", "jis_ph"), _rows())
def test_buffer_agrees_with_jis_table(name: str, temp_c: float, jis_ph: float) -> None:
    """JIS Z 8802 (2011) table value, 2 decimals; tolerance per buffer as in the module docstring."""
    ours = buffer_ph(name, temp_c)
    assert math.isfinite(ours)
    assert abs(ours - jis_ph) <= TOLERANCE[name] + 1e-12, (name, temp_c, ours, jis_ph)
