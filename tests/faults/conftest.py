"""Fixtures of the fault-injection suite: a service rig around the shared broker and database.

The ``mosquitto`` and ``victoria`` fixtures come from tests/conftest.py (real
servers on free loopback ports).  Every scenario runs ``probeflow run`` as a
subprocess and is marked slow.
"""

from __future__ import annotations

import sys
from collections.abc import Iterator
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).parent))

from fault_harness import ServiceProcess


@pytest.fixture
def services() -> Iterator[list[ServiceProcess]]:
    """Service processes a test starts; any still running are killed afterwards."""
    started: list[ServiceProcess] = []
    yield started
    for proc in started:
        proc.kill()
