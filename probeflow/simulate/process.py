"""The true process: a set point, slow random wander, regular swings and scheduled events.

Used for both the true pH and the true temperature [°C] of a stream.  Values are
produced chunk by chunk on the scenario's tick grid; the random wander keeps its
state between chunks, everything else is an exact function of time.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.signal import lfilter

from probeflow.simulate.scenario import (
    DisturbanceSpec,
    ExcursionEvent,
    ProcessSpec,
    StepEvent,
    UpsetEvent,
)

__all__ = ["OrnsteinUhlenbeck", "ProcessModel"]


class OrnsteinUhlenbeck:
    """Mean-reverting random wander sampled exactly on a fixed grid.

    x[n] = a x[n-1] + sigma sqrt(1 - a^2) z[n],  a = exp(-dt / tau),  z ~ N(0, 1)

    This is the exact update of the Ornstein-Uhlenbeck process (no discretisation
    error for any step dt): Gillespie, D. T., "Exact numerical simulation of the
    Ornstein-Uhlenbeck process and its integral", Phys. Rev. E 54, 2084 (1996).
    The first value is drawn from the stationary law N(0, sigma^2).  A chunk is
    one call of ``scipy.signal.lfilter`` with the carried state.
    """

    def __init__(self, spec: DisturbanceSpec, dt_ms: int, rng: np.random.Generator) -> None:
        self.sigma = float(spec.sigma)
        self.a = math.exp(-dt_ms / spec.tau)
        self.gain = self.sigma * math.sqrt(1.0 - self.a * self.a)
        self.rng = rng
        self.last: float | None = None

    def next(self, n: int) -> np.ndarray:
        z = self.rng.standard_normal(n)
        if n == 0:
            return z
        if self.last is None:
            # stationary start: the first value is sigma * z[0]
            zi = np.array([(self.sigma - self.gain) * z[0]])
        else:
            zi = np.array([self.a * self.last])
        x, _ = lfilter([self.gain], [1.0, -self.a], z, zi=zi)
        self.last = float(x[-1])
        return np.asarray(x)


def _span(t: np.ndarray, lo: float, hi: float) -> slice:
    """The slice of sorted ``t`` with lo <= t < hi."""
    i, j = np.searchsorted(t, (lo, hi), side="left")
    return slice(int(i), int(j))


class ProcessModel:
    """One process variable of a stream; ``values(t_ms)`` for consecutive chunks of ticks.

    level(t) = set_point + OU(t) + sum of waves + steps + upsets, then each excursion
    pulls the level towards its target with a trapezoid weight w(t) in [0, 1]:
    level <- level + w (to - level).
    """

    def __init__(self, spec: ProcessSpec, dt_ms: int, rng: np.random.Generator) -> None:
        self.spec = spec
        self.wander = None if spec.disturbance is None else OrnsteinUhlenbeck(spec.disturbance, dt_ms, rng)

    def values(self, t_ms: np.ndarray) -> np.ndarray:
        """Level at tick times ``t_ms`` [ms after the start], consecutive with the previous call."""
        spec = self.spec
        t = t_ms.astype(np.float64)
        out = np.full(t.shape, float(spec.set_point))
        if self.wander is not None:
            out += self.wander.next(t.shape[0])
        for w in spec.waves:
            out += w.amplitude * np.sin(t * (2.0 * math.pi / w.period) + math.radians(w.phase_deg))
        excursions: list[ExcursionEvent] = []
        for ev in spec.events:
            if isinstance(ev, StepEvent):
                end = math.inf if ev.duration is None else ev.at + ev.duration
                out[_span(t, ev.at, end)] += ev.delta
            elif isinstance(ev, UpsetEvent):
                top = ev.at + ev.ramp
                held = top + ev.hold
                if ev.recover is None:
                    s = _span(t, ev.at, math.inf)
                    out[s] += np.interp(t[s], [ev.at, top], [0.0, ev.delta])
                else:
                    s = _span(t, ev.at, held + ev.recover)
                    out[s] += np.interp(t[s], [ev.at, top, held, held + ev.recover],
                                        [0.0, ev.delta, ev.delta, 0.0])
            else:
                excursions.append(ev)
        for ex in excursions:
            top = ex.at + ex.rise
            held = top + ex.hold
            s = _span(t, ex.at, held + ex.fall)
            weight = np.interp(t[s], [ex.at, top, held, held + ex.fall], [0.0, 1.0, 1.0, 0.0])
            out[s] += weight * (ex.to - out[s])
        return out
