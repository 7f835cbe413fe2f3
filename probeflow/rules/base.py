"""The interface of the rules stage, and of a rule-kind plugin.

A rule engine is built once from the validated ``rules:`` config section and
then fed processed batches in time order per probe.  It returns the alert
events each batch caused.  ``tick(now)`` lets time-based rules (stale
readings, shelving expiry) fire when no reading arrives.  Its state can be
saved and restored so a restart neither re-raises nor forgets an alarm.

Rule kinds are plugins
----------------------
Every key under ``rules:`` other than ``lab_checks`` names a *rule kind*,
found in the entry-point group ``probeflow.rules`` (the built-in ``bands``,
``rate_of_change``, ``diagnostics``, ``redundancy`` and ``drift`` register
there too, see ``pyproject.toml`` and :mod:`probeflow.rules.kinds`).  A rule
kind is a class (or any object) with:

``Config``        a pydantic model for ONE entry of its section;
``section_form``  ``"list"`` (the section is a list of entries, the default)
                  or ``"mapping"`` (the section is one entry, like
                  ``diagnostics``);
``build(configs, probe_ids)``
                  the validated entries (in config order) and the configured
                  probe ids -> a list of :class:`Rule` objects.

A site's own kind, counting readings above a pH in a sliding window (in the
site's package, registered in its ``pyproject.toml`` with
``[project.entry-points."probeflow.rules"]`` ``ph_window_count =
"site_rules:WindowCount"``, then used as ``rules: {ph_window_count: [...]}``)::

    import numpy as np
    from pydantic import BaseModel, ConfigDict
    from probeflow.rules.lifecycle import Transition
    from probeflow.rules.matching import ProbeMatcher

    class WindowCountConfig(BaseModel):
        model_config = ConfigDict(extra="forbid", frozen=True)
        id: str
        probes: list[str]
        above_ph: float
        window_s: float = 600.0
        max_count: int = 5

    class WindowCountRule:
        kind = "ph_window_count"

        def __init__(self, c: WindowCountConfig) -> None:
            self.config, self.id = c, c.id
            self.match = ProbeMatcher(c.probes)
            self.times: dict[str, list[float]] = {}
            self.active: dict[str, bool] = {}

        def evaluate(self, batch):            # a GroupedBatch: rows sorted by probe, time
            view = batch.good_view("ph")      # good readings with a finite pH
            out = []
            ends = np.append(view.seg_starts[1:], view.t.shape[0])
            for probe, a, b in zip(view.probes, view.seg_starts, ends):
                if not self.match(probe):
                    continue
                times = self.times.setdefault(probe, [])
                for t, v in zip(view.t[a:b].tolist(), view.v[a:b].tolist()):
                    if v > self.config.above_ph:
                        times.append(t)
                    times[:] = [x for x in times if x > t - self.config.window_s]
                    now_active = len(times) > self.config.max_count
                    if now_active != self.active.get(probe, False):
                        self.active[probe] = now_active
                        out.append(Transition(self.id, probe, "ph", "count", now_active, t,
                                              float(len(times)), float(self.config.max_count),
                                              "medium", f"{probe}: {len(times)} readings above "
                                              f"pH {self.config.above_ph:g}"))
            return out

        def tick(self, now):
            return []

        def state(self):                      # JSON-serialisable
            return {"times": self.times, "active": self.active}

        def restore(self, state):
            self.times = {k: list(v) for k, v in state.get("times", {}).items()}
            self.active = dict(state.get("active", {}))

    class WindowCount:
        Config = WindowCountConfig
        section_form = "list"

        @staticmethod
        def build(configs, probe_ids):
            return [WindowCountRule(c) for c in configs]

The config loader validates each entry with ``Config`` (problems name the key
path, e.g. ``rules.ph_window_count[0].above_ph``).  A rule's saved state is
kept under ``"<kind>:<id>"``, so keep ``kind`` and ``id`` stable across
versions.  At run time the engine isolates each rule: a rule whose
``evaluate`` or ``tick`` raises is logged (once a minute), counted, skipped
for that batch and called again with the next one; the other rules go on.
Alerts support operators; they are not a safety system.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any, Protocol, runtime_checkable

from pydantic import BaseModel

from probeflow.errors import PluginError

if TYPE_CHECKING:  # kept out of the import, so checking a config stays light
    from probeflow.batch import ProcessedBatch
    from probeflow.events import AlertEvent

__all__ = ["SECTION_FORMS", "Rule", "RuleEngine", "RuleKind", "load_rule_kind", "section_form_of"]

SECTION_FORMS = ("list", "mapping")


@runtime_checkable
class RuleEngine(Protocol):
    def process(self, batch: ProcessedBatch) -> list[AlertEvent]: ...

    def tick(self, now: float) -> list[AlertEvent]: ...

    def state(self) -> dict[str, Any]:
        """JSON-serialisable state to persist."""

    def restore(self, state: dict[str, Any]) -> None: ...


@runtime_checkable
class Rule(Protocol):
    """One configured rule inside the engine: turns grouped readings into condition changes.

    ``evaluate`` receives a :class:`~probeflow.rules.grouping.GroupedBatch`;
    ``evaluate`` and ``tick`` return :class:`~probeflow.rules.lifecycle.Transition`
    objects (condition became active / returned); the engine's alarm book turns
    them into ISA-18.2 alert events.
    """

    id: str
    kind: str

    def evaluate(self, batch: Any) -> list[Any]: ...

    def tick(self, now: float) -> list[Any]: ...

    def state(self) -> dict[str, Any]: ...

    def restore(self, state: dict[str, Any]) -> None: ...


class RuleKind(Protocol):
    """A rule-kind plugin (see the module docstring)."""

    Config: type[BaseModel]
    section_form: str

    def build(self, configs: Sequence[BaseModel], probe_ids: Sequence[str]) -> list[Rule]: ...


def section_form_of(kind: Any) -> str:
    """``"list"`` or ``"mapping"``: how the kind's section is written."""
    return str(getattr(kind, "section_form", "list"))


def load_rule_kind(name: str) -> RuleKind:
    """The rule kind registered as ``name`` in ``probeflow.rules``, checked.

    Raises :class:`PluginError` naming the plugin when it is not installed,
    fails to import, or does not have the interface described above.
    """
    from probeflow.plugins import RULES, load_plugin

    kind = load_plugin(RULES, name)
    config = getattr(kind, "Config", None)
    if not (isinstance(config, type) and issubclass(config, BaseModel)):
        raise PluginError(f'the rule plugin "{name}" has no pydantic Config model, so its '
                          "config section cannot be checked")
    if not callable(getattr(kind, "build", None)):
        raise PluginError(f'the rule plugin "{name}" has no build(configs, probe_ids) function')
    if section_form_of(kind) not in SECTION_FORMS:
        raise PluginError(f'the rule plugin "{name}" has section_form '
                          f'{getattr(kind, "section_form", None)!r}; expected "list" or "mapping"')
    return kind  # type: ignore[no-any-return]
