"""Live outputs reach real readers intact: a real mosquitto broker, a real pseudo-terminal,
the command's printed device path, and the in-process collector."""

from __future__ import annotations

import subprocess
import sys
import threading
import time
from collections import defaultdict
from pathlib import Path

import numpy as np
import orjson
import paho.mqtt.client as mqtt
import pytest
import serial
from sim_scenarios import with_faults

from probeflow.batch import ReadingBatch
from probeflow.collectors.base import CollectorContext
from probeflow.simulate.collector import SimulatorCollector
from probeflow.simulate.encode import encode_lines
from probeflow.simulate.generator import Readings, Simulation
from probeflow.simulate.outputs.mqtt import MqttOutput
from probeflow.simulate.outputs.serial import SerialOutput
from probeflow.simulate.pacing import Pacer
from probeflow.simulate.run import run_simulation

ROOT = Path(__file__).parents[2]


def _scenario():
    return with_faults("c-1", [{"kind": "garbled", "at": "1min", "duration": "1min", "fraction": 0.3},
                               {"kind": "duplicate", "at": "2min", "duration": "1min"}])


def _all_readings(sim: Simulation) -> Readings:
    parts = [c.readings for c in sim.chunks()]
    first = parts[0]
    garble = np.concatenate([p.garble if p.garble is not None else np.zeros(len(p), np.uint64)
                             for p in parts])
    return Readings(first.probes, *(np.concatenate([getattr(p, f) for p in parts])
                                    for f in ("code", "ts", "mv", "temp_c", "ohms")), garble)


class Subscriber:
    """A plain paho subscriber collecting (topic, payload) in arrival order."""

    def __init__(self, port: int, topic: str) -> None:
        self.messages: list[tuple[str, bytes]] = []
        self.ready = threading.Event()
        self.client = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2, client_id="test-sub")

        def on_connect(client, userdata, flags, reason_code, properties):
            client.subscribe(topic, qos=1)

        def on_subscribe(client, userdata, mid, reason_codes, properties):
            self.ready.set()

        def on_message(client, userdata, msg):
            self.messages.append((msg.topic, msg.payload))

        self.client.on_connect = on_connect
        self.client.on_subscribe = on_subscribe
        self.client.on_message = on_message
        self.client.connect("127.0.0.1", port)
        self.client.loop_start()
        assert self.ready.wait(10)

    def wait_for(self, count: int, timeout: float = 30.0) -> None:
        deadline = time.monotonic() + timeout
        while len(self.messages) < count and time.monotonic() < deadline:
            time.sleep(0.05)

    def close(self) -> None:
        self.client.disconnect()
        self.client.loop_stop()


@pytest.mark.services
@pytest.mark.parametrize("batch", [1, 7])
def test_mqtt_reaches_a_real_subscriber_intact(mosquitto, batch: int) -> None:
    sim = Simulation(_scenario(), 3, duration_ms=240_000)
    expected = _all_readings(Simulation(_scenario(), 3, duration_ms=240_000))
    lines = encode_lines(expected, "json")
    want: dict[str, list[bytes]] = defaultdict(list)
    for code, line in zip(expected.code.tolist(), lines):
        want[f"testworks/{expected.probes[code]}/reading"].append(line)

    sub = Subscriber(mosquitto.port, "testworks/+/reading")
    out = MqttOutput(mosquitto.url, "testworks", qos=1, batch=batch)
    run_simulation(sim, [out])
    out.close()
    sub.wait_for(out.published)
    sub.close()
    assert len(sub.messages) == out.published

    def unparseable(payload: bytes) -> bool:
        try:
            orjson.loads(payload)
        except orjson.JSONDecodeError:
            return True
        return False

    got: dict[str, list[bytes]] = defaultdict(list)
    for topic, payload in sub.messages:
        if payload.startswith(b"[") and not unparseable(payload):
            got[topic].extend(orjson.dumps(rec) for rec in orjson.loads(payload))
        else:
            got[topic].append(payload)
    assert got.keys() == want.keys()
    for topic, lines_of_topic in want.items():
        # per topic, good readings arrive in order and garbled ones in order (in batch
        # mode a garbled reading goes out alone, ahead of its batch)
        for bad in (False, True):
            assert ([p for p in got[topic] if unparseable(p) == bad]
                    == [p for p in lines_of_topic if unparseable(p) == bad]), (topic, bad)

    assert sum(unparseable(p) for _, p in sub.messages) == int((expected.garble != 0).sum()) > 0
    if batch > 1:
        assert out.published < len(lines) / 3


@pytest.mark.services
def test_simulate_command_publishes_to_mqtt(mosquitto) -> None:
    demo = ROOT / "simulators" / "scenarios" / "larkmoor-dairy.yaml"
    sub = Subscriber(mosquitto.port, "plant-x/+/reading")
    proc = subprocess.run(
        [sys.executable, "-m", "probeflow", "simulate", "--scenario", str(demo), "--mqtt",
         mosquitto.url, "--topic-prefix", "plant-x", "--batch", "10", "--duration", "10min",
         "--seed", "3"],
        check=False, capture_output=True, text=True, timeout=120, cwd=ROOT,
    )
    assert proc.returncode == 0, proc.stderr
    expected = int(proc.stderr.split(" readings delivered")[0].rsplit("\n", 1)[-1])
    received = 0
    deadline = time.monotonic() + 30
    while time.monotonic() < deadline:
        received = 0
        for _, payload in list(sub.messages):
            try:
                body = orjson.loads(payload)
            except orjson.JSONDecodeError:
                received += 1            # a garbled reading, alone in its message
                continue
            received += len(body) if isinstance(body, list) else 1
        if received >= expected:
            break
        time.sleep(0.1)
    sub.close()
    topics = {t for t, _ in sub.messages}
    assert received == expected > 0
    assert topics == {f"plant-x/{p}/reading" for p in
                      ("cip-ph-a", "cip-ph-b", "bal-ph-1", "bal-ph-2", "bal-ph-3", "outfall-ph")}


def _read_lines(path: str, count: int, timeout: float = 30.0) -> list[bytes]:
    """Read complete lines from a serial device with our own buffer (pitfalls guide)."""
    port = serial.Serial(path, baudrate=115200, timeout=0.2)
    buf = b""
    lines: list[bytes] = []
    deadline = time.monotonic() + timeout
    try:
        while len(lines) < count and time.monotonic() < deadline:
            buf += port.read(port.in_waiting or 1)
            *done, buf = buf.split(b"\r\n")
            lines.extend(done)
    finally:
        port.close()
    return lines


def test_serial_lines_through_a_real_pty_intact() -> None:
    sc = _scenario()
    expected = _all_readings(Simulation(sc, 8, duration_ms=180_000))
    want = encode_lines(expected, "csv", with_ts=False, ohms_column=True)
    out = SerialOutput(baud=460_800, layout="csv", ohms_column=True)
    result: list[list[bytes]] = []
    reader = threading.Thread(target=lambda: result.append(_read_lines(out.path, len(want))))
    reader.start()
    time.sleep(0.3)          # let the reader open the port first
    run_simulation(Simulation(sc, 8, duration_ms=180_000), [out])
    reader.join(60)
    out.close()
    assert result and result[0] == want
    fields = [line.split(b",") for line in want if line.startswith(b"w-2")]
    assert fields and all(len(f) == 4 and f[2] == b"" and float(f[3]) > 100 for f in fields)


def test_simulate_command_prints_the_pty_path_and_feeds_it(tmp_path: Path) -> None:
    demo = ROOT / "simulators" / "scenarios" / "larkmoor-dairy.yaml"
    proc = subprocess.Popen(
        [sys.executable, "-m", "probeflow", "simulate", "--scenario", str(demo), "--serial",
         "--baud", "115200", "--layout", "kv", "--duration", "5min", "--speed", "0", "--seed", "2"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, cwd=ROOT,
    )
    try:
        assert proc.stdout is not None
        path = proc.stdout.readline().decode().strip()
        assert path.startswith("/dev/pts/")
        lines = _read_lines(path, 50)
    finally:
        proc.terminate()
        proc.wait(10)
    assert len(lines) == 50
    for line in lines[1:]:       # the first may be partial if it began before we opened
        pairs = dict(token.split(b"=") for token in line.split(b" "))
        assert pairs[b"probe"] in {b"cip-ph-a", b"cip-ph-b", b"bal-ph-1", b"bal-ph-2", b"bal-ph-3",
                                   b"outfall-ph"}
        float(pairs[b"mv"])


def test_in_process_collector_emits_batches_and_quarantines_garbled(tmp_path: Path) -> None:
    import yaml
    from sim_scenarios import BASE

    data = dict(BASE)
    data["probes"] = [dict(p) for p in BASE["probes"]]
    data["probes"][2]["faults"] = [{"kind": "garbled", "at": "1min", "duration": "1min",
                                    "fraction": 0.3}]
    path = tmp_path / "plant.yaml"
    path.write_text(yaml.safe_dump(data))
    batches: list[ReadingBatch] = []
    quarantined = []
    ctx = CollectorContext("sim", batches.append, quarantined.append)
    config = SimulatorCollector.Config.model_validate(
        {"type": "simulator", "scenario": str(path), "speed": 0, "duration": "5min", "seed": 4,
         "start": "2026-03-02T06:00:00Z"})
    col = SimulatorCollector(config, ctx)
    col.start()
    deadline = time.monotonic() + 30
    while not col.done and time.monotonic() < deadline:
        time.sleep(0.05)
    col.stop()
    assert col.done
    got = ReadingBatch.concat(batches)
    expected = _all_readings(Simulation(col.simulation.scenario, 4, duration_ms=300_000))
    good = expected.garble == 0
    assert len(got) == good.sum() == ctx.counters.received
    assert np.array_equal(got.ts, expected.ts[good])
    assert np.array_equal(got.mv, expected.mv[good])
    assert list(got.probe) == list(expected.probe_ids()[good])
    assert len(quarantined) == (~good).sum() > 0
    assert all(q.reason.startswith("garbled") for q in quarantined)


def test_paced_run_spreads_readings_over_simulated_time_divided_by_speed() -> None:
    """speed 600: ten simulated minutes are released over one wall second, in steps.
    A fake clock records the waits, so nothing here depends on the machine's speed."""
    sim = Simulation(_scenario(), 1, duration_ms=600_000)
    now = [100.0]
    waits: list[float] = []

    def sleep(seconds: float) -> bool:
        waits.append(seconds)
        now[0] += seconds
        return False

    released: list[tuple[float, float]] = []     # (wall time, newest ts in the piece)

    class Recorder:
        def write(self, r: Readings) -> None:
            released.append((now[0], float(r.ts.max())))

        def close(self) -> None:
            pass

    pacer = Pacer(600.0, sim.start, clock=lambda: now[0], sleep=sleep)
    run_simulation(sim, [Recorder()], pacer=pacer)
    assert sum(waits) == pytest.approx((600.0 - 1.0) / 600.0, abs=0.06)
    assert len(released) > 15
    for wall, newest in released:            # nothing is released before it is due
        assert wall - 100.0 >= (newest - sim.start) / 600.0 - 1e-9
    stop_pacer = Pacer(600.0, sim.start, clock=lambda: now[0], sleep=lambda s: True)
    assert run_simulation(Simulation(_scenario(), 1, duration_ms=600_000), [Recorder()],
                          pacer=stop_pacer).delivered < 10


def test_accelerated_run_never_stamps_a_reading_in_the_future(tmp_path) -> None:
    """speed > 1 without a start: the run is placed so that simulated time reaches the present
    at its end (the demo's readings must not read "in the future" in status views)."""
    import yaml
    from sim_scenarios import BASE

    path = tmp_path / "plant.yaml"
    path.write_text(yaml.safe_dump(BASE))
    batches: list[ReadingBatch] = []
    ctx = CollectorContext("sim", batches.append, lambda item: None)
    config = SimulatorCollector.Config.model_validate(
        {"type": "simulator", "scenario": str(path), "speed": 1200, "duration": "10min", "seed": 4})
    col = SimulatorCollector(config, ctx)
    wall_start = time.time()
    col.start()
    deadline = time.monotonic() + 60
    while not col.done and time.monotonic() < deadline:
        time.sleep(0.05)
    col.stop()
    wall_end = time.time()
    got = ReadingBatch.concat(batches)
    assert col.done and len(got) > 0
    assert got.ts.max() <= wall_end
    assert got.ts.min() >= wall_start - 600 - 1     # ten simulated minutes before the start
