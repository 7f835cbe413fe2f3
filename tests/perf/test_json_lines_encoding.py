"""The columnar JSON Lines encoder (stores/jsonl.py) against the straightforward one.

Reference 1: ``orjson.dumps`` of each record dict from ``reading_records``
(the plain form); the fast output must be identical to the last byte.
Reference 2 (outside the project): the standard library's ``datetime`` for
the RFC 3339 timestamps.
"""

from __future__ import annotations

import math
from datetime import UTC, datetime

import numpy as np
import orjson
import pytest
from perf_batches import processed_batch

from probeflow.events import rfc3339
from probeflow.stores.jsonl import encode_readings, reading_records, rfc3339_column, rfc3339_stamps


def straightforward(batch) -> bytes:
    return b"".join(orjson.dumps(r) + b"\n" for r in reading_records(batch))


@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("n", [1, 2, 17, 5000])
def test_encoder_equals_orjson_of_each_record(seed: int, n: int) -> None:
    batch = processed_batch(n, seed)
    assert encode_readings(batch) == straightforward(batch)


def test_every_line_is_valid_json_with_nulls_for_nan() -> None:
    batch = processed_batch(500, 9)
    lines = encode_readings(batch).splitlines()
    assert len(lines) == 500
    for line, ph in zip(lines, batch.ph.tolist()):
        rec = orjson.loads(line)
        assert rec["kind"] == "reading"
        assert rec["ph"] is None if math.isnan(ph) else rec["ph"] == ph


def test_times_across_decades_and_before_1970() -> None:
    rng = np.random.default_rng(3)
    ts = np.sort(rng.uniform(-2.0e9, 7.0e9, 3000))   # 1906 .. 2191: many distinct days
    batch = processed_batch(3000, 4, ts=ts)
    assert encode_readings(batch) == straightforward(batch)


def test_non_finite_times_take_the_straightforward_path() -> None:
    ts = np.array([1.7e9, np.nan, 1.7e9 + 1])
    batch = processed_batch(3, 5, ts=ts)
    assert encode_readings(batch) == straightforward(batch)


def test_empty_batch() -> None:
    batch = processed_batch(1, 1).select(np.zeros(1, dtype=bool))
    assert encode_readings(batch) == b""
    assert rfc3339_stamps(batch.ts) == []


def test_stamps_equal_the_numpy_formatter_everywhere() -> None:
    """Same rounding to the microsecond as rfc3339_column, including years 1..9999
    edges, where the fast path hands over to it."""
    rng = np.random.default_rng(11)
    ts = np.concatenate([
        rng.uniform(-6.2e10, 2.5e11, 20000),               # years 0001 .. 9900
        1.7e9 + rng.integers(0, 10**6, 2000) * 0.5e-6,       # half-microsecond ties
        np.array([0.0, -1e-7, 951782400.0, 951868799.9999996, 253402300799.999999]),
    ])
    assert rfc3339_stamps(ts) == [s.encode() for s in rfc3339_column(ts)]


def test_stamps_equal_stdlib_datetime() -> None:
    """Outside reference: datetime.fromtimestamp (via events.rfc3339) for times
    whose microsecond is unambiguous (whole microseconds, 1938..2096)."""
    rng = np.random.default_rng(12)
    seconds = rng.integers(-1_000_000_000, 4_000_000_000, 5000)
    micros = rng.integers(0, 1_000_000, 5000)
    ts = seconds + micros / 1e6
    assert [s.decode() for s in rfc3339_stamps(ts)] == [rfc3339(float(t)) for t in ts]
    # and a fixed, hand-checked value (2025-12-02 00:00:00.0005 UTC, from memory of the epoch)
    assert rfc3339_stamps(np.array([1764633600.0005])) == [b"2025-12-02T00:00:00.000500Z"]
    assert datetime(2025, 12, 2, tzinfo=UTC).timestamp() == 1764633600.0


@pytest.mark.parametrize("n", [1, 5000])
def test_the_uncopied_view_holds_the_same_bytes(n: int) -> None:
    from probeflow.stores.jsonl import encoded_readings

    batch = processed_batch(n, 11)
    view = encoded_readings(batch)
    assert isinstance(view, memoryview) and view.readonly
    assert bytes(view) == straightforward(batch)


def test_the_file_store_writes_exactly_the_straightforward_lines(tmp_path) -> None:
    from probeflow.stores.jsonl import JsonLinesStore, JsonLinesStoreConfig

    batches = [processed_batch(n, seed) for seed, n in enumerate((1, 5000, 17, 3000))]
    store = JsonLinesStore(JsonLinesStoreConfig(path=str(tmp_path / "out.jsonl")))
    for batch in batches:
        store.write(batch, [])
    store.close()
    assert (tmp_path / "out.jsonl").read_bytes() == b"".join(map(straightforward, batches))


def test_odd_probe_ids_give_what_orjson_gives_for_each_record() -> None:
    batch = processed_batch(40, 12)
    batch.probe[:4] = [None, 7, "tank-3", None]   # never from the collectors; the encoder must not care
    assert encode_readings(batch) == straightforward(batch)
    batch.probe[:3] = [7, 7.0, True]              # equal as dict keys, not as JSON
    assert encode_readings(batch) == straightforward(batch)


def test_an_id_orjson_cannot_encode_fails_as_the_straightforward_path_does() -> None:
    batch = processed_batch(10, 13)
    batch.probe[3] = "bad-\udc80"   # a lone surrogate
    with pytest.raises(orjson.JSONEncodeError):
        straightforward(batch)
    with pytest.raises(orjson.JSONEncodeError):
        encode_readings(batch)


def test_many_batches_with_changing_probe_sets_reuse_no_stale_text() -> None:
    for seed in range(20):
        names = [f"weir-{seed}-{i}" for i in range(seed + 1)] + ["tank-3"]
        batch = processed_batch(300, seed, probes=names)
        assert encode_readings(batch) == straightforward(batch)
