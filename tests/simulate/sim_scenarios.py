"""Small invented scenarios built in code for the simulator tests."""

from __future__ import annotations

import copy
from typing import Any

from probeflow.simulate.scenario import Scenario, scenario_from_mapping

BASE: dict[str, Any] = {
    "site": "Test Works (invented)",
    "site_id": "testworks",
    "start": "2026-03-02T06:00:00Z",
    "streams": {
        "warm": {
            "ph": {"set_point": 7.2, "disturbance": {"sigma": 0.1, "tau": "10min"}},
            "temperature": {"set_point": 45.0, "disturbance": {"sigma": 1.0, "tau": "20min"}},
        },
        "cool": {
            "ph": {"set_point": 6.8},
            "temperature": {"set_point": 12.0},
        },
    },
    "probes": [
        {"id": "w-1", "stream": "warm", "electrode": {"offset_mv": 3.0, "slope_pct": 97.0,
                                                       "offset_drift_mv_per_day": 24.0,
                                                       "slope_loss_pct_per_month": 30.0}},
        {"id": "w-2", "stream": "warm", "interval": "2s",
         "temperature_sensor": {"output": "ohms"}},
        {"id": "c-1", "stream": "cool", "temperature_sensor": {"output": "none"}},
    ],
}


def make_scenario(**changes: Any) -> Scenario:
    """The base scenario with top-level keys replaced (deep-copied)."""
    data = copy.deepcopy(BASE)
    data.update(copy.deepcopy(changes))
    return scenario_from_mapping(data, "<test>")


def with_faults(probe_id: str, faults: list[dict[str, Any]], **changes: Any) -> Scenario:
    data = copy.deepcopy(BASE)
    data.update(copy.deepcopy(changes))
    for p in data["probes"]:
        if p["id"] == probe_id:
            p["faults"] = faults
    return scenario_from_mapping(data, "<test>")

