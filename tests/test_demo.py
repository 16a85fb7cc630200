"""``offwatch demo``: a passage through a broker with a display listening, and what it says.

The demo uses the broker at ``--mqtt`` when one answers an MQTT CONNECT
(OASIS MQTT 3.1.1, 3.1 and 3.2), otherwise an embedded one on loopback. The
full demo passage takes minutes on a busy machine, so the two broker kinds are
checked with a short simulated passage in its place (the demo's own code
around it unchanged); the full ``python -m daemon demo`` subprocess runs when
OFFWATCH_FULL_DEMO=1.
"""

from __future__ import annotations

import json
import os
import re
import sqlite3
import subprocess
import sys
from argparse import Namespace
from pathlib import Path

import pytest

from tests.helpers import PREFIX, Display, free_port, integrity, wait_until
from tests.shared import REPO

RECEIVED = re.compile(r"received (\d+) messages on (\d+) topics")


@pytest.fixture
def short_demo(monkeypatch, short_passage):
    """The demo, with the short simulated passage in place of the 7.5-hour one."""
    import daemon.commands.demo

    monkeypatch.setattr(daemon.commands.demo, "demo_files", lambda: ([str(short_passage["nmea"])], str(short_passage["cfg"])))
    return daemon.commands.demo.demo_command


def check_outputs(out: Path, text: str) -> tuple[int, int]:
    """What every demo run must leave and say; returns (messages, topics) the display received."""
    found = RECEIVED.search(text)
    assert found, text
    messages, topics = int(found[1]), int(found[2])
    jsonl = [json.loads(line) for line in (out / "demo.jsonl").read_text().splitlines()]
    written_topics = {m["topic"] for m in jsonl}
    # the display saw several topics (states coalesce on the way, so fewer messages than written)
    assert topics >= 6 and 0 < messages <= len(jsonl), (messages, topics, len(jsonl))
    assert topics <= len(written_topics)
    assert integrity(out / "demo.sqlite") == "ok"
    with sqlite3.connect(out / "demo.sqlite") as db:
        assert db.execute("SELECT count(*) FROM alert").fetchone()[0] == \
            sum(1 for m in jsonl if "/alerts/" in m["topic"])
    assert "Advisory only, not for navigation" in text
    return messages, topics


def test_demo_starts_an_embedded_broker_when_none_answers(short_demo, tmp_path, capsys):
    # GIVEN a port where nothing listens
    port = free_port()
    out = tmp_path / "demo-out"
    # WHEN the demo runs against it
    rc = short_demo(Namespace(mqtt=f"mqtt://127.0.0.1:{port}", out=str(out)))
    text = capsys.readouterr().out
    # THEN it says it started its own broker, on another port, and the display received messages on it
    assert rc == 0
    # AND it published under a prefix of its own, and said so (invented data never under offwatch/)
    assert "Publishing under offwatch-demo/, not offwatch/" in text
    assert all(json.loads(x)["topic"].startswith("offwatch-demo/") for x in (out / "demo.jsonl").open())
    started = re.search(r"started an embedded demo broker on 127\.0\.0\.1:(\d+)", text)
    assert started, text
    assert int(started[1]) != port
    messages, topics = check_outputs(out, text)
    print(f"\nfigures: embedded broker, display got {messages} messages on {topics} topics")


def test_demo_uses_a_broker_that_answers(short_demo, tmp_path, capsys, mosquitto):
    # GIVEN a broker that answers, and an --out directory left over from an older demo
    host, port = mosquitto
    out = tmp_path / "demo-out"
    out.mkdir()
    (out / "demo.sqlite").write_bytes(b"left over from an older demo, not a database")
    (out / "demo.jsonl").write_text('{"t": 0, "topic": "old/topic", "payload": {}}\n' * 3)
    # WHEN the demo runs against it
    rc = short_demo(Namespace(mqtt=f"mqtt://{host}:{port}", out=str(out), prefix=PREFIX))
    text = capsys.readouterr().out
    assert rc == 0
    assert f"Publishing under {PREFIX}/" in text
    # THEN it says it used that broker, and its outputs replaced the old ones
    assert f"Using the MQTT broker at {host}:{port}" in text and "embedded" not in text, text
    check_outputs(out, text)
    assert "old/topic" not in (out / "demo.jsonl").read_text()
    # the messages went through that broker: its retained states are there for a display
    late = Display(host, port, prefix=PREFIX)
    try:
        assert wait_until(lambda: {f"{PREFIX}/position", f"{PREFIX}/current"} <= late.topics(), 10), late.topics()
    finally:
        late.close()


@pytest.mark.skipif(os.environ.get("OFFWATCH_FULL_DEMO") != "1",
                    reason="the full 7.5-hour demo passage takes minutes; set OFFWATCH_FULL_DEMO=1 to run it")
def test_full_demo_subprocess_with_the_embedded_broker(tmp_path):
    port = free_port()
    out = tmp_path / "demo-out"
    done = subprocess.run([sys.executable, "-m", "daemon", "demo", "--out", str(out),
                           "--mqtt", f"mqtt://127.0.0.1:{port}"], cwd=REPO, capture_output=True, text=True,
                          timeout=600)
    assert done.returncode == 0, done.stderr[-3000:]
    assert "started an embedded demo broker" in done.stdout
    # the demo passage's story (recorded_runs/README.md): two front crossings, the current and the pressure
    for alert in ("current_strong", "front", "pressure_fall", "gnss_lost"):
        assert alert in done.stdout, done.stdout
    messages, topics = check_outputs(out, done.stdout)
    assert topics >= 10


def test_the_demo_prefix_is_checked():
    from daemon.commands.demo import DEMO_PREFIX, demo_prefix
    from daemon.errors import ConfigError

    assert DEMO_PREFIX != "offwatch" and demo_prefix(None) == DEMO_PREFIX
    assert demo_prefix("trial/boat/") == "trial/boat"
    for bad in ("", "a/#", "a/+/b", "x\x1b[2J"):
        with pytest.raises(ConfigError, match="--prefix"):
            demo_prefix(bad)
