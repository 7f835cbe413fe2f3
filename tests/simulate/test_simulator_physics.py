"""The electrode and process models against outside facts.

* pH recomputed from the simulated mV with the electrode's true calibration
  (offset and slope from the ground truth) through probeflow.chemistry equals the
  true pH seen by the glass within the noise.
* The first-order lag's step response follows 1 - exp(-t/tau) (analytic solution of
  dy/dt = (u - y)/tau, any control textbook, from memory).
* The random wander has the stationary spread and autocorrelation exp(-dt/tau) of an
  Ornstein-Uhlenbeck process (Gillespie, Phys. Rev. E 54, 2084 (1996)).
* The Pt100 resistance follows the IEC 60751 table (tests/data/rtd_iec60751_pt100.csv).
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np
import pytest
from sim_scenarios import make_scenario

from probeflow.chemistry import nernst_slope_mv, ph_from_potential
from probeflow.simulate.electrode import FirstOrderLag
from probeflow.simulate.generator import Simulation
from probeflow.simulate.process import OrnsteinUhlenbeck
from probeflow.simulate.rtd import pt100_ohms
from probeflow.simulate.scenario import DisturbanceSpec
from probeflow.simulate.seeds import named_generator

DATA = Path(__file__).parents[1] / "data"


def _run(scenario, seed: int = 5, hours: float = 2.0):
    sim = Simulation(scenario, seed, duration_ms=int(hours * 3_600_000))
    chunks = list(sim.chunks())
    return chunks


def test_ph_from_mv_with_true_calibration_equals_true_ph_within_noise(base_scenario) -> None:
    chunks = _run(base_scenario)
    for chunk in chunks:
        r, t = chunk.readings, chunk.truth()
        assert len(r) == len(t)            # no transport faults: one reading per sample
        for probe in ("w-1", "c-1"):
            code = r.probes.index(probe)
            m = r.code == code
            tm = t.code == code
            assert np.array_equal(r.ts[m], t.ts[tm])
            # the probe's temperature element lags, so use the true temperature
            ph = ph_from_potential(r.mv[m], t.temp_c[tm], t.offset_mv[tm], t.slope_pct[tm],
                                   t.zero_ph[tm])
            spec = base_scenario.probe(probe).electrode
            sigma_ph = spec.noise_mv / (0.01 * t.slope_pct[tm] * nernst_slope_mv(t.temp_c[tm]))
            err = (ph - t.seen_ph[tm]) / sigma_ph
            # mV is rounded to 0.01 mV (< 0.03 sigma here); 5 sigma over ~7200 samples
            assert np.max(np.abs(err)) < 5.0
            assert abs(np.mean(err)) < 0.1 and 0.85 < np.std(err) < 1.15


def test_drift_and_ageing_follow_their_rates(base_scenario) -> None:
    t = _run(base_scenario, hours=6)[0].truth()
    m = t.code == t.probes.index("w-1")
    hours = (t.ts[m] - t.ts[m][0]) / 3600
    # 24 mV/day = 1 mV/h; 30 %/month over a 30.4375-day month
    assert np.allclose(t.offset_mv[m], 3.0 + hours, atol=1e-9)
    assert np.allclose(t.slope_pct[m], 97.0 - 30.0 * hours / (24 * 30.4375), atol=1e-9)


def test_steady_stretch_reads_true_ph_and_neutral_shift_of_temperature() -> None:
    """A still stream (no wander): after the lag settles, recomputed pH = set point."""
    sc = make_scenario(streams={
        "warm": {"ph": {"set_point": 9.3}, "temperature": {"set_point": 60.0}},
        "cool": {"ph": {"set_point": 4.1}, "temperature": {"set_point": 8.0}},
    })
    chunk = _run(sc, hours=0.5)[0]
    r, t = chunk.readings, chunk.truth()
    for probe, set_point in (("w-1", 9.3), ("c-1", 4.1)):
        m, tm = r.code == r.probes.index(probe), t.code == t.probes.index(probe)
        ph = ph_from_potential(r.mv[m], t.temp_c[tm], t.offset_mv[tm], t.slope_pct[tm])
        noise = sc.probe(probe).electrode.noise_mv / nernst_slope_mv(t.temp_c[tm][0])
        assert abs(np.mean(ph) - set_point) < 5 * noise / math.sqrt(m.sum())


def test_lag_step_response_is_one_minus_exp() -> None:
    tau_ms, dt_ms = 8_000, 1_000
    lag = FirstOrderLag(dt_ms)
    u = np.r_[np.zeros(1), np.ones(60)]
    y = lag.run(u, float(tau_ms))
    t = np.arange(61) * dt_ms / 1000.0
    expected = np.where(t > 0, 1.0 - np.exp(-t / (tau_ms / 1000.0)), 0.0)
    assert np.allclose(y, expected, atol=1e-12)
    # chunking does not matter: two halves give the same output
    lag2 = FirstOrderLag(dt_ms)
    y2 = np.r_[lag2.run(u[:25], float(tau_ms)), lag2.run(u[25:], float(tau_ms))]
    assert np.array_equal(y, y2)


def test_lag_slow_reference_with_changing_time_constant() -> None:
    rng = np.random.default_rng(1)
    u = rng.standard_normal(500)
    tau = np.where(np.arange(500) < 200, 5_000.0, 60_000.0)
    y = FirstOrderLag(1_000).run(u, tau)
    ref = np.empty(500)
    prev = u[0]
    for i in range(500):       # slow, obvious reference
        a = math.exp(-1.0 / (tau[i] / 1000.0))
        prev = a * prev + (1 - a) * u[i]
        ref[i] = prev
    assert np.allclose(y, ref, rtol=0, atol=1e-12)


def test_ornstein_uhlenbeck_spread_and_autocorrelation() -> None:
    sigma, tau_s, dt_s = 0.2, 60.0, 1.0
    ou = OrnsteinUhlenbeck(DisturbanceSpec(sigma=sigma, tau=f"{tau_s:g}s"), 1000,
                           named_generator(3, "ou"))
    x = np.concatenate([ou.next(100_000) for _ in range(4)])
    n_eff = x.size * dt_s / (2 * tau_s)            # effective independent samples
    assert abs(np.std(x) - sigma) < 4 * sigma / math.sqrt(2 * n_eff)
    lag = 30
    rho = np.corrcoef(x[:-lag], x[lag:])[0, 1]
    assert abs(rho - math.exp(-lag * dt_s / tau_s)) < 0.03


def _pt100_table() -> list[tuple[float, float]]:
    with open(DATA / "rtd_iec60751_pt100.csv") as fh:
        rows = [r for r in csv.reader(fh) if r and not r[0].startswith("#")]
    return [(float(a), float(b)) for a, b in rows[1:]]


@pytest.mark.parametrize(("temp_c", "ohms"), _pt100_table())
def test_pt100_against_iec60751_table(temp_c: float, ohms: float) -> None:
    """IEC 60751:2008 Table 1 (values from memory, 0.01 Ω resolution)."""
    assert pt100_ohms(temp_c) == pytest.approx(ohms, abs=0.006)


def test_scalar_and_array() -> None:
    assert isinstance(pt100_ohms(25.0), float)
    assert pt100_ohms(np.array([0.0, 100.0])).shape == (2,)
