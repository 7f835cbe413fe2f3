"""The test servers themselves work: a message goes through mosquitto, a point through victoria-metrics."""

from __future__ import annotations

import threading
import urllib.request

import paho.mqtt.client as mqtt


def test_mosquitto_delivers_and_survives_a_crash(mosquitto):
    got: list[bytes] = []
    ready = threading.Event()
    arrived = threading.Event()

    def on_connect(client, userdata, flags, reason_code, properties):
        client.subscribe("t/#", qos=1)

    def on_subscribe(client, userdata, mid, reason_codes, properties):
        ready.set()

    def on_message(client, userdata, msg):
        got.append(msg.payload)
        arrived.set()

    sub = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2, client_id="infra-sub")
    sub.on_connect, sub.on_subscribe, sub.on_message = on_connect, on_subscribe, on_message
    sub.connect("127.0.0.1", mosquitto.port)
    sub.loop_start()
    try:
        assert ready.wait(10)
        pub = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2, client_id="infra-pub")
        pub.connect("127.0.0.1", mosquitto.port)
        pub.loop_start()
        pub.publish("t/x", b"hello", qos=1).wait_for_publish(10)
        assert arrived.wait(10)
        assert got == [b"hello"]
        pub.loop_stop()
        mosquitto.restart(crash=True)
        assert mosquitto.proc is not None and mosquitto.proc.poll() is None
    finally:
        sub.loop_stop()


def test_victoria_accepts_v2_line_protocol_and_exports_it(victoria):
    body = b"ph,probe=t-1,site=x ph=7.25,mv=-12.5 1764633600250\n"
    req = urllib.request.Request(
        f"{victoria.url}/api/v2/write?org=o&bucket=b&precision=ms", data=body, method="POST"
    )
    with urllib.request.urlopen(req, timeout=10) as resp:
        assert resp.status == 204
    series = victoria.export('{__name__="ph_ph"}')
    assert len(series) == 1
    assert series[0]["metric"]["probe"] == "t-1"
    assert series[0]["values"] == [7.25]
    assert series[0]["timestamps"] == [1764633600250]


def test_a_server_that_cannot_listen_fails_at_once_with_its_log(tmp_path):
    """mosquitto exits when its port is taken: start() tries again, then fails with the log,
    without waiting out the 15 s listening timeout (a fault scenario must not hide it)."""
    import socket
    import time

    import pytest
    from servers import Mosquitto

    with socket.socket() as taken:
        taken.bind(("127.0.0.1", 0))   # bound, not listening: connects are refused, mosquitto's bind fails
        broker = Mosquitto(tmp_path / "broker", port=taken.getsockname()[1])
        t0 = time.monotonic()
        with pytest.raises(RuntimeError, match=r"did not start .*exited.*attempt 3") as info:
            broker.start()
        assert time.monotonic() - t0 < 12, "start() waited for the port instead of noticing the exit"
        assert str(info.value).count("Address already in use") == 3   # each attempt's log line
        assert broker.proc is None
