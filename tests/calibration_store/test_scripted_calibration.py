"""Scripted ``probeflow calibrate`` against a simulated electrode with a known offset and slope.

The simulated electrode follows E = E0 - s k(T) (pH - 7) with the buffer's pH(S) at
the measured temperature (probeflow.buffers.buffer_ph, IUPAC 2002 tables) and
Gaussian noise of 0.05 mV.  The worked example checks the fit against the Nernst
slope computed here from scipy.constants (CODATA), independently of probeflow.
"""

from __future__ import annotations

import math
import stat
from pathlib import Path

import numpy as np
import pytest
import scipy.constants as sc

from probeflow.buffers import buffer_ph
from probeflow.calibration.store import CalibrationStore
from probeflow.calibration.watch import CalibrationWatcher
from probeflow.chemistry import potential_from_ph

PROBE = "basin-ph-1"


def nernst_mv_reference(temp_c: float) -> float:
    """ln(10) R T / F [mV] from scipy.constants (CODATA), not from probeflow."""
    return 1000.0 * math.log(10.0) * sc.R * (temp_c + sc.zero_Celsius) / sc.physical_constants[
        "Faraday constant"][0]


def simulated_points(offset_mv: float, slope_pct: float, buffers: list[str], temps: list[float],
                     seed: int) -> list[str]:
    noise = np.random.default_rng(seed).normal(0.0, 0.05, len(buffers))
    out = []
    for name, t, e in zip(buffers, temps, noise, strict=True):
        mv = float(potential_from_ph(buffer_ph(name, t), t, offset_mv, slope_pct, 7.0)) + e
        out.append(f"{name},{mv:.4f},{t}")
    return out


def point_args(points: list[str]) -> list[str]:
    return [arg for p in points for arg in ("--point", p)]


CASES = [  # offset [mV], slope [%], buffers, temperatures [°C]: invented electrodes
    (4.0, 97.5, ["phthalate_0.05", "phosphate_1_1", "borax_0.01"], [5.0, 5.2, 4.9]),
    (-12.5, 93.0, ["phthalate_0.05", "phosphate_1_1", "borax_0.01"], [45.0, 44.6, 45.3]),
    (21.0, 101.5, ["tetroxalate_0.05", "phosphate_1_1", "carbonate_0.025"], [25.0, 31.0, 38.0]),
    (-3.0, 95.0, ["phthalate_0.05", "borax_0.01"], [15.0, 35.0]),
]


@pytest.mark.parametrize("offset, slope, buffers, temps", CASES)
def test_recovers_known_offset_and_slope(site, offset, slope, buffers, temps):
    points = simulated_points(offset, slope, buffers, temps, seed=int(abs(offset) * 10))
    args = ["calibrate", "--config", str(site.config), "--probe", PROBE, "--yes", "--json"]
    for p in points:
        args += ["--point", p]
    res = site.cli(*args)
    assert res.returncode == 0, res.stderr
    out = res.json()
    assert out["verdict"] == "accepted"
    assert abs(out["offset_mv"] - offset) < 0.2
    assert abs(out["slope_pct"] - slope) < 0.3
    assert out["zero_ph"] == 7.0
    assert len(out["residuals"]) == len(buffers)
    assert [p["buffer"] for p in out["points"]] == buffers
    for p, t, name in zip(out["points"], temps, buffers, strict=True):
        assert p["ph"] == pytest.approx(buffer_ph(name, t), abs=1e-12)
    with CalibrationStore(site.db) as store:
        rec = store.latest_accepted(PROBE)
    assert rec is not None and rec.id == out["id"]
    assert rec.offset_mv == pytest.approx(out["offset_mv"])
    assert [p.point.temp_c for p in rec.points] == temps


def test_worked_example_against_codata_slope(site):
    """Two buffers at 25 °C, slope and offset worked by hand with the CODATA Nernst slope.

    phthalate pH(S) 4.005 and borax 9.180 at 25 °C (IUPAC 2002 recommendations on pH
    measurement, Buck et al., Table 2; from memory).
    slope mV/pH = (171.2 + 126.0) / (9.180 - 4.005); E(7) = 171.2 - slope (7 - 4.005).
    """
    res = site.cli("calibrate", "--config", str(site.config), "--probe", PROBE,
                   "--point", "phthalate_0.05,171.2,25", "--point", "borax_0.01,-126.0,25",
                   "--yes", "--json", "--who", "R. Tamsin", "--serial", "EL-4471", "--note", "weekly")
    assert res.returncode == 0, res.stderr
    out = res.json()
    assert buffer_ph("phthalate_0.05", 25.0) == 4.005 and buffer_ph("borax_0.01", 25.0) == 9.180
    per_ph = (171.2 + 126.0) / (9.180 - 4.005)
    assert out["slope_pct"] == pytest.approx(100.0 * per_ph / nernst_mv_reference(25.0), abs=1e-6)
    assert out["offset_mv"] == pytest.approx(171.2 - per_ph * (7.0 - 4.005), abs=1e-6)
    with CalibrationStore(site.db) as store:
        rec = store.calibration(out["id"])
    assert (rec.who, rec.electrode_serial, rec.note, rec.kind) == ("R. Tamsin", "EL-4471", "weekly",
                                                                   "buffer")
    mode = stat.S_IMODE(site.db.stat().st_mode)
    assert mode == 0o600


def test_ph_numbers_and_points_file(site):
    """VALUE as a plain pH, and the same points from a YAML file, give the same result."""
    pts = ["4.0,177.478,25", "7.0,0.0,25", "10.0,-177.478,25"]  # ideal electrode at 25 °C
    args = ["calibrate", "--config", str(site.config), "--probe", PROBE, "--yes", "--json"]
    a = site.cli(*args, *point_args(pts))
    assert a.returncode == 0, a.stderr
    points_file = site.dir / "points.yaml"
    points_file.write_text("points:\n  - {ph: 4.0, mv: 177.478, temp_c: 25}\n"
                           "  - {ph: 7.0, mv: 0.0, temp_c: 25}\n  - {ph: 10.0, mv: -177.478, temp_c: 25}\n"
                           "who: A. Brenn\nserial: EL-1\n", encoding="utf-8")
    b = site.cli(*args, "--from-file", str(points_file))
    assert b.returncode == 0, b.stderr
    ja, jb = a.json(), b.json()
    assert ja["slope_pct"] == pytest.approx(100.0 * 59.159 / nernst_mv_reference(25.0), abs=1e-3)
    assert jb["slope_pct"] == pytest.approx(ja["slope_pct"], abs=1e-12)
    assert jb["offset_mv"] == pytest.approx(ja["offset_mv"], abs=1e-12)
    with CalibrationStore(site.db) as store:
        assert store.calibration(jb["id"]).who == "A. Brenn"


@pytest.mark.parametrize("temp_c", [5.0, 25.0, 45.0])
def test_auto_recognises_every_buffer_of_the_set(site, temp_c):
    """VALUE 'auto': each simulated reading is recognised as the buffer it was made in."""
    names = ["phthalate_0.05", "phosphate_1_1", "borax_0.01"]
    points = simulated_points(6.0, 96.0, names, [temp_c] * 3, seed=3)
    args = ["calibrate", "--config", str(site.config), "--probe", PROBE, "--yes", "--json",
            "--buffer-set", "primary_4_7_9"]
    for p in points:
        args += ["--point", "auto," + p.split(",", 1)[1]]
    res = site.cli(*args)
    assert res.returncode == 0, res.stderr
    assert [p["buffer"] for p in res.json()["points"]] == names


def test_auto_refuses_a_reading_that_fits_no_buffer(site):
    mv = float(potential_from_ph(5.6, 20.0, 0.0, 100.0, 7.0))  # halfway between the buffers
    res = site.cli("calibrate", "--config", str(site.config), "--probe", PROBE, "--yes",
                   "--buffer-set", "primary_4_7_9", "--point", f"auto,{mv},20",
                   "--point", "phosphate_1_1,0,20")
    assert res.returncode == 1
    assert "not recognised" in res.stderr
    with CalibrationStore(site.db) as store:
        assert store.history(PROBE) == []


def test_rejected_calibration_is_stored_and_not_watched(site):
    """Slope 80 %: stored as rejected, exit status 1, never returned by the watcher."""
    watcher = CalibrationWatcher(site.db)
    assert watcher.poll() == ([], {})
    points = simulated_points(1.0, 80.0, ["phthalate_0.05", "phosphate_1_1", "borax_0.01"],
                              [20.0, 20.0, 20.0], seed=11)
    res = site.cli("calibrate", "--config", str(site.config), "--probe", PROBE, "--yes", "--json",
                   *point_args(points))
    assert res.returncode == 1
    out = res.json()
    assert out["verdict"] == "rejected" and out["applied"] is False
    assert any("below the minimum" in r for r in out["reasons"])
    with CalibrationStore(site.db) as store:
        history = store.history(PROBE)
        assert [r.verdict for r in history] == ["rejected"]
        assert store.latest_accepted(PROBE) is None
    updates, _ = watcher.poll()
    assert updates == []

    good = simulated_points(1.0, 98.0, ["phthalate_0.05", "borax_0.01"], [20.0, 20.0], seed=12)
    res = site.cli("calibrate", "--config", str(site.config), "--probe", PROBE, "--yes", "--json",
                   *point_args(good))
    assert res.returncode == 0, res.stderr
    updates, _ = watcher.poll()
    assert [(u.id, u.probe) for u in updates] == [(res.json()["id"], PROBE)]
    assert updates[0].applies_from == pytest.approx(res.json()["applies_from"])
    assert updates[0].slope_pct == pytest.approx(res.json()["slope_pct"])
    watcher.close()


def test_without_yes_and_no_terminal_it_is_not_applied(site):
    points = simulated_points(0.0, 99.0, ["phthalate_0.05", "borax_0.01"], [25.0, 25.0], seed=5)
    res = site.cli("calibrate", "--config", str(site.config), "--probe", PROBE, "--json",
                   *point_args(points))
    assert res.returncode == 1
    assert res.json()["verdict"] == "rejected"
    assert res.json()["reasons"] == ["Not accepted by the technician."]


def test_one_point_keeps_the_previous_slope(site):
    first = simulated_points(5.0, 96.0, ["phthalate_0.05", "borax_0.01"], [25.0, 25.0], seed=8)
    a = site.cli("calibrate", "--config", str(site.config), "--probe", PROBE, "--yes", "--json",
                 *point_args(first))
    assert a.returncode == 0, a.stderr
    mv = float(potential_from_ph(6.865, 25.0, 9.0, a.json()["slope_pct"], 7.0))
    b = site.cli("calibrate", "--config", str(site.config), "--probe", PROBE, "--yes", "--json",
                 "--point", f"phosphate_1_1,{mv},25")
    assert b.returncode == 0, b.stderr
    assert b.json()["slope_pct"] == pytest.approx(a.json()["slope_pct"], abs=1e-12)
    assert b.json()["offset_mv"] == pytest.approx(9.0, abs=1e-9)


@pytest.mark.parametrize("bad, message", [
    ("phthalate_0.05,abc,25", "not a number"),
    ("no_such_buffer,10,25", "neither a pH number nor a known buffer"),
    ("phthalate_0.05,10", "VALUE,MV,TEMP_C"),
    ("phosphate_1_3.5,10,70", "covers 0 to 50"),
])
def test_bad_points_are_refused_with_a_clear_message(site, bad, message):
    res = site.cli("calibrate", "--config", str(site.config), "--probe", PROBE, "--yes",
                   "--point", bad, "--point", "borax_0.01,-120,25")
    assert res.returncode == 1
    assert message in res.stderr
    with CalibrationStore(site.db) as store:
        assert store.history(PROBE) == []


def test_unknown_probe_is_a_config_error(site):
    res = site.cli("calibrate", "--config", str(site.config), "--probe", "nope", "--yes",
                   "--point", "7,0,25")
    assert res.returncode == 2
    assert "nope" in res.stderr and "basin-ph-1" in res.stderr


def test_limits_file_per_probe(site):
    """A wider slope window for one probe lets a 88 % electrode pass."""
    limits = site.dir / "limits.yaml"
    limits.write_text("probes:\n  basin-ph-1: {slope_min_pct: 85}\n", encoding="utf-8")
    points = simulated_points(0.0, 88.0, ["phthalate_0.05", "borax_0.01"], [25.0, 25.0], seed=9)
    base = ["calibrate", "--config", str(site.config), "--probe", PROBE, "--yes", "--json",
            *point_args(points)]
    assert site.cli(*base).returncode == 1
    res = site.cli(*base, "--limits", str(limits))
    assert res.returncode == 0, res.stderr


def test_user_buffer_set_from_the_example_file(site):
    """The shipped example set: its own buffers by name and by recognition, tables interpolated."""
    example = str(Path(__file__).resolve().parents[2] / "configs" / "buffers-example.yaml")
    red = float(potential_from_ph(4.01, 25.0, 2.0, 97.0, 7.0))      # table value at 25 °C
    blue = float(potential_from_ph(10.11, 15.0, 2.0, 97.0, 7.0))    # table value at 15 °C
    res = site.cli("calibrate", "--config", str(site.config), "--probe", PROBE, "--yes", "--json",
                   "--buffer-set", example, "--point", f"harrowgate-red-4,{red},25",
                   "--point", f"auto,{blue},15")
    assert res.returncode == 0, res.stderr
    out = res.json()
    assert [(p["buffer"], p["ph"]) for p in out["points"]] == [("harrowgate-red-4", 4.01),
                                                               ("harrowgate-blue-10", 10.11)]
    assert out["offset_mv"] == pytest.approx(2.0, abs=1e-9)
    assert out["slope_pct"] == pytest.approx(97.0, abs=1e-9)
