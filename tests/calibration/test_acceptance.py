"""judge() against AcceptanceLimits (defaults: common practice, no source)."""

from __future__ import annotations

import pytest

from probeflow.calibration import AcceptanceLimits, Calibration, fit_calibration, judge
from probeflow.chemistry import potential_from_ph
from probeflow.errors import ConfigError


def _cal(offset: float, slope: float, bump_mv: float = 0.0) -> Calibration:
    pts = []
    for i, (ph, t) in enumerate([(4.005, 25.0), (6.865, 25.0), (9.180, 25.0)]):
        mv = potential_from_ph(ph, t, offset, slope) + (bump_mv if i == 1 else 0.0)
        pts.append((ph, mv, t, ["phthalate_0.05", "phosphate_1_1", "borax_0.01"][i]))
    return fit_calibration(pts)


def test_defaults_are_the_documented_ones() -> None:
    lim = AcceptanceLimits()
    assert (lim.slope_min_pct, lim.slope_max_pct, lim.offset_max_abs_mv) == (90.0, 105.0, 30.0)


def test_good_electrode_accepted() -> None:
    v = judge(_cal(8.0, 96.0))
    assert v.accepted and v.status == "accepted" and v.reasons == ()


@pytest.mark.parametrize(
    ("offset", "slope", "words"),
    [
        (0.0, 87.0, "below the minimum 90 %"),
        (0.0, 106.0, "above the maximum 105 %"),
        (34.2, 98.0, "+34.2 mV is beyond ±30 mV"),
        (-31.0, 98.0, "-31.0 mV is beyond ±30 mV"),
    ],
)
def test_out_of_limits_rejected_with_reason(offset: float, slope: float, words: str) -> None:
    v = judge(_cal(offset, slope))
    assert not v.accepted and v.status == "rejected"
    assert any(words in r for r in v.reasons), v.reasons


def test_limits_boundaries_are_inclusive() -> None:
    assert judge(Calibration(30.0, 90.0)).accepted
    assert judge(Calibration(-30.0, 105.0)).accepted
    assert not judge(Calibration(30.01, 100.0)).accepted


def test_bad_middle_point_named() -> None:
    v = judge(_cal(0.0, 98.0, bump_mv=6.0))  # 6 mV off on the middle buffer ~ 0.07 pH
    assert not v.accepted
    assert any("Point 2 (phosphate_1_1)" in r for r in v.reasons), v.reasons


def test_site_limits() -> None:
    strict = AcceptanceLimits(slope_min_pct=95.0, slope_max_pct=102.0, offset_max_abs_mv=15.0)
    assert not judge(_cal(8.0, 94.0), strict).accepted
    assert judge(_cal(8.0, 94.0)).accepted


def test_one_point_note() -> None:
    v = judge(fit_calibration([(6.865, 10.0, 25.0)]))
    assert v.accepted and any("One-point" in n for n in v.notes)


@pytest.mark.parametrize(
    ("raw", "key"),
    [
        ({"slope_min_pct": 106.0}, "acceptance.slope_min_pct"),
        ({"offset_max_abs_mv": -1}, "acceptance.offset_max_abs_mv"),
        ({"offset_max_abs_mv": "30"}, "acceptance.offset_max_abs_mv"),
        ({"slope_minimum": 90}, "acceptance.slope_minimum"),
    ],
)
def test_bad_limits_name_file_and_key(raw: dict, key: str) -> None:
    with pytest.raises(ConfigError) as info:
        AcceptanceLimits.from_mapping(raw, path="site.yaml")
    assert info.value.path == "site.yaml" and "site.yaml" in str(info.value)
    assert any(k == key for k, _ in info.value.problems), info.value.problems
