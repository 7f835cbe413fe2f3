"""Fixtures for the rules tests (helpers live in rules_support.py)."""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).parent))

from rules_support import batch_of


@pytest.fixture
def make_batch():
    return batch_of
