"""Fixtures for the collector tests (helpers live in collector_harness.py)."""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).parent))

from collector_harness import Sink


@pytest.fixture
def sink() -> Sink:
    return Sink()
