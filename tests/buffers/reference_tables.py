"""Readers for the buffer reference tables in tests/data (first line names the source)."""

from __future__ import annotations

import csv
from pathlib import Path

DATA = Path(__file__).resolve().parents[1] / "data"


def read_wide_table(filename: str) -> list[tuple[str, float, float]]:
    """(buffer, temp_c, ph) for every filled cell of a wide CSV with a '# source:' line."""
    path = DATA / filename
    with path.open(encoding="utf-8") as fh:
        first = fh.readline()
        assert first.startswith("# source:"), f"{path} must name its source on line 1"
        reader = csv.DictReader(fh)
        rows = []
        for row in reader:
            t = float(row.pop("temp_c"))
            for name, cell in row.items():
                if cell.strip():
                    rows.append((name, t, float(cell)))
    return rows


IUPAC_ROWS = read_wide_table("buffer_iupac2002_table2.csv")
NBS_ROWS = read_wide_table("buffer_nbs1973.csv")
ALL_ROWS = IUPAC_ROWS + NBS_ROWS
