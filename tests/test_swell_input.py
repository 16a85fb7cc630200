"""The swell a crew reports on <prefix>/swell: validated, bounded, never fatal, used by the sea state."""

from __future__ import annotations

import json
import time
import uuid

import paho.mqtt.client as paho
import pytest
from paho.mqtt.enums import CallbackAPIVersion

from daemon.core.pipeline import Pipeline
from daemon.intake.swell import MAX_SWELL_BYTES, SwellReport, parse_swell
from daemon.outlets.mqtt import MqttSettings, MqttSink
from estimators.sea_state import SeaStateEstimator, SeaStateParams


@pytest.mark.parametrize("payload,expect", [
    (b'{"period_s": 11, "from_deg": 250}', SwellReport(11.0, 250.0)),
    (b'{"period_s": 12.5, "from_deg": 360}', SwellReport(12.5, 0.0)),
    (b'{"period_s": null}', SwellReport(None, None)),
    (b"{}", SwellReport(None, None)),
    (b"", SwellReport(None, None)),  # MQTT: an empty retained message clears the topic
    (b'{"period_s": 2, "from_deg": 250}', None),  # not a swell
    (b'{"period_s": 45, "from_deg": 250}', None),
    (b'{"period_s": 11}', None),  # a period without a direction tells nothing about the current against it
    (b'{"period_s": 11, "from_deg": -5}', None),
    (b'{"period_s": true, "from_deg": 250}', None),
    (b'{"period_s": "11", "from_deg": 250}', None),
    (b'{"period_s": NaN, "from_deg": 250}', None),  # Python's json reads NaN: refused as not finite
    (b'{"period_s": 11, "from_deg": 250, "height_m": 2}', None),
    (b'[11, 250]', None),
    (b"{not json", None),
    (b"\xff\xfe", None),
    (b"[" * 5000 + b"]" * 5000, None),  # too large (and too deep)
    (json.dumps({"period_s": 11, "from_deg": 250, "x": "y" * 400}).encode(), None),
])
def test_parse_swell(payload, expect):
    report, why = parse_swell(payload)
    assert report == expect
    assert bool(why) == (expect is None)


def test_size_bound():
    ok = b'{"period_s": 11, "from_deg": 250}'
    assert parse_swell(ok + b" " * (MAX_SWELL_BYTES - len(ok)))[0] == SwellReport(11.0, 250.0)
    assert parse_swell(ok + b" " * (MAX_SWELL_BYTES - len(ok) + 1))[0] is None


class _Alerts:
    def on_condition(self, c):
        return []

    def tick(self, t):
        return []


def test_pipeline_hands_a_report_to_the_sea_state_even_before_data():
    # GIVEN a pipeline with no data yet (a retained report arrives at connect, before any sentence)
    est = SeaStateEstimator(SeaStateParams(swell_period_s=9.0, swell_from_deg=180.0))
    pipe = Pipeline([est], [], _Alerts())
    assert pipe.report_swell(b'{"period_s": 13, "from_deg": 270}') == ""
    assert pipe.report_swell(b'{"period_s": 13}') != ""  # refused, with its reason
    pipe.close()  # runs the queued commands
    assert est._swell == (13.0, 270.0)
    # WHEN the crew clears it, the config's swell is back
    pipe.report_swell(b'{"period_s": null}')
    pipe.close()
    assert est._swell == (9.0, 180.0)


def test_swell_over_a_real_broker(mosquitto):
    # MQTT 3.1.1 (OASIS 2014) 3.3.1.3: a retained message is delivered to a new subscriber
    host, port = mosquitto
    got: list[bytes] = []

    def on_swell(payload: bytes) -> str:
        got.append(payload)
        return parse_swell(payload)[1]

    topic = "testboat/swell"
    app = paho.Client(CallbackAPIVersion.VERSION2, client_id="display-swell")
    app.connect(host, port)
    app.loop_start()
    sink = None
    try:
        app.publish(topic, b'{"period_s": 11, "from_deg": 250}', qos=1, retain=True).wait_for_publish(2)
        sink = MqttSink(MqttSettings(url=f"mqtt://{host}:{port}", prefix="testboat",
                                     client_id=f"offwatch-{uuid.uuid4().hex[:8]}"), on_swell=on_swell)
        deadline = time.monotonic() + 10
        while sink.counters["swell_accepted"] < 1 and time.monotonic() < deadline:
            time.sleep(0.02)
        app.publish(topic, b'{"period_s": "long"}', qos=1).wait_for_publish(2)
        app.publish(topic, b"", qos=1, retain=True).wait_for_publish(2)
        while sink.counters["swell_accepted"] < 2 and time.monotonic() < deadline:
            time.sleep(0.02)
        assert sink.healthy()  # a bad report is counted and logged, never fatal
    finally:
        app.disconnect()
        app.loop_stop()
        if sink is not None:
            sink.close()
    assert got[0] == b'{"period_s": 11, "from_deg": 250}'
    assert sink.counters["swell_accepted"] == 2 and sink.counters["swell_ignored"] == 1
