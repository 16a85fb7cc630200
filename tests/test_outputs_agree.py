"""Every output says the same: the recording and MQTT keep each message byte for byte as the JSONL has it.

interface.md: the JSONL holds every message a replay publishes, in order, one
``{"t": ..., "topic": ..., "payload": {...}}`` a line; MQTT sends the payload
as compact UTF-8 JSON; the recording (schema in daemon/outlets/recording/)
keeps each payload as compact ASCII JSON inside its block's row. The three are
made from one encoding of each payload (``Message.payload_json``); here they
are compared as bytes on a real capture (recording, MQTT outbox, JSONL) and on
the demo slice (recording, JSONL), with the
expected texts written by Python's own json module (its documented defaults:
``", "`` and ``": "`` separators; ``ensure_ascii=True`` escapes every character
outside printable ASCII as ``\\uXXXX``, RFC 8259 section 7), never by the
project's encoders.
"""

from __future__ import annotations

import json
import lzma
import sqlite3
import subprocess
import sys
import zlib
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from daemon.commands.replay import run_replay
from daemon.core.config import MqttSettings, load_config
from daemon.core.payloads import ascii_json, encode_json
from daemon.core.readings import Message
from daemon.outlets.mqtt import MqttSink
from daemon.outlets.outbox import Outbox
from daemon.outlets.recording.reading import iter_messages
from tests.helpers import free_port
from tests.shared import REPO, shared_path

BERTH = ("real-captures", "berth-13min-mda-pressure.nmea")  # 13 min at a berth: alert texts with ° and ′


def replay(src: Path, *args: str) -> None:
    done = subprocess.run([sys.executable, "-m", "daemon", "replay", str(src), "--quiet", *args], cwd=REPO,
                          capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr


def stored_payload_texts(db: Path) -> list[str]:
    """Each message's payload exactly as the recording stores it, read straight from the blocks: a row is
    ``[time, topic index, retain, qos, "kind", {payload}]`` and nothing before the payload holds a ``{``."""
    texts = []
    with sqlite3.connect(db) as conn:
        for codec, data in conn.execute("SELECT codec, data FROM message_block ORDER BY seq_first"):
            for row in (zlib if codec == "zlib" else lzma).decompress(data).decode("ascii").split("\n"):
                texts.append(row[row.index("{"):-1])
    return texts


def assert_recording_matches_jsonl(db: Path, jsonl: Path) -> int:
    lines = jsonl.read_text(encoding="utf-8").splitlines()
    messages = list(iter_messages(db))
    texts = stored_payload_texts(db)
    assert len(lines) == len(messages) == len(texts) > 0
    for line, msg, text in zip(lines, messages, texts):
        payload = json.loads(line)["payload"]  # key order kept (json.loads gives the object's order)
        assert text == json.dumps(payload, ensure_ascii=True, separators=(",", ":"))
        assert line == json.dumps({"t": round(msg.t_s, 3), "topic": msg.topic, "payload": json.loads(text)},
                                  ensure_ascii=False)
    return sum(1 for text in texts if "\\u" in text)


def compact_utf8(payload: dict) -> bytes:
    return json.dumps(payload, ensure_ascii=False, separators=(",", ":")).encode("utf-8")


def test_a_real_captures_recording_and_mqtt_payloads_hold_the_jsonl_byte_for_byte(tmp_path):
    db, jsonl, outbox = tmp_path / "berth.sqlite", tmp_path / "berth.jsonl", tmp_path / "outbox.sqlite"
    # GIVEN the MQTT sink with a broker that never answers: it keeps in its outbox file every message that
    # must arrive (alerts, events, the status), in order, and the latest of each retained topic
    settings = MqttSettings(url=f"mqtt://127.0.0.1:{free_port()}", client_id="outputs-agree", close_timeout_s=0.0)
    run_replay([str(shared_path(*BERTH))], load_config(None), jsonl=str(jsonl), record=str(db), progress=False,
               extra_sinks=[MqttSink(settings, outbox)])
    escaped = assert_recording_matches_jsonl(db, jsonl)
    assert escaped > 0  # the capture's alert texts carry non-ASCII characters: the escapes were checked
    # THEN the bytes MQTT would send are the compact UTF-8 of the JSONL's payloads
    lines = [json.loads(line) for line in jsonl.read_text(encoding="utf-8").splitlines()]
    must_arrive = [compact_utf8(m["payload"]) for m in lines
                   if m["topic"].split("/", 1)[1].split("/")[0] in ("alerts", "events", "status")]
    latest = {m["topic"]: compact_utf8(m["payload"]) for m in lines if not m["topic"].endswith("/events")}
    kept = Outbox(outbox)
    assert [o.payload for o in kept.queued(limit=len(lines))] == must_arrive
    assert {o.topic: o.payload for o in kept.latest_states()} == latest


def test_the_demo_slices_recording_holds_its_replays_jsonl_byte_for_byte(demo_slice, tmp_path):
    # the fixture's recording came from one replay; the JSONL from another of the same lines
    jsonl = tmp_path / "slice.jsonl"
    replay(demo_slice["nmea"], "--config", str(demo_slice["config"]), "--jsonl", str(jsonl))
    assert_recording_matches_jsonl(demo_slice["db"], jsonl)


def test_the_mqtt_payload_is_the_jsonl_payload_as_compact_utf8():
    # what MqttSink.message puts in the outbox: the message's one encoding, as UTF-8
    payload = {"time": "2026-05-04T07:00:00.000Z", "text": "40°56.2′N 032°20.8′W", "drift_kn": 1.25,
               "sigma": None, "nested": {"a": [1, 2.5, "ü"]}}
    msg = Message(0.0, "offwatch/alerts/x", payload, True)
    sent = msg.payload_json().encode("utf-8")
    assert sent == json.dumps(payload, ensure_ascii=False, separators=(",", ":")).encode("utf-8")
    assert msg.payload_json() is msg.payload_json()  # made once, then shared


@settings(max_examples=300, deadline=None)
@given(st.text())
def test_the_ascii_form_is_what_json_writes_with_ensure_ascii(text):
    # reference: Python's json.dumps(ensure_ascii=True): \uXXXX, a surrogate pair beyond U+FFFF, DEL escaped
    payload = {"text": text, text: [text, 1.5]}
    assert ascii_json(encode_json(payload)) == json.dumps(payload, ensure_ascii=True, separators=(",", ":"))


@pytest.mark.parametrize("bad", [float("nan"), float("inf")])
def test_a_non_finite_number_is_sent_as_null_never_nan(bad):
    # RFC 8259 section 6: NaN and Infinity are not JSON numbers
    assert json.loads(encode_json({"x": bad, "y": [bad, 2]})) == {"x": None, "y": [None, 2]}
