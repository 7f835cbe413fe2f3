"""The rules stage: band, rate-of-change, diagnostic, redundancy and drift alarms.

Build an engine from the validated ``rules:`` section with
:func:`build_rule_engine`; see :mod:`probeflow.rules.engine`.  Names are
imported on first use, so light users (the CLI) do not pay for numpy/pandas.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

__all__ = ["Engine", "RulesConfig", "build_rule_engine", "parse_rules_config"]

_WHERE = {
    "Engine": "probeflow.rules.engine",
    "build_rule_engine": "probeflow.rules.engine",
    "RulesConfig": "probeflow.rules.config",
    "parse_rules_config": "probeflow.rules.config",
}

if TYPE_CHECKING:
    from probeflow.rules.config import RulesConfig, parse_rules_config
    from probeflow.rules.engine import Engine, build_rule_engine


def __getattr__(name: str) -> Any:
    module = _WHERE.get(name)
    if module is None:
        raise AttributeError(f"module 'probeflow.rules' has no attribute {name!r}")
    return getattr(importlib.import_module(module), name)
