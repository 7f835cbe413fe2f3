"""Fixtures for the reliability suite: config files and the CLI as a subprocess."""

from __future__ import annotations

import textwrap
from collections.abc import Callable
from pathlib import Path

import pytest

BASE_YAML = """\
site: test-works
probes:
  - id: tank-3
    calibration: {offset_mv: -3.1, slope_pct: 98.2, zero_ph: 7.0}
  - id: tank-4
    calibration: {offset_mv: 12.5, slope_pct: 94.0, zero_ph: 6.9}
    fixed_temp_c: 18.0
  - id: basin-1
"""


@pytest.fixture
def write_config(tmp_path: Path) -> Callable[..., Path]:
    """Write BASE_YAML plus dedented ``extra`` to tmp_path/``name``."""

    def write(extra: str = "", name: str = "probeflow.yaml", base: str = BASE_YAML) -> Path:
        path = tmp_path / name
        path.write_text(base + textwrap.dedent(extra), encoding="utf-8")
        return path

    return write
