"""The conversion stage: ReadingBatch -> ProcessedBatch, vectorised.

Per-probe parameters (calibration, pressure, fixed temperature, RTD R0,
maintenance) live in arrays indexed by probe; each batch maps its probe ids to
indexes once (one dict lookup per row) and gathers the parameters with numpy
fancy indexing, then calls the chemistry core once per distinct pressure.

Temperature used for a reading, in order: the reading's ``temp_c``; else its
``ohms`` through the probe's RTD (Pt100 unless ``rtd.r0`` says 1000); else the
probe's ``fixed_temp_c`` (manual temperature compensation); else none (NaN).

Quality flag, the last matching line wins:

* ``good``
* ``uncalibrated``     the probe has no calibration: pH is computed with the
                       ideal electrode (offset 0 mV, slope 100 %, zero point 7)
* ``temp_fault``       no temperature, or one outside the chemistry's range
                       (pN and the deviation are then NaN)
* ``mv_out_of_range``  |mV| above :data:`MV_LIMIT` or not finite
* ``maintenance``      the probe is in calibration or service

Calibrations are hot-swappable: :meth:`Converter.set_calibration` installs a
new one from a given time on; readings stamped earlier keep using the one that
was valid then.  Updates build new arrays and swap one reference, so the
converter thread never sees a half-updated state.
"""

from __future__ import annotations

import math
import threading
from collections.abc import Sequence
from dataclasses import dataclass, replace
from itertools import repeat

import numpy as np

from probeflow.batch import ProcessedBatch, Quality, ReadingBatch
from probeflow.config.models import ProbeConfig
from probeflow.errors import ConfigError

__all__ = ["IDEAL_CALIBRATION", "MV_LIMIT", "Converter"]

MV_LIMIT = 1000.0
"""Largest |E| a glass pH electrode can give [mV] (common practice, no source):
pH -2..16 at up to 150 °C stays within about ±800 mV including a large offset,
so a value beyond ±1000 mV means a broken cable, a shorted input or a
non-pH signal."""

IDEAL_CALIBRATION = (0.0, 100.0, 7.0)
"""offset_mv, slope_pct, zero_ph of an ideal electrode (used, flagged, when uncalibrated)."""

_HISTORY_KEEP = 16


@dataclass(frozen=True)
class _Segment:
    valid_from: float
    offset_mv: float
    slope_pct: float
    zero_ph: float
    calibrated: bool


@dataclass(frozen=True)
class _Params:
    index: dict[str, int]
    offset_mv: np.ndarray
    slope_pct: np.ndarray
    zero_ph: np.ndarray
    calibrated: np.ndarray
    maintenance: np.ndarray
    pressure_kpa: np.ndarray
    fixed_temp_c: np.ndarray
    rtd_r0: np.ndarray
    comp_ref_c: np.ndarray
    comp_coef: np.ndarray
    history: dict[int, tuple[_Segment, ...]]


class Converter:
    """Converts reading batches for a fixed set of probes."""

    def __init__(self, probes: Sequence[ProbeConfig], *, mv_limit: float = MV_LIMIT) -> None:
        if not probes:
            raise ConfigError("no probes are configured, so no reading can be converted")
        self.mv_limit = float(mv_limit)
        self.probe_ids = tuple(p.id for p in probes)
        self._lock = threading.Lock()
        n = len(probes)
        cal = [p.calibration for p in probes]
        self._compensate = any(p.temp_comp is not None for p in probes)
        segments: dict[int, tuple[_Segment, ...]] = {
            i: (_Segment(-math.inf, c.offset_mv, c.slope_pct, c.zero_ph, True),)
            if c is not None else (_Segment(-math.inf, *IDEAL_CALIBRATION, False),)
            for i, c in enumerate(cal)
        }
        self._params = _Params(
            index={pid: i for i, pid in enumerate(self.probe_ids)},
            offset_mv=np.array([s[-1].offset_mv for s in segments.values()]),
            slope_pct=np.array([s[-1].slope_pct for s in segments.values()]),
            zero_ph=np.array([s[-1].zero_ph for s in segments.values()]),
            calibrated=np.array([s[-1].calibrated for s in segments.values()], dtype=bool),
            maintenance=np.array([p.maintenance for p in probes], dtype=bool),
            pressure_kpa=np.array([p.pressure_kpa for p in probes], dtype=np.float64),
            fixed_temp_c=np.array([np.nan if p.fixed_temp_c is None else p.fixed_temp_c
                                   for p in probes], dtype=np.float64),
            rtd_r0=np.array([100.0 if p.rtd is None else float(p.rtd.r0) for p in probes]),
            comp_ref_c=np.array([np.nan if p.temp_comp is None else p.temp_comp.reference_c
                                 for p in probes]),
            comp_coef=np.array([np.nan if p.temp_comp is None else p.temp_comp.coefficient_ph_per_c
                                for p in probes]),
            history={},
        )
        self._segments = segments
        self._unique_pressure = float(self._params.pressure_kpa[0]) if np.all(
            self._params.pressure_kpa == self._params.pressure_kpa[0]) else None
        del n

    # -- updates (any thread) -------------------------------------------------
    def _position(self, probe_id: str) -> int:
        try:
            return self.probe_ids.index(probe_id)
        except ValueError:
            raise ConfigError(f'probe "{probe_id}" is not in the config') from None

    def set_calibration(self, probe_id: str, offset_mv: float, slope_pct: float,
                        zero_ph: float = 7.0, valid_from: float = -math.inf) -> None:
        """Use this calibration for readings of ``probe_id`` stamped at or after
        ``valid_from`` [epoch s]."""
        for name, value in (("offset_mv", offset_mv), ("slope_pct", slope_pct), ("zero_ph", zero_ph)):
            if not math.isfinite(value):
                raise ConfigError(f'calibration of probe "{probe_id}": {name} is not a finite number')
        if not slope_pct > 0:
            raise ConfigError(f'calibration of probe "{probe_id}": slope_pct must be positive')
        i = self._position(probe_id)
        with self._lock:
            old = self._segments[i]
            kept = tuple(s for s in old if s.valid_from < valid_from)
            seg = _Segment(float(valid_from), float(offset_mv), float(slope_pct), float(zero_ph), True)
            new = (kept + (seg,))[-_HISTORY_KEEP:]
            self._segments[i] = new
            self._swap(i, new)

    def set_maintenance(self, probe_id: str, on: bool) -> None:
        """Flag the probe's readings ``maintenance`` (in calibration or service) or not."""
        i = self._position(probe_id)
        with self._lock:
            flags = self._params.maintenance.copy()
            flags[i] = bool(on)
            self._params = replace(self._params, maintenance=flags)

    def calibrated(self, probe_id: str) -> bool:
        return bool(self._params.calibrated[self._position(probe_id)])

    def _swap(self, i: int, segments: tuple[_Segment, ...]) -> None:
        p = self._params
        latest = segments[-1]
        arrays = {k: getattr(p, k).copy() for k in ("offset_mv", "slope_pct", "zero_ph", "calibrated")}
        arrays["offset_mv"][i] = latest.offset_mv
        arrays["slope_pct"][i] = latest.slope_pct
        arrays["zero_ph"][i] = latest.zero_ph
        arrays["calibrated"][i] = latest.calibrated
        history = dict(p.history)
        if len(segments) > 1:
            history[i] = segments
        else:
            history.pop(i, None)
        self._params = replace(p, history=history, **arrays)

    # -- the hot path -----------------------------------------------------------
    def convert(self, batch: ReadingBatch) -> ProcessedBatch:
        """Convert one batch (the stage's only hot-path call)."""
        from probeflow.chemistry import convert_readings, temperature_in_range

        p = self._params  # one consistent snapshot
        n = len(batch)
        idx = np.fromiter(map(p.index.get, batch.probe.tolist(), repeat(-1, n)), dtype=np.intp,
                          count=n)
        unknown = idx < 0
        any_unknown = bool(unknown.any())
        safe = np.where(unknown, 0, idx) if any_unknown else idx
        offset = p.offset_mv[safe]
        slope = p.slope_pct[safe]
        zero = p.zero_ph[safe]
        calibrated = p.calibrated[safe]
        for probe_index, segments in p.history.items():
            rows = np.flatnonzero(idx == probe_index)
            if rows.size:
                starts = np.array([s.valid_from for s in segments])
                which = np.searchsorted(starts, batch.ts[rows], side="right") - 1
                which = np.maximum(which, 0)
                offset[rows] = np.array([s.offset_mv for s in segments])[which]
                slope[rows] = np.array([s.slope_pct for s in segments])[which]
                zero[rows] = np.array([s.zero_ph for s in segments])[which]
                calibrated[rows] = np.array([s.calibrated for s in segments])[which]
        if any_unknown:
            offset[unknown], slope[unknown], zero[unknown] = IDEAL_CALIBRATION
            calibrated[unknown] = False

        temp = batch.temp_c.copy()
        missing = np.isnan(temp)
        if missing.any():
            from_rtd = missing & ~np.isnan(batch.ohms)
            if from_rtd.any():
                from probeflow.rtd import temp_from_resistance

                temp[from_rtd] = temp_from_resistance(batch.ohms[from_rtd], p.rtd_r0[safe][from_rtd])
                missing = np.isnan(temp)
            if missing.any():
                temp[missing] = p.fixed_temp_c[safe][missing]

        mv = batch.mv
        if self._unique_pressure is not None:
            ph, pn, dev = convert_readings(mv, temp, offset, slope, zero, self._unique_pressure)
        else:
            ph, pn, dev = (np.empty(n), np.empty(n), np.empty(n))
            pressure = p.pressure_kpa[safe]
            for value in np.unique(pressure):
                rows = pressure == value
                r = convert_readings(mv[rows], temp[rows], offset[rows], slope[rows],
                                     zero[rows], float(value))
                ph[rows], pn[rows], dev[rows] = r
        ph = np.asarray(ph, dtype=np.float64)
        pn = np.asarray(pn, dtype=np.float64)
        dev = np.asarray(dev, dtype=np.float64)
        if self._compensate:
            # Process (solution) temperature compensation refers the reported pH to
            # the probe's reference temperature.  neutral_dev stays the deviation of
            # the liquid as it is, at its own temperature, from neutrality there.
            from probeflow.chemistry import compensate_to_reference

            coef = p.comp_coef[safe]
            comp = ~np.isnan(coef)
            if comp.any():
                ph[comp] = compensate_to_reference(ph[comp], temp[comp], coef[comp],
                                                   p.comp_ref_c[safe][comp])
        quality = np.zeros(n, dtype=np.uint8)
        quality[~calibrated] = Quality.UNCALIBRATED
        quality[~temperature_in_range(temp)] = Quality.TEMP_FAULT
        with np.errstate(invalid="ignore"):
            quality[~(np.abs(mv) <= self.mv_limit)] = Quality.MV_OUT_OF_RANGE
        quality[p.maintenance[safe]] = Quality.MAINTENANCE
        return ProcessedBatch(batch.probe, batch.ts, mv, temp, ph, pn, dev, quality,
                              on_committed=batch.on_committed)
