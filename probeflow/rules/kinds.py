"""The built-in rule kinds, registered as plugins exactly like a site's own.

Each class here is the ``probeflow.rules`` entry point of one section of
``rules:`` (see ``pyproject.toml`` and the plugin interface in
:mod:`probeflow.rules.base`).  The rule modules are imported only when a rule
is built, so checking a config stays light.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

from probeflow.rules.config import (
    BandRuleConfig,
    DiagnosticsConfig,
    DriftRuleConfig,
    RateOfChangeRuleConfig,
    RedundancyRuleConfig,
)

if TYPE_CHECKING:
    from probeflow.rules.base import Rule

__all__ = ["BandKind", "DiagnosticsKind", "DriftKind", "RateOfChangeKind", "RedundancyKind"]


class BandKind:
    """``rules.bands``: low_low/low/high/high_high limits per probe glob."""

    Config = BandRuleConfig
    section_form = "list"

    @staticmethod
    def build(configs: Sequence[BandRuleConfig], probe_ids: Sequence[str] = ()) -> list[Rule]:
        from probeflow.rules.band import BandRule

        return [BandRule(c) for c in configs]


class RateOfChangeKind:
    """``rules.rate_of_change``: |d quantity/dt| over a window above a limit."""

    Config = RateOfChangeRuleConfig
    section_form = "list"

    @staticmethod
    def build(configs: Sequence[RateOfChangeRuleConfig], probe_ids: Sequence[str] = ()) -> list[Rule]:
        from probeflow.rules.rate import RateOfChangeRule

        return [RateOfChangeRule(c) for c in configs]


class DiagnosticsKind:
    """``rules.diagnostics``: stale, flatline, noise, mV range, temperature fault (one mapping)."""

    Config = DiagnosticsConfig
    section_form = "mapping"

    @staticmethod
    def build(configs: Sequence[DiagnosticsConfig], probe_ids: Sequence[str] = ()) -> list[Rule]:
        from probeflow.rules.diagnostics import DiagnosticRules

        return [DiagnosticRules(c, probe_ids) for c in configs]


class RedundancyKind:
    """``rules.redundancy``: two or three probes on one stream disagreeing."""

    Config = RedundancyRuleConfig
    section_form = "list"

    @staticmethod
    def build(configs: Sequence[RedundancyRuleConfig], probe_ids: Sequence[str] = ()) -> list[Rule]:
        from probeflow.rules.redundancy import RedundancyRule

        return [RedundancyRule(c) for c in configs]


class DriftKind:
    """``rules.drift``: Theil–Sen slope over a long window above a limit per day."""

    Config = DriftRuleConfig
    section_form = "list"

    @staticmethod
    def build(configs: Sequence[DriftRuleConfig], probe_ids: Sequence[str] = ()) -> list[Rule]:
        from probeflow.rules.drift import DriftRule

        return [DriftRule(c) for c in configs]
