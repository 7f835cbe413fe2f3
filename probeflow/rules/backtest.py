"""Backtesting: run rule sets over a recording and count what they would have done.

The backtest feeds the recording, in chunks, through exactly the rule objects
the live engine uses (so its counts equal the live engine's on the same
recording), but skips the operator-facing lifecycle: it counts condition
changes.  Per rule it reports

* activations      how many times an alarm of the rule became active
* active_s         total time its alarms were active [s] (an alarm still active
                   at the end of the recording counts up to the last reading)
* chattering       activations that came within ``chatter_s`` of the previous
                   clear of the same alarm (60 s: common practice, no source)
* alarms           distinct alarm ids that were ever active
* errors           batches in which the rule raised (it is skipped for that
                   batch and tried again with the next, as in the live engine)

Rule kinds from plugins (``probeflow.rules`` entry points) run here exactly as
in the live engine: the backtest has no separate vectorised copy of any kind,
it calls the same rule objects' ``evaluate`` on large chunks, so a plugin's
speed in the backtest is its own ``evaluate`` on those chunks.

With ``workers`` > 1 the rules of a chunk are evaluated side by side on that
many threads (numpy releases the interpreter lock in its array loops; about
1.25x on 2 cores with 20 band rules on every probe).  The counts are the same
as with one worker (tested); a plugin rule that shares mutable state with
other rule objects needs ``workers=1`` (``probeflow backtest --workers 1``).
"""

from __future__ import annotations

import math
import os
from collections.abc import Iterable, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from typing import Any

from probeflow.batch import ProcessedBatch
from probeflow.rules.config import RulesConfig
from probeflow.rules.engine import build_rules
from probeflow.rules.grouping import group_batch
from probeflow.rules.guard import RuleGuard, rule_key
from probeflow.rules.lifecycle import Transition

__all__ = ["Backtest", "RuleStats", "compare", "run_backtest"]

DEFAULT_CHATTER_S = 60.0

DEFAULT_WORKERS = min(2, os.cpu_count() or 1)
"""Threads evaluating rules side by side in a backtest (2 on the 2-core target box)."""


@dataclass(slots=True)
class RuleStats:
    rule: str
    kind: str
    activations: int = 0
    active_s: float = 0.0
    chattering: int = 0
    alarm_ids: set[str] = field(default_factory=set)
    errors: int = 0

    @property
    def alarms(self) -> int:
        return len(self.alarm_ids)

    def as_dict(self) -> dict[str, object]:
        return {"rule": self.rule, "kind": self.kind, "activations": self.activations,
                "active_s": self.active_s, "chattering": self.chattering, "alarms": self.alarms,
                "errors": self.errors}


class Backtest:
    """Feed :class:`ProcessedBatch` chunks in time order, then :meth:`finish`."""

    def __init__(self, config: RulesConfig, probe_ids: Sequence[str] = (),
                 chatter_s: float = DEFAULT_CHATTER_S, workers: int = DEFAULT_WORKERS) -> None:
        self.rules = build_rules(config, probe_ids)
        self.guard = RuleGuard()
        self.workers = max(1, int(workers))
        self._pool: ThreadPoolExecutor | None = None
        self.chatter_s = chatter_s
        self.stats = {r.id: RuleStats(r.id, r.kind) for r in self.rules}
        self._raised_at: dict[str, float] = {}
        self._cleared_at: dict[str, float] = {}
        self._rule_of: dict[str, str] = {}
        self._last_seen: dict[str, float] = {}
        self.readings = 0
        self.end_ts = -math.inf

    def feed(self, batch: ProcessedBatch) -> None:
        grouped = group_batch(batch, self._last_seen)
        if len(grouped) == 0:
            return
        self.readings += len(grouped)
        if self.workers > 1 and len(self.rules) > 1:
            if self._pool is None:
                self._pool = ThreadPoolExecutor(self.workers, thread_name_prefix="backtest")
            transitions = self.guard.evaluate_in(self._pool, self.rules, grouped)
        else:
            transitions = self.guard.evaluate(self.rules, grouped)
        self._last_seen.update(grouped.last_ts())
        self.end_ts = max(self.end_ts, float(grouped.t.max()))
        transitions.sort(key=lambda tr: tr.ts)
        for tr in transitions:
            self._count(tr)

    def _count(self, tr: Transition) -> None:
        aid = tr.alarm_id
        st = self.stats.get(tr.rule)
        if st is None:  # a plugin rule reporting under another rule id
            st = self.stats[tr.rule] = RuleStats(tr.rule, "?")
        if tr.active:
            st.activations += 1
            st.alarm_ids.add(aid)
            last_clear = self._cleared_at.get(aid)
            if last_clear is not None and tr.ts - last_clear <= self.chatter_s:
                st.chattering += 1
            self._raised_at[aid] = tr.ts
            self._rule_of[aid] = tr.rule
        else:
            since = self._raised_at.pop(aid, None)
            if since is not None:
                st.active_s += tr.ts - since
            self._cleared_at[aid] = tr.ts

    def finish(self) -> dict[str, RuleStats]:
        """Stats per rule id; alarms still active count as active up to the last reading."""
        if self._pool is not None:
            self._pool.shutdown()
            self._pool = None
        for aid, since in self._raised_at.items():
            self.stats[self._rule_of[aid]].active_s += max(0.0, self.end_ts - since)
        for rule in self.rules:
            self.stats[rule.id].errors = self.guard.errors.get(rule_key(rule), 0)
        self._raised_at = {}
        return self.stats


def run_backtest(chunks: Iterable[ProcessedBatch], config: RulesConfig, probe_ids: Sequence[str] = (),
                 chatter_s: float = DEFAULT_CHATTER_S, workers: int = DEFAULT_WORKERS) -> dict[str, RuleStats]:
    bt = Backtest(config, probe_ids, chatter_s, workers)
    for chunk in chunks:
        bt.feed(chunk)
    return bt.finish()


def compare(a: dict[str, RuleStats], b: dict[str, RuleStats]) -> list[dict[str, Any]]:
    """Rule-by-rule B minus A (a rule only in one set counts as zero in the other)."""
    out = []
    for rid in list(a) + [r for r in b if r not in a]:
        sa, sb = a.get(rid), b.get(rid)
        def val(s: RuleStats | None, name: str) -> float:
            return float(getattr(s, name)) if s is not None else 0.0
        out.append({"rule": rid, **{f"{k}_diff": val(sb, k) - val(sa, k)
                                     for k in ("activations", "active_s", "chattering")},
                    "only_in": "A" if sb is None else "B" if sa is None else ""})
    return out
