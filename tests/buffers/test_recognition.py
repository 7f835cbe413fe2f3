"""Buffer recognition: right for every buffer of a set at 5-45 °C, wrong pH refused.

Readings are generated with probeflow.chemistry.potential_from_ph from an invented
electrode (offset +8 mV, slope 96 %) and recognised through a nominal rough
calibration (0 mV, 100 %).  Buffer pH values come from the published tables
(see tests/data/buffer_*.csv).
"""

from __future__ import annotations

import pytest

from probeflow.buffers import (
    BUFFER_SETS,
    BufferSet,
    BufferTable,
    buffer_ph,
    identify_buffer,
    recognise_buffer,
)
from probeflow.calibration import Calibration
from probeflow.chemistry import potential_from_ph

ELECTRODE = {"offset_mv": 8.0, "slope_pct": 96.0}
ROUGH = (0.0, 100.0)
TEMPS = (5.0, 15.0, 25.0, 35.0, 45.0)


@pytest.mark.parametrize("set_name", sorted(BUFFER_SETS))
@pytest.mark.parametrize("temp_c", TEMPS)
def test_every_buffer_of_set_recognised(set_name: str, temp_c: float) -> None:
    members = BUFFER_SETS[set_name]
    for name in members:
        mv = potential_from_ph(buffer_ph(name, temp_c), temp_c, **ELECTRODE)
        assert recognise_buffer(mv, temp_c, ROUGH, members) == name


def test_tartrate_set_recognised_from_25c() -> None:
    members = ("tartrate_saturated", "phosphate_1_1", "borax_0.01")
    for temp_c in (25.0, 35.0, 45.0):
        for name in members:
            mv = potential_from_ph(buffer_ph(name, temp_c), temp_c, **ELECTRODE)
            assert recognise_buffer(mv, temp_c, ROUGH, members) == name
    # at 15 °C tartrate has no table value, so a reading at its pH matches nothing
    mv = potential_from_ph(3.56, 15.0, **ELECTRODE)
    match = identify_buffer(mv, 15.0, ROUGH, members)
    assert match.name is None and "more than" in match.reason


@pytest.mark.parametrize("wrong_ph", [5.5, 8.0, 11.3, 2.9])
def test_wrong_ph_refused(wrong_ph: float) -> None:
    members = BUFFER_SETS["primary_wide"]
    mv = potential_from_ph(wrong_ph, 25.0, **ELECTRODE)
    match = identify_buffer(mv, 25.0, ROUGH, members)
    assert match.name is None
    assert match.distance_ph is not None and match.distance_ph > 0.5


def test_accepts_calibration_object_and_buffer_set() -> None:
    cal = Calibration(offset_mv=8.0, slope_pct=96.0)
    bset = BufferSet.standard("three", BUFFER_SETS["primary_4_7_9"])
    mv = potential_from_ph(buffer_ph("borax_0.01", 20.0), 20.0, **ELECTRODE)
    match = identify_buffer(mv, 20.0, cal, bset)
    assert match.name == "borax_0.01"
    assert match.distance_ph == pytest.approx(0.0, abs=1e-9)  # exact calibration: exact pH


def test_ambiguous_candidates_refused() -> None:
    members = ("citrate_0.05", "phthalate_0.05")  # 0.23 pH apart at 25 °C
    mv = potential_from_ph(buffer_ph("citrate_0.05", 25.0), 25.0, **ELECTRODE)
    match = identify_buffer(mv, 25.0, ROUGH, members)
    assert match.name is None and "both" in match.reason
    # a tighter window separates them
    assert recognise_buffer(mv, 25.0, (8.0, 96.0), members, tolerance_ph=0.1) == "citrate_0.05"


def test_user_buffer_and_nan() -> None:
    own = BufferTable.from_pairs("lab-red-4", 4.01, [(10, 4.00), (30, 4.02)])
    mv = potential_from_ph(4.01, 20.0, **ELECTRODE)
    assert recognise_buffer(mv, 20.0, ROUGH, [own, "phosphate_1_1"]) == "lab-red-4"
    assert recognise_buffer(float("nan"), 20.0, ROUGH, [own]) is None
    assert recognise_buffer(mv, float("nan"), ROUGH, [own]) is None
