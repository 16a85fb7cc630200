"""``offwatch replay --mqtt`` against a real Mosquitto: what a display app on the boat receives.

A short simulated passage (invented boat, invented water; tools.simulator)
with a strong steady current (3 kn), a +3 °C sea-temperature front, a steep
pressure fall (12 hPa/h) and a 40-s GNSS outage, so in half an hour of data it
produces every state topic the pipeline has, an event and several alert
changes. The JSONL output of the same replay is the reference: interface.md
says it holds every message the replay publishes, in order.

Expected behaviour, from outside the project:
- MQTT 3.1.1 (OASIS, 2014): a retained message is kept by the broker and sent
  to a later subscriber (3.3.1.3); QoS 1 is delivered at least once, so
  duplicates may come (4.3.2); messages of one topic keep their order (4.6).
- interface.md: topics and fields; states retained, ``events`` not; alerts
  QoS 1; every alert change reaches the broker even across its restart.
"""

from __future__ import annotations

import json
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from tests.helpers import PREFIX, Display, wait_until
from tests.shared import REPO

SPEED = 100.0  # the paced replay: 30 min of data in 18 s
STATE_TOPICS = ("status", "position", "current", "pressure", "sea_temperature")


def replay_args(passage: dict, jsonl: Path, url: str, *extra: str) -> list[str]:
    return [sys.executable, "-m", "daemon", "replay", str(passage["nmea"]), "--config", str(passage["cfg"]),
            "--jsonl", str(jsonl), "--mqtt", url, "--quiet", *extra]


def read_jsonl(path: Path) -> list[dict]:
    return [json.loads(line) for line in path.read_text().splitlines()]


def alert_changes(messages) -> list[tuple[str, str]]:
    """(topic, compact payload JSON) of every alert message, in order."""
    return [(m["topic"], json.dumps(m["payload"], sort_keys=True)) for m in messages if "/alerts/" in m["topic"]]


def received_alerts(display: Display) -> list[tuple[str, str]]:
    got = display.received()
    return [(m.topic, json.dumps(m.payload, sort_keys=True)) for m in got if "/alerts/" in m.topic]


def missing_in_order(expected: list, received: list) -> list:
    """The expected items not found in ``received`` as a subsequence (extra and repeated items allowed)."""
    i = 0
    missing = []
    for item in expected:
        j = i
        while j < len(received) and received[j] != item:
            j += 1
        if j == len(received):
            missing.append(item)
        else:
            i = j + 1
    return missing


def test_replay_to_mqtt_feeds_every_topic_and_leaves_retained_states(short_passage, mosquitto, tmp_path):
    # GIVEN a display subscribed to offwatch/# (here testboat/#) before the replay starts
    host, port = mosquitto
    display = Display(host, port)
    out = tmp_path / "fast.jsonl"
    try:
        # WHEN the passage is replayed as fast as it goes, to the broker and to JSONL
        done = subprocess.run(replay_args(short_passage, out, f"mqtt://{host}:{port}"), cwd=REPO,
                              capture_output=True, text=True, timeout=120)
        assert done.returncode == 0, done.stderr[-3000:]
        sent = read_jsonl(out)
        topics = {m["topic"] for m in sent}
        # the file produces what the interface lists for it (no wind-over-current here: sea_state needs it)
        expected = {f"{PREFIX}/{t}" for t in (*STATE_TOPICS, "events")}
        assert expected <= topics, topics
        alert_topics = {t for t in topics if t.startswith(f"{PREFIX}/alerts/")}
        assert {f"{PREFIX}/alerts/{a}" for a in ("gnss_lost", "current_strong", "pressure_fall", "front")} <= alert_topics
        # THEN the display got every topic, and every alert change in order
        assert wait_until(lambda: topics <= display.topics(), 10), topics - display.topics()
        assert wait_until(lambda: not missing_in_order(alert_changes(sent), received_alerts(display)), 10), \
            missing_in_order(alert_changes(sent), received_alerts(display))
        # the event arrived as it was written, not retained
        event = display.on(f"{PREFIX}/events")[-1]
        assert event.payload == [m for m in sent if m["topic"] == f"{PREFIX}/events"][-1]["payload"]
        assert event.payload["kind"] == "front_crossing" and event.payload["warmer"] is True
    finally:
        display.close()

    # AND a display that comes later finds the latest state of every state topic and alert, retained
    late = Display(host, port)
    try:
        retained = alert_topics | {f"{PREFIX}/{t}" for t in STATE_TOPICS}
        assert wait_until(lambda: retained <= late.topics(), 10), retained - late.topics()
        assert all(m.retain for m in late.messages)
        assert f"{PREFIX}/events" not in late.topics()
        for topic in retained - {f"{PREFIX}/status"}:
            last_sent = [m for m in sent if m["topic"] == topic][-1]["payload"]
            assert late.latest(topic).payload == last_sent, topic
        # the replay ended cleanly: the status says offline, stopped
        assert late.latest(f"{PREFIX}/status").payload["state"] == "offline"
        # spot check of the values against the simulated truth: a steady 3 kn current toward 030
        current = late.latest(f"{PREFIX}/current").payload
        assert current["quality"] == "valid"
        assert abs(current["drift_kn"] - 3.0) < 0.3 and abs(current["set_deg"] - 30.0) < 8.0, current
    finally:
        late.close()


def test_broker_killed_and_restarted_mid_replay_loses_no_alert_change(short_passage, mosquitto, tmp_path):
    # GIVEN a display with a persistent session (its QoS-1 messages wait for it on the broker)
    host, port = mosquitto
    display = Display(host, port, persistent=True)
    out = tmp_path / "paced.jsonl"
    t0 = short_passage["t0"]
    proc = subprocess.Popen(replay_args(short_passage, out, f"mqtt://{host}:{port}", "--speed", str(SPEED)),
                            cwd=REPO, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        def data_time_seen() -> float:
            m = display.latest(f"{PREFIX}/status")
            return 0.0 if m is None else _unix(m.payload["time"])

        # WHEN the broker is killed (SIGKILL) 3 min into the data, just before the GNSS outage
        assert wait_until(lambda: data_time_seen() >= t0 + 180, 60), proc.poll()
        mosquitto.kill()
        t_kill_data = data_time_written(out)  # where the replay had got to (JSONL is written in blocks: at least)
        time.sleep(3.0)  # about 5 min of data go by without a broker
        t_restart = time.monotonic()
        t_restart_data = data_time_written(out)
        mosquitto.start()
        # THEN the replay reconnects and finishes cleanly
        n_before = len(display.messages)

        def first_new():
            """The first message offwatch sent after the restart (a retained one the broker kept is older)."""
            later = display.received(n_before)
            return next((m for m in later if _unix(m.payload["time"]) > t_restart_data), None)

        assert wait_until(first_new, 20)
        first_after = first_new()
        reconnect_s = first_after.at - t_restart
        stdout, stderr = proc.communicate(timeout=90)
        assert proc.returncode == 0, stderr[-3000:]
        sent = read_jsonl(out)
        expected = alert_changes(sent)
        # the test means something only if alert changes fell into the broker's absence
        # (the JSONL lags the replay by at most one write block, about 10 s of data here: 30 s margin)
        during = [m for m in sent if "/alerts/" in m["topic"] and t_kill_data + 30 < m["t"] < t_restart_data]
        assert during, (t_kill_data - t0, t_restart_data - t0)
        # AND every alert change of the JSONL reached the display, in order (duplicates allowed)
        assert wait_until(lambda: not missing_in_order(expected, received_alerts(display)), 20), \
            missing_in_order(expected, received_alerts(display))
        print(f"\nfigures: {len(expected)} alert changes, {len(during)} while the broker was away "
              f"(about {t_restart_data - t_kill_data:.0f} s of data); offwatch's first new message "
              f"{reconnect_s:.1f} s after the restart")
    finally:
        if proc.poll() is None:
            proc.send_signal(signal.SIGKILL)
            proc.wait(10)
        display.close()


def data_time_written(jsonl: Path) -> float:
    """The data time of the last whole line the replay has written so far."""
    lines = jsonl.read_bytes().split(b"\n")[:-1] if jsonl.exists() else []
    return json.loads(lines[-1])["t"] if lines else 0.0


def _unix(iso: str) -> float:
    from datetime import datetime
    return datetime.fromisoformat(iso.replace("Z", "+00:00")).timestamp()


@pytest.fixture
def forgetful_broker(mosquitto_broker, tmp_path):
    """A second Mosquitto without persistence: a restart forgets every retained message."""
    from tests.helpers import Mosquitto
    workdir = tmp_path / "forgetful"
    workdir.mkdir()
    broker = Mosquitto(workdir, persistence=False)
    broker.start()
    yield broker
    broker.stop()


def test_the_data_stream_does_not_depend_on_the_broker(short_passage, forgetful_broker, tmp_path):
    """Issue 14: what the link does (connect, reconnect, republish) never enters the JSONL or the recording."""
    # GIVEN a broker that forgets its retained messages when it restarts, and a display on it
    host, port = forgetful_broker
    display = Display(host, port)
    with_mqtt, recording = tmp_path / "with_mqtt.jsonl", tmp_path / "passage.sqlite"
    t0 = short_passage["t0"]
    proc = subprocess.Popen(replay_args(short_passage, with_mqtt, f"mqtt://{host}:{port}", "--speed", str(SPEED),
                                        "--record", str(recording)),
                            cwd=REPO, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        # WHEN the broker restarts once in the middle of the replay (22 min into the 30 of data:
        # after the front, so several alerts made their last change before it)
        def data_time_seen() -> float:
            m = display.latest(f"{PREFIX}/status")
            return 0.0 if m is None else _unix(m.payload["time"])

        assert wait_until(lambda: data_time_seen() >= t0 + 1320, 90), proc.poll()
        t_restart_data = data_time_seen()
        forgetful_broker.restart()
        _, stderr = proc.communicate(timeout=90)
        assert proc.returncode == 0, stderr[-3000:]
    finally:
        if proc.poll() is None:
            proc.send_signal(signal.SIGKILL)
            proc.wait(10)
        display.close()

    # AND the recording is replayed, and the file once more without a broker
    from_recording, without_mqtt = tmp_path / "from_recording.jsonl", tmp_path / "without_mqtt.jsonl"
    for source, out in ((recording, from_recording), (short_passage["nmea"], without_mqtt)):
        done = subprocess.run([sys.executable, "-m", "daemon", "replay", str(source), "--config",
                               str(short_passage["cfg"]), "--jsonl", str(out), "--quiet"],
                              cwd=REPO, capture_output=True, text=True, timeout=120)
        assert done.returncode == 0, done.stderr[-3000:]

    # THEN the three JSONL files are identical, byte for byte (interface.md: replay of a recording)
    assert with_mqtt.read_bytes() == from_recording.read_bytes()
    assert with_mqtt.read_bytes() == without_mqtt.read_bytes()

    # AND the broker, which forgot everything at the restart, got the latest retained message of every
    # topic again from the link: a display that comes now finds each alert's last change (MQTT 3.1.1, 3.3.1.3)
    sent = read_jsonl(with_mqtt)
    alert_topics = {m["topic"] for m in sent if "/alerts/" in m["topic"]}
    last_change = {topic: [m for m in sent if m["topic"] == topic][-1] for topic in alert_topics}
    # the check means something only if some alert last changed before the restart
    assert any(m["t"] < t_restart_data for m in last_change.values()), (t_restart_data - t0, last_change)
    late = Display(host, port)
    try:
        assert wait_until(lambda: alert_topics <= late.topics(), 10), alert_topics - late.topics()
        for topic, m in last_change.items():
            assert late.latest(topic).payload == m["payload"], topic
        assert late.latest(f"{PREFIX}/status").payload["state"] == "offline"  # the replay ended cleanly
    finally:
        late.close()


def test_replay_with_the_broker_gone_at_the_end_says_what_was_not_delivered(short_passage, tmp_path):
    """Issue 13 item 12: nothing undelivered is dropped in silence; exit status 3 (README, replay)."""
    from tests.helpers import free_port
    # GIVEN a broker address where nothing answers (a broker that went and does not come back)
    out = tmp_path / "gone.jsonl"
    done = subprocess.run(replay_args(short_passage, out, f"mqtt://127.0.0.1:{free_port()}", "--mqtt-wait", "1"),
                          cwd=REPO, capture_output=True, text=True, timeout=120)
    # THEN the replay finishes its outputs, waits its bound, and says what the broker never got
    assert done.returncode == 3, done.stderr[-2000:]
    n_alerts = len(alert_changes(read_jsonl(out)))
    line = next(ln for ln in done.stderr.splitlines() if "not delivered" in ln)
    assert f"{n_alerts} alert changes" in line and "after waiting 1 s" in line, line
