"""One probe: glass electrode, temperature element and their faults, chunk by chunk.

Electrode (common practice for glass electrodes; IUPAC 2002 recommendations,
Buck et al., Pure Appl. Chem. 74 (2002) 2169; see probeflow.chemistry.nernst):

    E(t) = E0(t) - s(t) k(T) (pH_seen(t) - pH0) + noise          [mV]
    E0(t) = offset_mv + offset_drift_mv_per_day * days(t)         (drifting offset)
    s(t) = (slope_pct - slope_loss_pct_per_month * months(t)) / 100   (ageing glass)
    k(T) = ln(10) R T / F                                         (nernst_slope_mv)

pH_seen is the true pH through the glass's first-order response lag,
dy/dt = (u - y) / tau, sampled exactly for an input that is constant over each
sample step: y[n] = a y[n-1] + (1 - a) u[n], a = exp(-dt / tau) (the standard
step-invariant discretisation of a first-order lag, e.g. Franklin, Powell and
Workman, Digital Control of Dynamic Systems, 3rd ed., ch. 6, from memory).  The
temperature element has its own lag, bias and noise; an RTD output is the
Pt100 resistance of the sensed temperature (probeflow.simulate.rtd).
A month is 30.4375 days (a mean Gregorian month, common practice, no source).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from itertools import pairwise

import numpy as np
from scipy.signal import lfilter

from probeflow.chemistry.constants import ZERO_CELSIUS_K
from probeflow.chemistry.nernst import NERNST_MV_PER_K
from probeflow.simulate.faults import FAULT_BITS, FaultWindow, hashed_uniform, windows_for
from probeflow.simulate.rtd import pt100_linear_celsius, pt100_ohms
from probeflow.simulate.scenario import (
    BrokenMembraneFault,
    CoatedFault,
    DuplicateFault,
    GarbledFault,
    OutOfOrderFault,
    ProbeSpec,
)
from probeflow.simulate.seeds import named_generator

__all__ = ["OPEN_ELEMENT_OHMS", "SHORTED_ELEMENT_OHMS", "FirstOrderLag", "ProbeChunk", "ProbeModel"]

MS_PER_DAY = 86_400_000.0
MS_PER_MONTH = 30.4375 * MS_PER_DAY
OPEN_ELEMENT_OHMS = 1.0e6      # an open element reads as a huge resistance (invented value)
SHORTED_ELEMENT_OHMS = 0.2     # a shorted element: leads only (invented value)
COATING_OPEN_ENDED_MS = MS_PER_DAY   # an open-ended coating loses its slope over one day


class FirstOrderLag:
    """Exact sampled first-order lag with a time constant that may change between
    stretches of samples (y[n] = a y[n-1] + (1 - a) u[n], a = exp(-dt/tau))."""

    def __init__(self, dt_ms: int) -> None:
        self.dt_ms = float(dt_ms)
        self.last: float | None = None

    def _coef(self, tau_ms: float) -> float:
        return 0.0 if tau_ms <= 0 else math.exp(-self.dt_ms / tau_ms)

    def run(self, u: np.ndarray, tau_ms: np.ndarray | float) -> np.ndarray:
        if u.shape[0] == 0:
            return u.copy()
        if self.last is None:
            self.last = float(u[0])          # start settled on the first input
        if np.ndim(tau_ms) == 0:
            cuts = [0, u.shape[0]]
            taus = [float(tau_ms)]  # type: ignore[arg-type]
        else:
            tau_arr = np.asarray(tau_ms)
            change = np.flatnonzero(tau_arr[1:] != tau_arr[:-1]) + 1
            cuts = [0, *change.tolist(), u.shape[0]]
            taus = [float(tau_arr[c]) for c in cuts[:-1]]
        out = np.empty_like(u)
        for (i, j), tau in zip(pairwise(cuts), taus):
            a = self._coef(tau)
            if a == 0.0:
                out[i:j] = u[i:j]
            else:
                out[i:j], _ = lfilter([1.0 - a], [1.0, -a], u[i:j], zi=[a * self.last])
            self.last = float(out[j - 1])
        return out


@dataclass(slots=True)
class ProbeChunk:
    """One probe's samples in one chunk: readings (after value faults) and truth,
    plus what the transport does to each sample."""

    t_ms: np.ndarray          # int64 ms after the start
    mv: np.ndarray
    temp_c: np.ndarray        # NaN: not reported
    ohms: np.ndarray          # NaN: not reported
    true_ph: np.ndarray
    seen_ph: np.ndarray       # true pH after the glass's response lag
    true_temp_c: np.ndarray
    offset_mv: np.ndarray
    slope_pct: np.ndarray
    fault_mask: np.ndarray    # uint16 bits of FAULT_BITS
    keep: np.ndarray | None   # bool: delivered at all (None: all)
    copies: np.ndarray | None  # int: 1 or 2 deliveries (None: all 1)
    delay_ms: np.ndarray | None  # int64 late delivery (None: none)
    garble: np.ndarray | None  # uint64: nonzero = the line's bytes get corrupted with this key


def _round(x: np.ndarray, decimals: int) -> np.ndarray:
    """Round in place to ``decimals`` places (what numpy.round does, without temporaries)."""
    scale = 10.0**decimals
    x *= scale
    np.rint(x, out=x)
    x /= scale
    return x


class ProbeModel:
    """Generates one probe's samples for consecutive chunks of the run."""

    def __init__(self, spec: ProbeSpec, seed: int, tick_ms: int) -> None:
        self.spec = spec
        self.stride = spec.interval // tick_ms
        self.dt_ms = spec.interval
        self.windows: list[FaultWindow] = windows_for(spec, seed)
        self.mv_rng = named_generator(seed, "probe", spec.id, "mv")
        self.temp_rng = named_generator(seed, "probe", spec.id, "temp")
        self.glass = FirstOrderLag(spec.interval)
        self.element = FirstOrderLag(spec.interval)
        self.held: tuple[float, float, float] | None = None   # last mv, temp_c, ohms (flatline)

    def sample_ticks(self, tick0: int, tick1: int) -> np.ndarray:
        """Tick numbers in [tick0, tick1) at which this probe samples."""
        first = -(-tick0 // self.stride) * self.stride
        return np.arange(first, tick1, self.stride, dtype=np.int64)

    def chunk(self, t_ms: np.ndarray, sample_no: np.ndarray, ph: np.ndarray,
              temp: np.ndarray, tf: np.ndarray | None = None,
              nernst_k: np.ndarray | None = None,
              element_temp: np.ndarray | None = None) -> ProbeChunk:
        """Samples at times ``t_ms`` (numbers ``sample_no``) given the true pH and temperature
        there.  ``tf`` (t_ms as float), ``nernst_k`` (k(T) [mV/pH]) and ``element_temp`` (the
        true temperature through this probe's element lag) may be passed in when several
        probes share them; the last then replaces this probe's own element lag."""
        spec = self.spec
        el = spec.electrode
        ts_ = spec.temperature_sensor
        n = t_ms.shape[0]
        if tf is None:
            tf = t_ms.astype(np.float64)

        tau = np.float64(el.response)
        slope: np.ndarray = el.slope_pct - (el.slope_loss_pct_per_month / MS_PER_MONTH) * tf
        offset: np.ndarray = el.offset_mv + (el.offset_drift_mv_per_day / MS_PER_DAY) * tf
        mask = np.zeros(n, dtype=np.uint16)
        tau_arr: np.ndarray | None = None
        for w in self.windows:
            s = w.span(t_ms)
            if s.start == s.stop:
                continue
            mask[s] |= FAULT_BITS[w.kind]
            if isinstance(w.spec, CoatedFault):
                if tau_arr is None:
                    tau_arr = np.full(n, tau)
                tau_arr[s] = w.spec.response
                length = w.end_ms - w.start_ms if w.end_ms is not None else COATING_OPEN_ENDED_MS
                progress = np.minimum((tf[s] - w.start_ms) / length, 1.0)
                slope[s] -= w.spec.slope_loss_pct * progress

        seen = self.glass.run(ph, tau if tau_arr is None else tau_arr)
        # E = E0 - s k(T) (pH_seen - pH0) + noise, in place to spare temporaries
        k = nernst_k if nernst_k is not None else NERNST_MV_PER_K * (temp + ZERO_CELSIUS_K)
        mv = seen - el.zero_ph
        mv *= k
        mv *= slope
        mv *= -0.01
        mv += offset
        noise: np.ndarray | None = None
        if el.noise_mv:
            noise = np.asarray(self.mv_rng.standard_normal(n))
            noise *= el.noise_mv
            mv += noise
        if element_temp is None:
            sensed = self.element.run(temp, float(ts_.response))
        else:
            sensed = element_temp.copy()
        if ts_.bias_c:
            sensed += ts_.bias_c
        if ts_.noise_c:
            t_noise = np.asarray(self.temp_rng.standard_normal(n))
            t_noise *= ts_.noise_c
            sensed += t_noise
        if ts_.output == "celsius":
            temp_c, ohms = _round(sensed, 2), np.full(n, np.nan)
        elif ts_.output == "ohms":
            temp_c, ohms = np.full(n, np.nan), _round(np.asarray(pt100_ohms(sensed)), 3)
        else:
            temp_c, ohms = np.full(n, np.nan), np.full(n, np.nan)

        keep = copies = delay = garble = None
        for w in self.windows:
            s = w.span(t_ms)
            if s.start == s.stop:
                continue
            kind = w.kind
            if isinstance(w.spec, BrokenMembraneFault):
                mv[s] = offset[s] + w.spec.residual_mv
                if noise is not None:
                    mv[s] += noise[s]
                slope[s] = 0.0     # the truth: the glass no longer responds
            elif kind == "temp_open":
                if ts_.output == "ohms":
                    ohms[s] = OPEN_ELEMENT_OHMS
                elif ts_.output == "celsius":
                    temp_c[s] = np.nan
            elif kind == "temp_short":
                if ts_.output == "ohms":
                    ohms[s] = SHORTED_ELEMENT_OHMS
                elif ts_.output == "celsius":
                    temp_c[s] = round(float(pt100_linear_celsius(SHORTED_ELEMENT_OHMS)), 2)
            elif kind == "dropout":
                if keep is None:
                    keep = np.ones(n, dtype=bool)
                keep[s] = False
            elif isinstance(w.spec, (GarbledFault, DuplicateFault, OutOfOrderFault)):
                u, words = hashed_uniform(w.key, sample_no[s])
                hit = u < w.spec.fraction
                if isinstance(w.spec, GarbledFault):
                    if garble is None:
                        garble = np.zeros(n, dtype=np.uint64)
                    garble[s] = np.where(hit, words, garble[s])
                elif isinstance(w.spec, DuplicateFault):
                    if copies is None:
                        copies = np.ones(n, dtype=np.int64)
                    copies[s] = np.where(hit, 2, copies[s])
                else:
                    if delay is None:
                        delay = np.zeros(n, dtype=np.int64)
                    delay[s] = np.where(hit, w.spec.delay, delay[s])
        mv = _round(mv, 2)
        # a frozen transmitter repeats its last output exactly (applied last, on rounded values)
        for w in self.windows:
            if w.kind != "flatline":
                continue
            s = w.span(t_ms)
            if s.start == s.stop:
                continue
            if s.start > 0:
                held = (float(mv[s.start - 1]), float(temp_c[s.start - 1]), float(ohms[s.start - 1]))
            elif self.held is not None:
                held = self.held
            else:
                held = (float(mv[0]), float(temp_c[0]), float(ohms[0]))
            mv[s], temp_c[s], ohms[s] = held
        if n:
            self.held = (float(mv[-1]), float(temp_c[-1]), float(ohms[-1]))
        return ProbeChunk(
            t_ms=t_ms, mv=mv, temp_c=temp_c, ohms=ohms, true_ph=ph, seen_ph=seen,
            true_temp_c=temp, offset_mv=offset, slope_pct=slope, fault_mask=mask,
            keep=keep, copies=copies, delay_ms=delay, garble=garble,
        )
