"""The rules' probe grouping factorizes probe ids without pandas; it must give
exactly what pandas.factorize(sort=True) gives (pandas is the reference here)."""

from __future__ import annotations

import numpy as np
import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st

from probeflow.rules.grouping import factorize_sorted


def _objects(values: list) -> np.ndarray:
    arr = np.empty(len(values), dtype=object)
    arr[:] = values
    return arr


def _assert_as_pandas(probe: np.ndarray) -> None:
    codes, uniques = factorize_sorted(probe)
    ref_codes, ref_uniques = pd.factorize(probe, sort=True)
    assert codes.tolist() == ref_codes.tolist()
    assert uniques.tolist() == list(ref_uniques)
    assert uniques.dtype == object and codes.dtype == np.intp


@settings(max_examples=300, deadline=None)
@given(st.lists(st.text(min_size=0, max_size=12), min_size=1, max_size=300))
def test_codes_and_ids_equal_pandas_factorize_sorted(ids):
    _assert_as_pandas(_objects(ids))


def test_a_batch_of_many_probes_in_arrival_order():
    rng = np.random.default_rng(5)
    names = _objects([f"weir-{i:04d}" for i in rng.permutation(3000)])
    probe = names[rng.integers(0, 3000, 50_000)]
    _assert_as_pandas(probe)
    assert factorize_sorted(probe)[1].tolist() == sorted(set(probe.tolist()))


def test_ids_that_are_not_all_strings_are_left_to_pandas():
    codes, _uniques = factorize_sorted(_objects(["b", None, "a", "b"]))
    assert codes.tolist() == [1, -1, 0, 1]
    _assert_as_pandas(_objects(["b", None, "a", "b"]))
    _assert_as_pandas(_objects([None, "a"]))
