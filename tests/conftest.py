"""Shared fixtures: real mosquitto and victoria-metrics servers on free loopback ports."""

from __future__ import annotations

import os
import sys
from collections.abc import Iterator
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).parent))

from servers import Mosquitto, VictoriaMetrics


@pytest.fixture
def mosquitto(tmp_path: Path) -> Iterator[Mosquitto]:
    """A fresh mosquitto (persistence on) for one test; killed afterwards."""
    broker = Mosquitto(tmp_path / "mosquitto")
    broker.start()
    yield broker
    broker.kill()


@pytest.fixture
def victoria(tmp_path: Path) -> Iterator[VictoriaMetrics]:
    """A fresh victoria-metrics with its own data folder for one test."""
    server = VictoriaMetrics(tmp_path / "victoria")
    server.start()
    yield server
    server.kill()


@pytest.fixture
def cli() -> list[str]:
    """The probeflow command as argv for a subprocess."""
    return [sys.executable, "-m", "probeflow"]


@pytest.fixture
def cli_env() -> dict[str, str]:
    return {**os.environ, "PYTHONUNBUFFERED": "1"}
