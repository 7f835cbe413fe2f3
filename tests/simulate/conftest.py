"""Fixtures of the simulator tests (helpers live in sim_scenarios.py)."""

from __future__ import annotations

import pytest
from sim_scenarios import make_scenario

from probeflow.simulate.scenario import Scenario


@pytest.fixture
def base_scenario() -> Scenario:
    return make_scenario()
