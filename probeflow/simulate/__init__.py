"""The simulator: invented sites with physically realistic pH probe streams, faults included.

Pipeline of one run::

    Scenario (YAML, checked)  ->  Simulation (chunks of ticks)
        ProcessModel per stream: true pH and temperature
        ProbeModel per probe:    glass electrode, temperature element, faults
    ->  SimChunk.readings (delivery order)  ->  outputs: JSON Lines, Parquet, MQTT, pty, collector
    ->  SimChunk.truth()                    ->  ground truth file

Alerts raised on simulated data train operators and test the data path; the
simulator is no model of any real plant and alarms are not a safety system.
"""

from probeflow.simulate.generator import Readings, SimChunk, Simulation, Truth
from probeflow.simulate.run import RunSummary, file_metadata, run_simulation
from probeflow.simulate.scenario import FAULT_KINDS, Scenario, load_scenario, scenario_from_mapping

__all__ = [
    "FAULT_KINDS",
    "Readings",
    "RunSummary",
    "Scenario",
    "SimChunk",
    "Simulation",
    "Truth",
    "file_metadata",
    "load_scenario",
    "run_simulation",
    "scenario_from_mapping",
]
