"""The examples in the chemistry docstrings run and hold (also under plain `pytest`)."""

from __future__ import annotations

import doctest
import importlib

import pytest

MODULES = [
    "probeflow.chemistry.activity",
    "probeflow.chemistry.conversion",
    "probeflow.chemistry.if97",
    "probeflow.chemistry.ionisation",
    "probeflow.chemistry.nernst",
    "probeflow.chemistry.neutral",
]


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name: str) -> None:
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS)
    assert result.attempted > 0, f"{name} has no docstring examples"
    assert result.failed == 0
