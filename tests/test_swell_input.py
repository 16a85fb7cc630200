"""The swell a crew reports on <prefix>/swell: validated, bounded, never fatal, used by the sea state."""

from __future__ import annotations

import json
import time
import uuid

import paho.mqtt.client as paho
import pytest
from paho.mqtt.enums import CallbackAPIVersion

from daemon.core.assembly import build
from daemon.core.config import load_config
from daemon.core.pipeline import Pipeline
from daemon.core.readings import RawLine, Reading
from daemon.intake.replayfiles import item_time, iter_replay
from daemon.intake.swell import MAX_SWELL_BYTES, SWELL_SOURCE, SwellReport, parse_swell
from daemon.outlets.mqtt import MqttSettings, MqttSink
from daemon.outlets.recording.reading import iter_raw
from daemon.outlets.recording.recorder import Recorder
from daemon.outlets.recording.tag_nmea import export_tag_nmea
from estimators.samples import Depth, Swell
from estimators.sea_state import SeaStateEstimator
from tests.helpers import Keep

T0 = 1_780_000_000.0


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


def test_pipeline_feeds_a_report_as_an_input_even_before_data():
    # GIVEN a pipeline with no data yet (a retained report arrives at connect, before any sentence)
    keep = Keep()
    pipe = Pipeline([SeaStateEstimator()], [keep], _Alerts())
    assert pipe.report_swell(b'{"period_s": 13, "from_deg": 270}') == ""
    assert pipe.report_swell(b'{"period_s": 13}') != ""  # refused, with its reason: nothing fed
    # WHEN the first reading comes, the report goes in first, stamped with that reading's data time
    pipe.feed(Reading("gps", Depth(T0, 12.0), T0))
    pipe.report_swell(b'{"period_s": null}')  # and a clearing one later, at the data time of then
    pipe.feed(Reading("gps", Depth(T0 + 5.0, 12.0), T0 + 5.0))
    pipe.close()
    # THEN each is a raw line of the swell source (for the recorder) and a Swell reading, in data time
    assert [(r.source, r.t_s, r.text) for r in keep.raws] == [
        (SWELL_SOURCE, T0, '{"period_s":13.0,"from_deg":270.0}'),
        (SWELL_SOURCE, T0, '{"period_s":null,"from_deg":null}')]
    assert pipe.runner.ctx.history.latest(Swell) == Swell(T0, None, None)


def test_a_recording_replays_the_crew_swell_to_the_same_sea_state(short_passage, tmp_path):
    # GIVEN the short passage run with a recorder, the crew reporting a 9-s swell from 030 (into the
    # 3-kn current setting 030) after 12 minutes and clearing it after 20, as an MQTT thread would
    cfg = load_config(short_passage["cfg"])
    db = tmp_path / "with-swell.sqlite"
    t0 = short_passage["t0"]
    first, recorder = Keep(), Recorder.open_file(db)
    parts = build(cfg, [first, recorder], live=False)
    said: list[str] = []
    for item in iter_replay([short_passage["nmea"]], parts.make_ingest):
        t = item_time(item)
        if t >= t0 + 12 * 60 and not said:
            said.append(parts.pipeline.report_swell(b'{"period_s": 9, "from_deg": 30}'))
        if t >= t0 + 20 * 60 and len(said) == 1:
            said.append(parts.pipeline.report_swell(b"{}"))
        parts.pipeline.feed(item)
    parts.pipeline.close()
    assert said == ["", ""]
    # WHEN the recording is replayed (no MQTT at all)
    again = Keep()
    parts2 = build(cfg, [again], live=False)
    for item in iter_replay([db], parts2.make_ingest):
        parts2.pipeline.feed(item)
    parts2.pipeline.close()

    # THEN the sea state is the same, payload for payload, and the swell was in it only while reported
    def sea_states(keep):
        return [(m.t_s, dict(m.payload)) for m in keep.messages if m.topic.endswith("/sea_state")]

    ran, replayed = sea_states(first), sea_states(again)
    assert ran == replayed
    with_swell = [t for t, p in ran if p.get("swell_period_s") == 9.0]
    assert with_swell and t0 + 12 * 60 <= min(with_swell) and max(with_swell) <= t0 + 20 * 60 + 2
    # AND the crew's report is never a silent feed (sensor_stale): it is said once
    assert not any(m.topic.endswith("/alerts/sensor_stale") and "swell" in json.dumps(m.payload)
                   for m in again.messages)


def test_a_tag_export_leaves_the_json_report_out(tmp_path):
    # the TAG-block export is NMEA 0183 (v4.10 TAG blocks): a JSON line has no place in it
    db = tmp_path / "r.sqlite"
    rec = Recorder.open_file(db)
    pipe = Pipeline([SeaStateEstimator()], [rec], _Alerts())
    pipe.feed(RawLine("gps", T0, T0, "$GPZDA,000000.00,01,06,2026,00,00*6A"))
    pipe.report_swell(b'{"period_s": 9, "from_deg": 30}')
    pipe.feed(RawLine("gps", T0 + 1.0, T0 + 1.0, "$GPZDA,000001.00,01,06,2026,00,00*6B"))
    pipe.close()
    assert [line.source for line in iter_raw(db)] == ["gps", SWELL_SOURCE, "gps"]
    out = tmp_path / "r.nmea"
    assert export_tag_nmea(db, out) == 2
    assert "period_s" not in out.read_text()


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


def test_a_recorded_report_that_no_longer_parses_is_counted_and_gives_no_reading():
    # a recording is data too: a damaged line (hand-edited, or from a future version) is never fatal
    from daemon.intake.swell import replayed

    good = replayed(RawLine(SWELL_SOURCE, T0, T0, '{"period_s":11.0,"from_deg":250.0}'))
    assert [type(i).__name__ for i in good] == ["RawLine", "Reading"] and good[1].sample == Swell(T0, 11.0, 250.0)
    bad = replayed(RawLine(SWELL_SOURCE, T0, T0, '{"period_s":"eleven"}'))
    assert len(bad) == 1 and bad[0].counts == (("unparseable", 1),)
