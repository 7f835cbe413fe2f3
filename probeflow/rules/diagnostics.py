"""Per-probe diagnostics: stale, flatline, noise, mV out of range, temperature fault.

Alarm ids are ``diagnostics/<probe>/<kind>``.  Readings of quality
``maintenance`` are ignored by every diagnostic except stale (any reading
shows the probe is alive).  Bounds are configurable; the defaults are common
practice, no source (see :mod:`probeflow.rules.config`).

* stale: no reading for more than ``after_s``.  Raised from ``tick(now)``, or,
  when readings resume after a longer gap before any tick saw it (replays),
  from the gap itself; either way the raise is stamped ``last + after_s`` and
  the clear at the first reading after the gap.
* flatline / noise: spread (max - min) of mV over the trailing window
  (t - window_s, t], evaluated once the probe has been read for a whole
  window and the window holds at least 3 readings.
* mv_range: quality ``mv_out_of_range`` (set by the conversion stage), or mV
  outside ``min_mv``/``max_mv`` when those are configured.
* temp_fault: quality ``temp_fault`` persisting ``for_s``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from probeflow.batch import Quality
from probeflow.rules.bank import LatchBank, LatchSpec
from probeflow.rules.config import DiagnosticsConfig
from probeflow.rules.grouping import GroupedBatch, QuantityView, compress_view
from probeflow.rules.lifecycle import Transition
from probeflow.rules.matching import ProbeMatcher
from probeflow.rules.series_tail import SeriesTails
from probeflow.rules.windows import rolling_spread

__all__ = ["RULE_ID", "DiagnosticRules"]

RULE_ID = "diagnostics"
MIN_SPREAD_POINTS = 3
BLOCK_ROWS = 65536  # rows per block (bounds the sparse table's memory on long recordings)


def _message_for(kind: str) -> Any:
    def message(spec: LatchSpec, probe: str, active: bool, value: float) -> str:
        state = "detected" if active else "ended"
        if kind == "flatline":
            return f"{probe}: mV signal flat (spread {value:.3g} mV, bound {spec.limit:g} mV) {state}: electrode coated, dry or signal frozen?"
        if kind == "noise":
            return f"{probe}: mV signal noisy (spread {value:.3g} mV, bound {spec.limit:g} mV) {state}: check cable, earthing, electrode"
        if kind == "mv_range":
            return f"{probe}: mV out of the range a glass electrode can give {state}"
        return f"{probe}: temperature fault {state}"
    return message


class DiagnosticRules:
    kind = "diagnostics"

    def __init__(self, config: DiagnosticsConfig, probe_ids: Sequence[str] = ()) -> None:
        self.config = config
        self.id = RULE_ID
        self.matcher = ProbeMatcher(config.probes)
        self._watched = [p for p in probe_ids if self.matcher(p)]
        self._last: dict[str, float] = {}
        self._since: dict[str, float] = {}
        self._stale_active: dict[str, bool] = {}
        c = config
        self.flatline = LatchBank(LatchSpec(RULE_ID, "mv", "flatline", c.flatline.min_spread_mv, high=False,
                                            severity=c.flatline.severity), _message_for("flatline"))
        self.noise = LatchBank(LatchSpec(RULE_ID, "mv", "noise", c.noise.max_spread_mv, high=True,
                                         on_delay=c.noise.on_delay_s, severity=c.noise.severity),
                               _message_for("noise"))
        self.mv_range = LatchBank(LatchSpec(RULE_ID, "mv", "mv_range", 0.5, high=True,
                                            on_delay=c.mv_range.on_delay_s, severity=c.mv_range.severity),
                                  _message_for("mv_range"))
        self.temp_fault = LatchBank(LatchSpec(RULE_ID, "temp_c", "temp_fault", 0.5, high=True,
                                              on_delay=c.temp_fault.for_s, severity=c.temp_fault.severity),
                                    _message_for("temp_fault"))
        span = max(c.flatline.window_s, c.noise.window_s)
        self.tails_flat = SeriesTails(c.flatline.window_s)
        self.tails_noise = SeriesTails(c.noise.window_s)
        self._span = span

    # --- stale -------------------------------------------------------------------
    def _stale_transition(self, probe: str, active: bool, ts: float, value: float) -> Transition:
        after = self.config.stale.after_s
        msg = (f"{probe}: no reading for more than {after:g} s" if active
               else f"{probe}: readings again after {value:.0f} s")
        return Transition(RULE_ID, probe, "ts", "stale", active, ts, value, after,
                          self.config.stale.severity, msg)

    def _stale_from_batch(self, batch: GroupedBatch, probes: list[str], starts: np.ndarray,
                          ends: np.ndarray) -> list[Transition]:
        after = self.config.stale.after_s
        out: list[Transition] = []
        for p, a, b in zip(probes, starts.tolist(), ends.tolist(), strict=True):
            t = batch.t[a:b]
            prev = self._last.get(p)
            tt = t if prev is None else np.concatenate([[prev], t])
            gaps = np.flatnonzero(np.diff(tt) > after)
            for g in gaps.tolist():
                gap = float(tt[g + 1] - tt[g])
                if not self._stale_active.get(p, False):
                    out.append(self._stale_transition(p, True, float(tt[g] + after), gap))
                out.append(self._stale_transition(p, False, float(tt[g + 1]), gap))
                self._stale_active[p] = False
            if self._stale_active.get(p, False):  # raised by tick, readings are back
                gap = float(t[0] - (prev if prev is not None else t[0]))
                out.append(self._stale_transition(p, False, float(t[0]), gap))
                self._stale_active[p] = False
            self._last[p] = float(t[-1])
            self._since.setdefault(p, float(t[0]))
        return out

    def tick(self, now: float) -> list[Transition]:
        if not self.config.stale.enabled:
            return []
        after = self.config.stale.after_s
        out: list[Transition] = []
        for p in self._watched:
            self._last.setdefault(p, now)  # never read yet: watch from the first tick
        for p, last in sorted(self._last.items()):
            if not self._stale_active.get(p, False) and now - last > after:
                self._stale_active[p] = True
                out.append(self._stale_transition(p, True, last + after, now - last))
        return out

    # --- windowed spread ---------------------------------------------------------------
    def _spread_view(self, view: QuantityView, window_s: float, tails: SeriesTails) -> QuantityView:
        ends = np.append(view.seg_starts[1:], view.t.shape[0])
        spread = np.full(view.t.shape[0], np.nan)
        for p, a, b in zip(view.probes, view.seg_starts.tolist(), ends.tolist(), strict=True):
            for a2 in range(a, b, BLOCK_ROWS):
                b2 = min(a2 + BLOCK_ROWS, b)
                tt, vv, n_tail = tails.joined(p, view.t[a2:b2], view.v[a2:b2])
                s, cnt = rolling_spread(tt, vv, window_s)
                since = self._since.get(p, float(tt[0]))
                ready = (tt >= since + window_s) & (cnt >= MIN_SPREAD_POINTS)
                spread[a2:b2] = np.where(ready, s, np.nan)[n_tail:]
                tails.keep(p, tt, vv)
        return compress_view(view.probes, view.seg_starts, view.t, spread, np.isfinite(spread))

    def evaluate(self, batch: GroupedBatch) -> list[Transition]:
        c = self.config
        if len(batch) == 0:
            return []
        mine = self.matcher.mask(batch.probes)
        if not mine.any():
            return []
        ends_all = np.append(batch.seg_starts[1:], len(batch))
        out: list[Transition] = []
        probes = [p for p, m in zip(batch.probes, mine, strict=True) if m]
        for p in probes:
            self._since.setdefault(p, math.inf)
        if c.stale.enabled:
            out += self._stale_from_batch(batch, probes, batch.seg_starts[mine], ends_all[mine])
        else:
            for p, e in zip(probes, ends_all[mine].tolist(), strict=True):
                self._last[p] = float(batch.t[e - 1])
        q = batch.quality
        mv = batch.column("mv")
        in_service = q != Quality.MAINTENANCE
        mine_rows = np.repeat(mine, batch.seg_lengths())
        # first reading time per probe (for "read for a whole window")
        for p, a in zip(probes, batch.seg_starts[mine].tolist(), strict=True):
            if self._since[p] == math.inf:
                self._since[p] = float(batch.t[a])
        if c.mv_range.enabled:
            cond = q == Quality.MV_OUT_OF_RANGE
            if c.mv_range.min_mv is not None:
                cond = cond | (mv < c.mv_range.min_mv)
            if c.mv_range.max_mv is not None:
                cond = cond | (mv > c.mv_range.max_mv)
            out += self.mv_range.run(batch.view_where(cond.astype(np.float64), in_service & mine_rows))
        if c.temp_fault.enabled:
            cond = (q == Quality.TEMP_FAULT).astype(np.float64)
            out += self.temp_fault.run(batch.view_where(cond, in_service & mine_rows))
        usable = in_service & mine_rows & (q != Quality.MV_OUT_OF_RANGE) & np.isfinite(mv)
        if c.flatline.enabled or c.noise.enabled:
            base = batch.view_where(mv, usable)
            if c.flatline.enabled:
                out += self.flatline.run(self._spread_view(base, c.flatline.window_s, self.tails_flat))
            if c.noise.enabled:
                out += self.noise.run(self._spread_view(base, c.noise.window_s, self.tails_noise))
        return out

    # --- persistence -----------------------------------------------------------------
    def state(self) -> dict[str, Any]:
        return {
            "last": self._last, "since": {k: v for k, v in self._since.items() if math.isfinite(v)},
            "stale_active": self._stale_active,
            "flatline": self.flatline.state(), "noise": self.noise.state(),
            "mv_range": self.mv_range.state(), "temp_fault": self.temp_fault.state(),
            "tails_flat": self.tails_flat.state(), "tails_noise": self.tails_noise.state(),
        }

    def restore(self, state: dict[str, Any]) -> None:
        self._last = {k: float(v) for k, v in state.get("last", {}).items()}
        self._since = {k: float(v) for k, v in state.get("since", {}).items()}
        self._stale_active = {k: bool(v) for k, v in state.get("stale_active", {}).items()}
        for name in ("flatline", "noise", "mv_range", "temp_fault"):
            getattr(self, name).restore(state.get(name, {}))
        self.tails_flat.restore(state.get("tails_flat", {}))
        self.tails_noise.restore(state.get("tails_noise", {}))
