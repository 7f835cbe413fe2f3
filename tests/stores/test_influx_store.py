"""InfluxStore against a real victoria-metrics (InfluxDB v2 write API, read back via /api/v1/export).

Outages are simulated by stopping the server for a few seconds with retry
delays capped at 0.4 s, so each test stays short.

Values in the batches are invented demo numbers; what is checked is that the
server holds exactly what was written (floats compared exactly, timestamps in ms).
"""

from __future__ import annotations

import logging
import math
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest
from servers import free_port
from stores.conftest import T0, make_batch

from probeflow.errors import ConfigError
from probeflow.events import AlertEvent
from probeflow.stores.influx import InfluxStoreConfig, resolve_token
from probeflow.stores.outbox import Outbox

REPO = Path(__file__).resolve().parents[2]
FIELDS = ("ph", "mv", "temp_c", "neutral_ph", "neutral_dev")


def points(victoria, measurement: str = "ph") -> dict[tuple[str, dict], dict[int, float]]:
    """{(field, frozenset(tags)): {ts_ms: value}} from the export API; fails on a repeated (series, ts)."""
    out: dict = {}
    for series in victoria.export(f'{{__name__=~"{measurement}_.+"}}'):
        labels = dict(series["metric"])
        name = labels.pop("__name__")[len(measurement) + 1 :]
        stamps = series["timestamps"]
        assert len(stamps) == len(set(stamps)), f"a point stored twice in {series['metric']}"
        out[(name, frozenset(labels.items()))] = dict(zip(stamps, series["values"]))
    return out


def wait_until(predicate, timeout: float = 30.0) -> bool:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if predicate():
            return True
        time.sleep(0.05)
    return False


def test_points_read_back_equal_with_documented_tags(victoria, store_factory):
    store = store_factory(victoria.url)
    nan = math.nan
    batch = make_batch(
        ["tank-3", "tank-3", "outfall-1"], [T0 + 0.25, T0 + 1.5, T0 + 0.001],
        ph=[7.123456789012345, 8.5, nan], mv=[-12.34, -88.125, 301.5], temp_c=[41.7, 41.75, nan],
        neutral_ph=[6.7, 6.69, nan], neutral_dev=[0.423456789012345, 1.81, nan], quality=[0, 0, 2],
    )
    alert = AlertEvent("effluent-band", "tank-3", "ph", "high", "raise", "unack_active", T0 + 1.5, 8.5, 8.0)
    store.write(batch, [alert])
    assert store.flush() is True
    got = points(victoria)
    tank = frozenset({"probe": "tank-3", "quality": "good", "site": "north-weir"}.items())
    outfall = frozenset({"probe": "outfall-1", "quality": "temp_fault", "site": "north-weir"}.items())
    for f in FIELDS:
        col = getattr(batch, f)
        stored = got[(f, tank)]
        assert sorted(stored) == [1764633600250, 1764633601500]
        # victoria-metrics keeps about 12 significant decimal digits of a float (its docs on
        # value compression, from memory); values with fewer digits come back exactly.
        assert stored[1764633600250] == pytest.approx(col[0], rel=1e-11, abs=0)
        assert stored[1764633601500] == col[1]
    assert got[("mv", outfall)] == {1764633600001: 301.5}
    assert ("ph", outfall) not in got and ("temp_c", outfall) not in got  # NaN fields left out
    alerts = points(victoria, "ph_alert")
    key = frozenset({"rule": "effluent-band", "probe": "tank-3", "limit": "high", "site": "north-weir"}.items())
    assert alerts[("value", key)] == {1764633601500: 8.5}
    assert alerts[("threshold", key)] == {1764633601500: 8.0}
    assert store.outbox_lines == 0 and store.forwarded_lines == 4  # 3 readings + 1 alert


def test_same_batch_twice_gives_one_point_per_probe_and_time(victoria, store_factory):
    store = store_factory(victoria.url)
    batch = make_batch(["tank-3", "tank-4"] * 50, T0 + np.repeat(np.arange(50), 2) * 0.5)
    store.write(batch, [])
    store.write(batch, [])
    assert store.flush() is True
    got = points(victoria)  # raises on a repeated timestamp within a series
    ph_series = {k: v for k, v in got.items() if k[0] == "ph"}
    assert len(ph_series) == 2 and all(len(v) == 50 for v in ph_series.values())


def test_probe_ids_with_special_characters_round_trip(victoria, store_factory):
    probes = ["tank 3,a=b", "x=y", "back\\slash", "ends\\", 'quote"d', "µ-cell 2"]
    store = store_factory(victoria.url)
    store.write(make_batch(probes, [T0] * len(probes)), [])
    assert store.flush() is True
    got = points(victoria)
    stored = {dict(tags)["probe"] for (field, tags) in got if field == "ph"}
    assert stored == set(probes)


def test_server_down_nothing_lost_and_drained_after_restart(victoria, store_factory):
    store = store_factory(victoria.url)
    first = make_batch(["tank-3"] * 100, T0 + np.arange(100) * 0.1)
    store.write(first, [])
    assert store.flush() is True
    # SIGTERM: victoria-metrics itself keeps its last second or so of points only in memory
    # and loses them on SIGKILL, which would be the server's loss, not the store's.
    victoria.stop()
    second = make_batch(["tank-3"] * 300, T0 + 10 + np.arange(300) * 0.1)
    store.write(second, [])  # returns at once: the outbox takes it
    assert store.outbox_lines == 300
    assert store.flush(timeout=10) is False  # unreachable: returns, keeps everything
    assert wait_until(lambda: store.failed_attempts >= 3)
    assert store.outbox_lines == 300 and store.server_reachable is False
    victoria.start()
    assert store.flush(timeout=30) is True
    got = points(victoria)
    ph = got[("ph", frozenset({"probe": "tank-3", "quality": "good", "site": "north-weir"}.items()))]
    assert len(ph) == 400
    assert store.outbox_lines == 0 and store.server_reachable is True


def test_refused_line_is_split_out_and_the_good_lines_land(victoria, store_factory, tmp_path):
    """victoria-metrics answers 400 to a line longer than its -influx.maxLineSize (256 KiB)."""
    good = [f"ph,probe=tank-{k},quality=good,site=north-weir ph={7 + k / 100!r} {1764633600000 + k}"
            for k in range(40)]
    bad = "ph,probe=" + "z" * 1_000_000 + " ph=7.0 1764633600000"
    box = Outbox(tmp_path / "outbox.sqlite")
    box.append(good[:17] + [bad] + good[17:], "ms")
    box.close()
    store = store_factory(victoria.url)  # the forwarder starts on what the outbox holds
    assert store.flush() is True
    assert store.rejected_lines == 1
    [(origin, line, reason)] = store.outbox.rejected_rows()
    assert origin == "server" and line == bad
    assert reason.startswith("HTTP 400") and "too long line" in reason
    got = points(victoria)
    assert {dict(tags)["probe"] for (f, tags) in got} == {f"tank-{k}" for k in range(40)}


def test_token_never_in_logs_or_repr(victoria, store_factory, monkeypatch, caplog, tmp_path):
    token = "tok-9f3c2-very-private"
    monkeypatch.setenv("NORTH_WEIR_INFLUX_TOKEN", token)
    caplog.set_level(logging.DEBUG)
    store = store_factory(victoria.url, token=None, token_env="NORTH_WEIR_INFLUX_TOKEN")
    store.write(make_batch(["tank-3"], [T0]), [])
    assert store.flush() is True
    victoria.stop()  # errors get logged too
    store.write(make_batch(["tank-3"], [T0 + 1]), [])
    assert store.flush(timeout=10) is False
    down = store_factory(f"http://127.0.0.1:{free_port()}", token=token,
                         outbox_path=str(tmp_path / "other.sqlite"))
    down.write(make_batch(["tank-3"], [T0]), [])
    down.flush(timeout=10)
    texts = [caplog.text, repr(store), repr(down), repr(store.config), str(store.config.model_dump()),
             store.config.model_dump_json(), repr(down.config), str(down.config)]
    assert "influx server not taking points" in caplog.text  # the outage was logged
    assert all(token not in text for text in texts)


def test_missing_token_variable_is_a_config_error_naming_the_key(monkeypatch):
    monkeypatch.delenv("NO_SUCH_INFLUX_TOKEN", raising=False)
    from pydantic import ValidationError

    with pytest.raises(ValidationError) as info:
        InfluxStoreConfig(type="influx", url="http://127.0.0.1:1", org="o", bucket="b",
                          token_env="NO_SUCH_INFLUX_TOKEN")
    [err] = info.value.errors()
    assert err["loc"] == ("token_env",) and "NO_SUCH_INFLUX_TOKEN is not set" in err["msg"]
    monkeypatch.setenv("NO_SUCH_INFLUX_TOKEN", "x")
    cfg = InfluxStoreConfig(type="influx", url="http://127.0.0.1:1", org="o", bucket="b",
                            token_env="NO_SUCH_INFLUX_TOKEN")
    monkeypatch.delenv("NO_SUCH_INFLUX_TOKEN")
    with pytest.raises(ConfigError) as cerr:
        resolve_token(cfg)
    assert cerr.value.problems[0][0] == "token_env"


def test_unwritable_row_kept_aside_and_the_rest_lands(victoria, store_factory):
    store = store_factory(victoria.url)
    store.write(make_batch(["tank-3", "bad\nid"], [T0, T0]), [])
    assert store.flush() is True
    [(origin, row, reason)] = store.outbox.rejected_rows()
    assert origin == "builder" and "probe='bad\\nid'" in row
    assert reason == "probe 'bad\\nid' contains a line break, which line protocol cannot carry"
    assert {dict(t)["probe"] for (_, t) in points(victoria)} == {"tank-3"}


def test_outbox_from_a_killed_process_is_sent_on_next_start(victoria, store_factory, tmp_path):
    """Write through the store in a subprocess whose server is unreachable, SIGKILL it, start again."""
    outbox_path = tmp_path / "outbox.sqlite"
    script = textwrap.dedent(f"""
        import sys, time
        sys.path.insert(0, {str(REPO)!r}); sys.path.insert(0, {str(REPO / 'tests')!r})
        import numpy as np
        from probeflow.stores.base import StoreContext
        from probeflow.stores.influx import InfluxStore, InfluxStoreConfig
        from stores.conftest import make_batch, T0
        cfg = InfluxStoreConfig(type="influx", url="http://127.0.0.1:{free_port()}", org="o", bucket="b",
                                outbox_path={str(outbox_path)!r}, retry_initial_s=0.05, retry_max_s=0.2)
        store = InfluxStore(cfg, StoreContext("north-weir"))
        for k in range(10):
            store.write(make_batch(["tank-3"] * 100, T0 + k * 100 + np.arange(100)), [])
        print("written", flush=True)
        time.sleep(60)
    """)
    proc = subprocess.Popen([sys.executable, "-c", script], stdout=subprocess.PIPE, text=True)
    try:
        assert proc.stdout is not None and proc.stdout.readline().strip() == "written"
        proc.send_signal(signal.SIGKILL)
    finally:
        proc.wait(10)
    assert proc.returncode == -signal.SIGKILL
    store = store_factory(victoria.url, outbox_path=str(outbox_path))
    assert store.flush() is True
    got = points(victoria)
    ph = got[("ph", frozenset({"probe": "tank-3", "quality": "good", "site": "north-weir"}.items()))]
    assert sorted(ph) == [1764633600000 + 1000 * k for k in range(1000)]


def test_token_from_a_file_and_only_one_source(tmp_path):
    token_file = tmp_path / "influx.token"
    token_file.write_text("file-token-123\n")
    cfg = InfluxStoreConfig(type="influx", url="http://127.0.0.1:1", org="o", bucket="b",
                            token_file=str(token_file))
    assert resolve_token(cfg) == "file-token-123"
    from pydantic import ValidationError

    with pytest.raises(ValidationError, match="give the token one way only"):
        InfluxStoreConfig(type="influx", url="http://127.0.0.1:1", org="o", bucket="b",
                          token_file=str(token_file), token="x")
    with pytest.raises(ValidationError) as info:
        InfluxStoreConfig(type="influx", url="http://127.0.0.1:1", org="o", bucket="b",
                          token_file=str(tmp_path / "missing.token"))
    assert info.value.errors()[0]["loc"] == ("token_file",)


def test_quota_with_drop_oldest_while_server_is_down_counts_the_loss(store_factory, caplog, tmp_path):
    """Server unreachable, small quota, drop_oldest: the loss is counted and logged, never silent."""
    store = store_factory(f"http://127.0.0.1:{free_port()}", outbox_quota_mb=0.02, on_quota="drop_oldest",
                          batch_lines=50)
    with caplog.at_level(logging.WARNING, logger="test.influx"):
        for k in range(20):  # 50 lines of about 120 bytes each: three writes pass 80 % of 20 KiB
            store.write(make_batch(["tank-3"] * 50, T0 + k * 50 + np.arange(50)), [])
    assert store.dropped_lines > 0
    assert store.outbox_bytes <= 0.02 * 1024 * 1024
    assert store.outbox_lines + store.dropped_lines == 1000  # every point is either queued or counted
    assert store.metrics()["dropped_lines"] == store.dropped_lines
    assert "% full" in caplog.text and "oldest unsent points" in caplog.text
