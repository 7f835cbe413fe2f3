"""Fixtures for config tests: temporary config files."""

from __future__ import annotations

import textwrap
from collections.abc import Callable
from pathlib import Path

import pytest


@pytest.fixture
def config_file(tmp_path: Path) -> Callable[..., Path]:
    """Write YAML text (dedented) to a file in a temporary folder and return its path."""

    def write(text: str, name: str = "probeflow.yaml") -> Path:
        path = tmp_path / name
        path.write_text(textwrap.dedent(text), encoding="utf-8")
        return path

    return write
