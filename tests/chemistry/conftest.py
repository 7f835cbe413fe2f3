"""Helpers for the chemistry tests: reading the reference tables in tests/data/."""

from __future__ import annotations

import csv
from pathlib import Path

DATA_DIR = Path(__file__).resolve().parent.parent / "data"


def load_table(name: str) -> list[dict[str, float]]:
    """Rows of a tests/data CSV file as dicts of floats.

    The first line must be a ``# source: ...`` comment naming where the values
    come from; a file without it is refused, so no table enters unnamed.
    """
    path = DATA_DIR / name
    lines = path.read_text(encoding="utf-8").splitlines()
    if not lines or not lines[0].startswith("# source:"):
        raise ValueError(f"{path}: first line must name the source ('# source: ...')")
    body = [line for line in lines if line.strip() and not line.startswith("#")]
    return [{key: float(value) for key, value in row.items()} for row in csv.DictReader(body)]
