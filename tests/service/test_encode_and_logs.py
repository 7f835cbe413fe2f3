"""Fast paths against their straightforward forms; rate-limited quarantine logs;
calibration taken from the store."""

from __future__ import annotations

import subprocess

import numpy as np
import orjson

from probeflow.batch import ProcessedBatch, ReadingBatch
from probeflow.chemistry import convert_readings
from probeflow.config import load_config
from probeflow.service.log import RateLimiter
from probeflow.service.pipeline import build_service
from probeflow.stores.jsonl import encode_readings, reading_records
from probeflow.stores.sqlite import SqliteStore, SqliteStoreConfig


def test_bulk_encoding_equals_one_orjson_call_per_record():
    rng = np.random.default_rng(4)
    n = 3000
    cols = [rng.uniform(-500, 500, n) * 10.0 ** rng.integers(-9, 9, n) for _ in range(5)]
    for col in cols:
        col[rng.integers(0, n, 40)] = np.nan
    cols[0][:3] = [0.0, -0.0, 5e-324]
    probes = np.array(rng.choice(["tank-3", 'odd"id', "back\\slash", "ünï"], n), dtype=object)
    batch = ProcessedBatch(probes, 1.7e9 + rng.uniform(0, 3e8, n), *cols,
                           rng.integers(0, 5, n).astype(np.uint8))
    straightforward = b"".join(orjson.dumps(r) + b"\n" for r in reading_records(batch))
    assert encode_readings(batch) == straightforward


def test_rate_limiter_lets_one_event_per_key_per_interval():
    now = [0.0]
    limiter = RateLimiter(60.0, clock=lambda: now[0])
    assert limiter.allow("a") == (True, 0)
    assert limiter.allow("a") == (False, 0)
    assert limiter.allow("b") == (True, 0)
    now[0] = 59.9
    assert limiter.allow("a") == (False, 0)
    now[0] = 60.0
    assert limiter.allow("a") == (True, 2)      # two were held back


def test_many_bad_lines_logged_once_but_all_quarantined(cli, cli_env, config_file, tmp_path):
    bad = b"\n".join(b"{garbage %d" % i for i in range(200))
    good = b'{"probe":"tank-3","ts":1764633600,"mv":10,"temp_c":25}'
    quarantine = tmp_path / "q.jsonl"
    result = subprocess.run(cli + ["filter", "--config", str(config_file()), "--quarantine",
                                   str(quarantine)], input=bad + b"\n" + good + b"\n",
                            capture_output=True, env=cli_env, timeout=120, check=False)
    assert result.returncode == 0, result.stderr.decode()
    assert result.stderr.count(b"event=input_quarantined") == 1
    kept = [orjson.loads(line) for line in quarantine.read_bytes().splitlines()]
    assert [k["raw"] for k in kept] == [f"{{garbage {i}" for i in range(200)]
    assert len(result.stdout.splitlines()) == 1


def test_calibration_store_keyword_uses_latest_accepted(config_file, tmp_path):
    """Accepted calibrations from the calibration store apply from their applies_from on;
    a rejected one never.  Expected pH from the chemistry core's own conversion."""
    from probeflow.calibration import Calibration, Verdict
    from probeflow.calibration.store import CalibrationStore

    db = tmp_path / "cal.sqlite"
    store = SqliteStore(SqliteStoreConfig(path=str(db)))  # creates the calibration tables too
    store.close()
    with CalibrationStore(db) as cal:
        cal.record_calibration("basin-1", Calibration(9.0, 90.0, 7.0), Verdict(True), ts=1.70e9)
        cal.record_calibration("basin-1", Calibration(-4.0, 97.0, 7.0), Verdict(True), ts=1.71e9)
        cal.record_calibration("basin-1", Calibration(30.0, 70.0, 7.0), Verdict(False, ("slope",)),
                               ts=1.72e9)
    text = config_file().read_text().replace("  - id: basin-1\n",
                                              "  - id: basin-1\n    calibration: store\n")
    path = tmp_path / "store-cal.yaml"
    path.write_text(text + f"stores:\n  - type: sqlite\n    path: {db}\n")
    service = build_service(load_config(path), collectors=[])
    service.links.start()  # what Service.start does first: load the calibration history
    out = service.converter.convert(ReadingBatch.from_columns(
        ["basin-1", "basin-1", "basin-1"], [1.69e9, 1.705e9, 1.73e9], [20.0] * 3, [25.0] * 3))
    service.shutdown()
    assert out.quality_names() == ["uncalibrated", "good", "good"]
    assert out.ph[1] == convert_readings(20.0, 25.0, 9.0, 90.0, 7.0).ph
    assert out.ph[2] == convert_readings(20.0, 25.0, -4.0, 97.0, 7.0).ph
