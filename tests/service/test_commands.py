"""probeflow filter, replay and run as real subprocesses, checked against probeflow.chemistry."""

from __future__ import annotations

import signal
import sqlite3
import subprocess
import time

import numpy as np
import orjson
import pandas as pd
import pytest

from probeflow.chemistry import convert_readings

CALIBRATIONS = {  # as in conftest.PROBES_YAML: offset_mv, slope_pct, zero_ph
    "tank-3": (-3.1, 98.2, 7.0),
    "tank-4": (12.5, 94.0, 6.9),
}

T0 = 1764633600.0


def _readings(n: int, seed: int = 3) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    probe = rng.choice(["tank-3", "tank-4"], n)
    temp = np.where(probe == "tank-4", np.nan, rng.uniform(5.0, 60.0, n))
    return pd.DataFrame({"probe": probe, "ts": T0 + np.arange(n) * 0.5,
                         "mv": rng.uniform(-350.0, 350.0, n).round(3), "temp_c": temp})


def _expected(df: pd.DataFrame) -> pd.DataFrame:
    """pH from probeflow.chemistry.convert_readings with the test probes' calibrations."""
    cal = np.array([CALIBRATIONS[p] for p in df["probe"]])
    temp = df["temp_c"].fillna(18.0).to_numpy()   # tank-4 has fixed_temp_c 18
    ref = convert_readings(df["mv"].to_numpy(), temp, cal[:, 0], cal[:, 1], cal[:, 2], 101.325)
    return pd.DataFrame({"ph": ref.ph, "neutral_ph": ref.neutral_ph, "neutral_dev": ref.neutral_dev})


def _jsonl(df: pd.DataFrame) -> bytes:
    rows = []
    for rec in df.to_dict("records"):
        if isinstance(rec["temp_c"], float) and np.isnan(rec["temp_c"]):
            del rec["temp_c"]
        rows.append(orjson.dumps(rec))
    return b"\n".join(rows) + b"\n"


def test_filter_gives_chemistry_ph_and_quarantines_bad_lines(cli, cli_env, config_file, tmp_path):
    df = _readings(400)
    data = _jsonl(df).split(b"\n")
    data[10:10] = [b'{"probe":"tank-3","ts":1764633600,"mv":"oops"}', b"{broken"]
    quarantine = tmp_path / "rejects.jsonl"
    result = subprocess.run(cli + ["filter", "--config", str(config_file()), "--quarantine",
                                   str(quarantine)], input=b"\n".join(data), capture_output=True,
                            env=cli_env, timeout=120, check=False)
    assert result.returncode == 0, result.stderr.decode()
    out = [orjson.loads(line) for line in result.stdout.splitlines()]
    assert [r["kind"] for r in out] == ["reading"] * 400
    got = pd.DataFrame(out)
    expected = _expected(df)
    np.testing.assert_allclose(got["ph"], expected["ph"], rtol=0, atol=1e-12)
    np.testing.assert_allclose(got["neutral_dev"], expected["neutral_dev"], rtol=0, atol=1e-12)
    assert got["probe"].tolist() == df["probe"].tolist()
    assert got["ts"].iloc[1] == "2025-12-02T00:00:00.500000Z"
    rejects = [orjson.loads(line) for line in quarantine.read_bytes().splitlines()]
    assert [(r["reason"].split(":")[0], r["raw"]) for r in rejects] == [
        ("mv is not a number", '{"probe":"tank-3","ts":1764633600,"mv":"oops"}'),
        ("not valid JSON", "{broken")]
    assert b"input_quarantined" in result.stderr


@pytest.mark.parametrize("fmt", ["jsonl", "csv", "parquet"])
def test_replay_into_sqlite_gives_chemistry_ph(cli, cli_env, config_file, tmp_path, fmt):
    df = _readings(300, seed=5)
    recording = tmp_path / f"rec.{fmt}"
    if fmt == "jsonl":
        recording.write_bytes(_jsonl(df))
    elif fmt == "csv":
        df.to_csv(recording, index=False)
        with recording.open("a") as f:
            f.write("tank-3,1764640000,not-a-number,20\n")
    else:
        df.to_parquet(recording)
    db = tmp_path / "replay.sqlite"
    config = config_file(f"stores:\n  - type: sqlite\n    path: {db}\n")
    result = subprocess.run(cli + ["replay", str(recording), "--config", str(config), "--speed", "0"],
                            capture_output=True, env=cli_env, timeout=120, check=False)
    assert result.returncode == 0, result.stderr.decode()
    con = sqlite3.connect(db)
    got = pd.read_sql("SELECT * FROM readings ORDER BY ts", con)
    expected = _expected(df)
    assert len(got) == len(df)
    np.testing.assert_allclose(got["ph"], expected["ph"], rtol=0, atol=1e-12)
    np.testing.assert_allclose(got["neutral_ph"], expected["neutral_ph"], rtol=0, atol=1e-12)
    assert set(got["quality"]) == {"good"}
    if fmt == "csv":
        assert con.execute("SELECT reason, raw FROM quarantine").fetchall() == [
            ("mv is not a number: 'not-a-number'", "tank-3,1764640000,not-a-number,20")]


def test_replay_speed_paces_by_recording_time(cli, cli_env, config_file, tmp_path):
    """10 s of recording at speed 10 cannot finish in under 1 s of wall time."""
    df = _readings(21)   # ts spans 10 s
    recording = tmp_path / "rec.jsonl"
    recording.write_bytes(_jsonl(df))
    db = tmp_path / "paced.sqlite"
    config = config_file(f"stores:\n  - type: sqlite\n    path: {db}\n")
    proc = subprocess.Popen(cli + ["replay", str(recording), "--config", str(config), "--speed", "10"],
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, env=cli_env)
    start = time.monotonic()
    proc.communicate(timeout=60)
    assert proc.returncode == 0
    assert time.monotonic() - start >= 1.0
    assert sqlite3.connect(db).execute("SELECT COUNT(*) FROM readings").fetchone()[0] == 21


def test_run_stops_on_sigterm_with_every_reading_stored(cli, cli_env, config_file, tmp_path):
    db = tmp_path / "run.sqlite"
    config = config_file(f"collectors:\n  - type: stdin\nstores:\n  - type: sqlite\n    path: {db}\n")
    proc = subprocess.Popen(cli + ["run", "--config", str(config)], stdin=subprocess.PIPE,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, env=cli_env)
    assert proc.stdin is not None and proc.stderr is not None
    for line in proc.stderr:                  # wait until the service is up
        if b"event=service_started" in line:
            break
    df = _readings(2000, seed=9)
    proc.stdin.write(_jsonl(df))
    proc.stdin.write(_jsonl(df.iloc[:50]))    # the same readings again: stored once
    proc.stdin.flush()
    proc.send_signal(signal.SIGTERM)
    proc.wait(timeout=30)
    err = proc.stderr.read()
    assert proc.returncode == 0, err.decode()
    con = sqlite3.connect(db)
    assert con.execute("SELECT COUNT(*), COUNT(DISTINCT probe || ts) FROM readings").fetchone() == (2000, 2000)
    assert b"event=service_stopped" in err
