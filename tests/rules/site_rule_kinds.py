"""A site's own rule kinds, written as a site would write them (no probeflow internals
beyond the plugin interface of ``probeflow.rules.base``).

The tests use them in-process (``register_plugin``) and, copied into a throwaway
distribution with ``probeflow.rules`` entry points, from ``probeflow check`` and
``probeflow filter`` subprocesses.  The scenario (an invented lagoon outlet) is
invented; the rule is a plain count, no chemistry.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from pydantic import BaseModel, ConfigDict, Field

from probeflow.rules.lifecycle import Transition
from probeflow.rules.matching import ProbeMatcher


class WindowCountConfig(BaseModel):
    """More than ``max_count`` good readings above ``above_ph`` within ``window_s``."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    id: str = Field(min_length=1)
    probes: list[str] = Field(min_length=1)
    above_ph: float
    window_s: float = Field(default=60.0, gt=0.0)
    max_count: int = Field(default=2, ge=1)


class WindowCountRule:
    """Active while the trailing window (t - window_s, t] holds more than max_count
    readings above the pH bound; returns when it holds max_count or fewer."""

    kind = "ph_window_count"

    def __init__(self, config: WindowCountConfig) -> None:
        self.config = config
        self.id = config.id
        self.match = ProbeMatcher(config.probes)
        self.above: dict[str, list[float]] = {}
        self.active: dict[str, bool] = {}

    def evaluate(self, batch: Any) -> list[Transition]:
        c = self.config
        view = batch.good_view("ph")
        ends = [*view.seg_starts.tolist()[1:], int(view.t.shape[0])]
        out: list[Transition] = []
        for probe, a, b in zip(view.probes, view.seg_starts.tolist(), ends, strict=True):
            if not self.match(probe):
                continue
            times = self.above.setdefault(probe, [])
            for t, v in zip(view.t[a:b].tolist(), view.v[a:b].tolist(), strict=True):
                if v > c.above_ph:
                    times.append(t)
                times[:] = [x for x in times if x > t - c.window_s]
                now_active = len(times) > c.max_count
                if now_active != self.active.get(probe, False):
                    self.active[probe] = now_active
                    out.append(Transition(self.id, probe, "ph", "count", now_active, t,
                                          float(len(times)), float(c.max_count), "medium",
                                          f"{probe}: {len(times)} readings above pH {c.above_ph:g} "
                                          f"in {c.window_s:g} s"))
        return out

    def tick(self, now: float) -> list[Transition]:
        return []

    def state(self) -> dict[str, Any]:
        return {"above": self.above, "active": self.active}

    def restore(self, state: dict[str, Any]) -> None:
        self.above = {k: [float(x) for x in v] for k, v in state.get("above", {}).items()}
        self.active = {k: bool(v) for k, v in state.get("active", {}).items()}


class WindowCount:
    """The rule kind (the entry point): ``rules: {ph-window-count: [ ... ]}``."""

    Config = WindowCountConfig
    section_form = "list"

    @staticmethod
    def build(configs: Sequence[WindowCountConfig], probe_ids: Sequence[str]) -> list[Any]:
        return [WindowCountRule(c) for c in configs]


class FaultyConfig(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    id: str = "faulty"
    fail_times: int = Field(default=-1, description="batches that fail first; -1 = every batch")


class FaultyRule:
    """A rule with a bug: its ``evaluate`` raises for the first ``fail_times`` batches
    (every batch with -1), then raises an alarm at the first reading it sees."""

    kind = "faulty"

    def __init__(self, config: FaultyConfig) -> None:
        self.id = config.id
        self.fail_left = config.fail_times
        self.calls = 0
        self.raised = False

    def evaluate(self, batch: Any) -> list[Transition]:
        self.calls += 1
        if self.fail_left != 0:
            self.fail_left -= 1
            raise ZeroDivisionError("site rule bug: division by zero")
        if self.raised or len(batch) == 0:
            return []
        self.raised = True
        return [Transition(self.id, batch.probes[0], "ph", "bug", True, float(batch.t[0]),
                           0.0, 0.0, "low", "faulty rule recovered")]

    def tick(self, now: float) -> list[Transition]:
        if self.fail_left != 0:
            raise RuntimeError("site rule bug in tick")
        return []

    def state(self) -> dict[str, Any]:
        return {"raised": self.raised}

    def restore(self, state: dict[str, Any]) -> None:
        self.raised = bool(state.get("raised", False))


class Faulty:
    """One mapping: ``rules: {faulty-kind: {fail_times: 1}}``."""

    Config = FaultyConfig
    section_form = "mapping"

    @staticmethod
    def build(configs: Sequence[FaultyConfig], probe_ids: Sequence[str]) -> list[Any]:
        return [FaultyRule(c) for c in configs]
