"""The examples in the simulator's docstrings run and give what they show."""

from __future__ import annotations

import doctest
import importlib

import pytest

MODULES = ["probeflow.simulate.durations", "probeflow.simulate.rtd", "probeflow.simulate.seeds"]


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name: str) -> None:
    result = doctest.testmod(importlib.import_module(name))
    assert result.attempted > 0 and result.failed == 0


def test_public_surface_is_sorted_and_importable() -> None:
    import probeflow.simulate as sim

    assert sim.__all__ == sorted(sim.__all__)
    for name in sim.__all__:
        assert hasattr(sim, name)
