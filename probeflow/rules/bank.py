"""One delayed latch per probe (or probe group), with its state kept between batches."""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from probeflow.rules.grouping import QuantityView
from probeflow.rules.latch import LatchCarry, run_latch
from probeflow.rules.lifecycle import Transition

__all__ = ["LatchBank", "LatchSpec"]


@dataclass(frozen=True, slots=True)
class LatchSpec:
    """What one latch watches: a limit, its direction, deadband and delays."""

    rule: str
    quantity: str
    limit_name: str
    limit: float
    high: bool
    deadband: float = 0.0
    on_delay: float = 0.0
    off_delay: float = 0.0
    severity: str = "medium"


MessageFn = Callable[[LatchSpec, str, bool, float], str]


def default_message(spec: LatchSpec, probe: str, active: bool, value: float) -> str:
    side = "above" if spec.high else "below"
    if active:
        return f"{probe}: {spec.quantity} {value:.4g} {side} {spec.limit_name} limit {spec.limit:g}"
    back = spec.limit - spec.deadband if spec.high else spec.limit + spec.deadband
    word = "at or below" if spec.high else "at or above"
    return f"{probe}: {spec.quantity} {value:.4g} back {word} {back:g}"


def _nan_to_none(x: float) -> float | None:
    return None if math.isnan(x) else float(x)


class LatchBank:
    """Carries of one latch spec for every key (probe id or group label) seen so far."""

    def __init__(self, spec: LatchSpec, message: MessageFn = default_message) -> None:
        self.spec = spec
        self._message = message
        self._carry: dict[str, tuple[bool, float, float]] = {}

    def run(self, view: QuantityView, members: dict[str, tuple[str, ...]] | None = None) -> list[Transition]:
        """Feed a view (segments keyed by ``view.probes``); return condition changes in row order."""
        n_seg = len(view.probes)
        if n_seg == 0:
            return []
        carry = LatchCarry.fresh(n_seg)
        for k, key in enumerate(view.probes):
            c = self._carry.get(key)
            if c is not None:
                carry.active[k], carry.beyond_since[k], carry.clear_since[k] = c
        s = self.spec
        res = run_latch(
            view.t, view.v, view.seg_starts, carry, limit=s.limit, deadband=s.deadband,
            on_delay=s.on_delay, off_delay=s.off_delay, high=s.high, seg_id=view.seg_id(),
        )
        out = res.carry
        for k, key in enumerate(view.probes):
            self._carry[key] = (bool(out.active[k]), float(out.beyond_since[k]), float(out.clear_since[k]))
        if res.index.shape[0] == 0:
            return []
        segs = np.searchsorted(view.seg_starts, res.index, side="right") - 1
        trs = []
        for i, seg, act in zip(res.index.tolist(), segs.tolist(), res.active.tolist(), strict=True):
            key = view.probes[seg]
            value = float(view.v[i])
            trs.append(Transition(
                rule=s.rule, probe=key, quantity=s.quantity, limit=s.limit_name, active=bool(act),
                ts=float(view.t[i]), value=value, threshold=s.limit, severity=s.severity,
                message=self._message(s, key, bool(act), value),
                members=(members or {}).get(key, ()),
            ))
        return trs

    def is_active(self, key: str) -> bool:
        c = self._carry.get(key)
        return bool(c and c[0])

    def state(self) -> dict[str, Any]:
        return {k: [a, _nan_to_none(b), _nan_to_none(c)] for k, (a, b, c) in self._carry.items()}

    def restore(self, state: dict[str, Any]) -> None:
        self._carry = {
            k: (bool(a), math.nan if b is None else float(b), math.nan if c is None else float(c))
            for k, (a, b, c) in state.items()
        }
