"""The vectorised generator: whole columns per stream and probe, one chunk of ticks at a time.

A run is cut into chunks of a fixed number of ticks (chosen from the scenario
alone, never from the speed or the output), so the same seed and arguments give
the same readings whatever is done with them.  Each chunk yields

* ``readings``: what the probes deliver, in delivery order (drop-outs removed,
  duplicates repeated, late readings moved behind newer ones), with a ``garble``
  key for lines that text outputs corrupt;
* ``truth()``: per generated sample the true pH, the pH the glass sees after its
  lag, the true temperature, the electrode's offset and slope, and the faults.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from probeflow.chemistry.constants import ZERO_CELSIUS_K
from probeflow.chemistry.nernst import NERNST_MV_PER_K
from probeflow.simulate.electrode import FirstOrderLag, ProbeChunk, ProbeModel
from probeflow.simulate.process import ProcessModel
from probeflow.simulate.scenario import Scenario
from probeflow.simulate.seeds import named_generator

__all__ = ["Readings", "SimChunk", "Simulation", "Truth"]

TARGET_ROWS_PER_CHUNK = 1 << 19


@dataclass(frozen=True, slots=True)
class Readings:
    """Delivered readings as columns; ``code`` indexes ``probes``."""

    probes: tuple[str, ...]
    code: np.ndarray       # int32
    ts: np.ndarray         # float64 epoch s
    mv: np.ndarray
    temp_c: np.ndarray     # NaN: not reported
    ohms: np.ndarray       # NaN: not reported
    garble: np.ndarray | None   # uint64, nonzero: corrupt this line on text outputs

    def __len__(self) -> int:
        return int(self.ts.shape[0])

    def probe_ids(self) -> np.ndarray:
        """The probe column as an object array of ids."""
        return np.asarray(self.probes, dtype=object)[self.code]

    def select(self, index: slice | np.ndarray) -> Readings:
        return Readings(self.probes, self.code[index], self.ts[index], self.mv[index],
                        self.temp_c[index], self.ohms[index],
                        None if self.garble is None else self.garble[index])


@dataclass(frozen=True, slots=True)
class Truth:
    """Ground truth per generated sample (delivered or not), in time order."""

    probes: tuple[str, ...]
    code: np.ndarray
    ts: np.ndarray
    ph: np.ndarray           # true process pH
    seen_ph: np.ndarray      # true pH after the electrode's response lag
    temp_c: np.ndarray       # true process temperature [°C]
    offset_mv: np.ndarray    # electrode offset E0 at that time [mV]
    slope_pct: np.ndarray    # electrode slope at that time [% of Nernst]; 0 with a broken membrane
    zero_ph: np.ndarray
    fault_mask: np.ndarray   # uint16 bits of probeflow.simulate.faults.FAULT_BITS

    def __len__(self) -> int:
        return int(self.ts.shape[0])


_TRUTH_FIELDS = ("true_ph", "seen_ph", "true_temp_c", "offset_mv", "slope_pct", "fault_mask")


class SimChunk:
    """One chunk of the run: delivered readings and (built on demand) the truth."""

    def __init__(self, sim: Simulation, parts: list[ProbeChunk], end_ts: float) -> None:
        self._sim = sim
        self._parts = parts
        self.end_ts = end_ts
        self.generated = sum(p.t_ms.shape[0] for p in parts)

    def _merge(self, column: str) -> np.ndarray:
        cols = [getattr(p, column) for p in self._parts]
        if self._same_grid:
            return np.stack(cols, axis=1).ravel()
        return np.concatenate(cols)[self._order]

    @cached_property
    def _same_grid(self) -> bool:
        first = self._parts[0].t_ms
        return all(p.t_ms.shape == first.shape for p in self._parts) and all(
            p.t_ms is first or np.array_equal(p.t_ms, first) for p in self._parts[1:]
        )

    @cached_property
    def _order(self) -> np.ndarray | None:
        if self._same_grid:
            return None
        return np.argsort(np.concatenate([p.t_ms for p in self._parts]), kind="stable")

    @cached_property
    def _codes(self) -> np.ndarray:
        if self._same_grid:
            n = self._parts[0].t_ms.shape[0]
            return np.tile(np.arange(len(self._parts), dtype=np.int32), n)
        codes = [np.full(p.t_ms.shape[0], i, dtype=np.int32) for i, p in enumerate(self._parts)]
        return np.concatenate(codes)[self._order]

    def _timestamps(self) -> np.ndarray:
        """Epoch seconds of every sample in merged order: (start_ms + t_ms) / 1000, exact."""
        start_ms = self._sim.start_ms
        if self._same_grid:
            grid = (self._parts[0].t_ms + start_ms) / 1000.0
            return np.repeat(grid, len(self._parts))
        return (self._merge("t_ms") + start_ms) / 1000.0

    def _optional(self, column: str, fill: object, dtype: type) -> np.ndarray | None:
        if all(getattr(p, column) is None for p in self._parts):
            return None
        cols = []
        for p in self._parts:
            col = getattr(p, column)
            cols.append(np.full(p.t_ms.shape[0], fill, dtype=dtype) if col is None else col)
        if self._same_grid:
            return np.stack(cols, axis=1).ravel()
        return np.concatenate(cols)[self._order]

    @cached_property
    def readings(self) -> Readings:
        sim = self._sim
        code = self._codes
        ts = self._timestamps()
        mv, temp_c, ohms = self._merge("mv"), self._merge("temp_c"), self._merge("ohms")
        garble = self._optional("garble", 0, np.uint64)
        keep = self._optional("keep", True, bool)
        copies = self._optional("copies", 1, np.int64)
        delay = self._optional("delay_ms", 0, np.int64)
        cols = [code, ts, mv, temp_c, ohms] + ([garble] if garble is not None else [])
        if delay is not None:
            cols.append(delay / 1000.0)
        if keep is not None:
            cols = [c[keep] for c in cols]
        if copies is not None:
            rep = copies if keep is None else copies[keep]
            cols = [np.repeat(c, rep) for c in cols]
        if delay is not None:
            order = np.argsort(cols[1] + cols[-1], kind="stable")
            cols = [c[order] for c in cols[:-1]]
        code, ts, mv, temp_c, ohms = cols[:5]
        return Readings(sim.probe_ids, code, ts, mv, temp_c, ohms,
                        cols[5] if garble is not None else None)

    def truth(self) -> Truth:
        sim = self._sim
        cols = {name: self._merge(name) for name in _TRUTH_FIELDS}
        code = self._codes
        zero = np.asarray([p.electrode.zero_ph for p in sim.scenario.probes])[code]
        ts = self._timestamps()
        return Truth(sim.probe_ids, code, ts, cols["true_ph"], cols["seen_ph"], cols["true_temp_c"],
                     cols["offset_mv"], cols["slope_pct"], zero, cols["fault_mask"])


class Simulation:
    """A seeded run of a scenario from ``start`` (epoch s) for ``duration_ms`` (None: endless)."""

    def __init__(self, scenario: Scenario, seed: int, *, start: float | None = None,
                 duration_ms: int | None = None, chunk_ticks: int | None = None) -> None:
        self.scenario = scenario
        self.seed = int(seed)
        self.start = float(scenario.start if start is None else start)
        self.start_ms = round(self.start * 1000)
        self.tick_ms = scenario.tick_ms
        self.duration_ms = scenario.duration if duration_ms is None else duration_ms
        self.probe_ids = tuple(p.id for p in scenario.probes)
        self.probes = [ProbeModel(p, self.seed, self.tick_ms) for p in scenario.probes]
        # temperature elements with the same lag on the same stream and grid see the same
        # lagged temperature: filter it once per chunk for all of them
        self._element_lags = {
            (p.stream, p.temperature_sensor.response, m.stride): FirstOrderLag(p.interval)
            for p, m in zip(scenario.probes, self.probes)
        }
        used = {p.stream for p in scenario.probes}
        self.ph_models = {
            name: ProcessModel(st.ph, self.tick_ms, named_generator(self.seed, "stream", name, "ph"))
            for name, st in scenario.streams.items() if name in used
        }
        self.temp_models = {
            name: ProcessModel(st.temperature, self.tick_ms,
                               named_generator(self.seed, "stream", name, "temperature"))
            for name, st in scenario.streams.items() if name in used
        }
        if chunk_ticks is None:
            per_tick = sum(1.0 / m.stride for m in self.probes)
            chunk_ticks = max(1, int(TARGET_ROWS_PER_CHUNK / per_tick))
            strides = [m.stride for m in self.probes]
            lcm = int(np.lcm.reduce(np.asarray(strides, dtype=np.int64)))
            chunk_ticks = max(lcm, chunk_ticks // lcm * lcm)
        self.chunk_ticks = int(chunk_ticks)
        self.end_tick = None if self.duration_ms is None else -(-self.duration_ms // self.tick_ms)
        self.expected_readings = None if self.end_tick is None else sum(
            int(m.sample_ticks(0, self.end_tick).shape[0]) for m in self.probes)

    def chunks(self) -> Iterator[SimChunk]:
        """Consecutive chunks until the duration is reached (forever when endless)."""
        k0 = 0
        while self.end_tick is None or k0 < self.end_tick:
            k1 = k0 + self.chunk_ticks
            if self.end_tick is not None:
                k1 = min(k1, self.end_tick)
            yield self._chunk(k0, k1)
            k0 = k1

    def _chunk(self, k0: int, k1: int) -> SimChunk:
        ticks = np.arange(k0, k1, dtype=np.int64)
        t_ms = ticks * self.tick_ms
        ph = {name: m.values(t_ms) for name, m in self.ph_models.items()}
        temp = {name: m.values(t_ms) for name, m in self.temp_models.items()}
        nernst_k = {name: NERNST_MV_PER_K * (t + ZERO_CELSIUS_K) for name, t in temp.items()}
        tf = t_ms.astype(np.float64)
        element: dict[tuple[str, int, int], np.ndarray] = {}
        parts = []
        shared: dict[int, tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]] = {}
        for spec, model in zip(self.scenario.probes, self.probes):
            key = (spec.stream, spec.temperature_sensor.response, model.stride)
            if model.stride == 1:
                if key not in element:
                    element[key] = self._element_lags[key].run(
                        temp[spec.stream], float(spec.temperature_sensor.response))
                parts.append(model.chunk(t_ms, ticks, ph[spec.stream], temp[spec.stream], tf,
                                         nernst_k[spec.stream], element[key]))
                continue
            if model.stride not in shared:
                st = model.sample_ticks(k0, k1)
                s_t = st * self.tick_ms
                shared[model.stride] = (st, s_t, st - k0, s_t.astype(np.float64))
            s_ticks, s_t, idx, s_tf = shared[model.stride]
            s_temp = temp[spec.stream][idx]
            if key not in element:
                element[key] = self._element_lags[key].run(
                    s_temp, float(spec.temperature_sensor.response))
            parts.append(model.chunk(s_t, s_ticks // model.stride, ph[spec.stream][idx], s_temp,
                                     s_tf, nernst_k[spec.stream][idx], element[key]))
        end_ts = (self.start_ms + k1 * self.tick_ms) / 1000.0
        return SimChunk(self, parts, end_ts)
