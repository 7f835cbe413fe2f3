"""``probeflow run`` with an MQTT collector on a real mosquitto: alarm commands on the
command topic, and a data-gap alarm when the broker comes back without the session."""

from __future__ import annotations

import json
import shutil
import time

import paho.mqtt.client as paho
import pytest
from paho.mqtt.enums import CallbackAPIVersion

from probeflow.calibration import Calibration

from .conftest import wait_for

pytest.importorskip("probeflow.collectors.mqtt")

INLINE_A = Calibration(4.0, 97.0, 7.0)   # tank-a's inline calibration in the test config
ALARM = "tank-ph/tank-a/high"
COMMANDS = "marrow/probeflow/commands"


def publisher(broker) -> paho.Client:
    client = paho.Client(callback_api_version=CallbackAPIVersion.VERSION2, client_id="marrow-test-pub")
    client.connect("127.0.0.1", broker.port)
    client.loop_start()
    return client


def publish(client: paho.Client, topic: str, payload: dict) -> None:
    client.publish(topic, json.dumps(payload), qos=1).wait_for_publish(10)


def test_command_topic_and_data_gap_on_a_lost_session(make_site, service_of, mosquitto):
    site = make_site(collectors=(f"  - type: mqtt\n    name: marrow-broker\n    url: {mosquitto.url}\n"
                                 "    client_id: marrow-logger\n    topic: marrow/+/reading"))
    site.config.write_text(site.config.read_text().replace(
        "service:\n", f"service:\n  command_topic: {COMMANDS}\n"))
    svc = service_of(site)
    wait_for("the collector and command listener to connect",
             lambda: svc.log().count("mqtt_connected") >= 1 and "command_topic_listening" in svc.log())
    pub = publisher(mosquitto)
    try:
        mv = float(INLINE_A.to_mv(9.0, 25.0))
        publish(pub, "marrow/tank-a/reading", {"probe": "tank-a", "ts": time.time(), "mv": mv,
                                                "temp_c": 25.0})
        wait_for("the raised alarm", lambda: any(a["event"] == "raise" for a in site.alerts(ALARM)))
        publish(pub, COMMANDS, {"command": "ack", "alarm_id": ALARM})
        wait_for("the acknowledgement", lambda: any(a["event"] == "ack" for a in site.alerts(ALARM)))
        assert site.alerts(ALARM)[-1]["state"] == "ack_active"
        publish(pub, COMMANDS, {"command": "shelve", "alarm_id": ALARM})   # no minutes: rejected
        wait_for("the rejection in the log", lambda: "command_rejected" in svc.log())
    finally:
        pub.loop_stop()
        pub.disconnect()
    assert not [a for a in site.alerts() if a["alarm_id"].startswith("data-gap/")]

    # the broker restarts without its persistence file: the session is gone
    mosquitto.kill()
    shutil.rmtree(mosquitto.dir / "data")
    (mosquitto.dir / "data").mkdir()
    mosquitto.start()
    gap = wait_for("the data-gap alarm", lambda: site.alerts("data-gap/marrow-broker/session"))
    assert [(a["event"], a["state"]) for a in gap] == [("raise", "unack_active"),
                                                       ("clear", "unack_returned")]
    assert "DATA GAP" in gap[0]["message"]
    assert svc.terminate() == 0
