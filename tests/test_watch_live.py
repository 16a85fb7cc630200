"""``offwatch watch`` in a pseudo-terminal of 80 x 24, against a live replay on a real broker.

The terminal is emulated by pyte, so what is checked is what a person would
see, escape sequences and all: if a hostile retained payload's escape
sequences reached the terminal they would clear or redraw this screen.
"""

from __future__ import annotations

import fcntl
import json
import os
import pty
import struct
import subprocess
import sys
import termios
import threading
import time
from pathlib import Path

import pytest

pyte = pytest.importorskip("pyte")
paho = pytest.importorskip("paho.mqtt.client")

from paho.mqtt.enums import CallbackAPIVersion  # noqa: E402

from tools.simulator import scenarios  # noqa: E402
from tools.simulator.nmea_writer import write_nmea  # noqa: E402
from tools.simulator.run import simulate  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
COLUMNS, ROWS = 80, 24


class Terminal:
    """A child process on a pty of COLUMNS x ROWS; pyte keeps the screen it draws."""

    def __init__(self, argv: list[str]) -> None:
        self.screen = pyte.Screen(COLUMNS, ROWS)
        self.stream = pyte.ByteStream(self.screen)
        self.lock = threading.Lock()
        master, slave = pty.openpty()
        fcntl.ioctl(slave, termios.TIOCSWINSZ, struct.pack("HHHH", ROWS, COLUMNS, 0, 0))
        env = {**os.environ, "TERM": "xterm-256color", "COLUMNS": str(COLUMNS), "LINES": str(ROWS),
               "PYTHONPATH": str(ROOT)}
        self.proc = subprocess.Popen(argv, stdin=slave, stdout=slave, stderr=slave, env=env, cwd=ROOT,
                                     start_new_session=True)
        os.close(slave)
        self.master = master
        self.reader = threading.Thread(target=self._read, daemon=True)
        self.reader.start()

    def _read(self) -> None:
        while True:
            try:
                data = os.read(self.master, 65536)
            except OSError:
                return
            if not data:
                return
            with self.lock:
                self.stream.feed(data)

    def lines(self) -> list[str]:
        with self.lock:
            return list(self.screen.display)

    def text(self) -> str:
        return "\n".join(self.lines())

    def send(self, keys: str) -> None:
        os.write(self.master, keys.encode())

    def wait_for(self, predicate, timeout_s: float, what: str) -> None:
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            if predicate(self.lines()):
                return
            time.sleep(0.2)
        raise AssertionError(f"{what} not seen within {timeout_s} s; screen:\n" + self.text())

    def close(self) -> int | None:
        if self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(timeout=10)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait()
        os.close(self.master)
        return self.proc.returncode


def retained(host: str, port: int, messages: list[tuple[str, bytes]]) -> None:
    client = paho.Client(CallbackAPIVersion.VERSION2, client_id="test-publisher")
    client.connect(host, port)
    client.loop_start()
    for topic, payload in messages:
        client.publish(topic, payload, qos=1, retain=True).wait_for_publish(5)
    client.loop_stop()
    client.disconnect()


def row_of(lines: list[str], alert_id: str) -> str:
    return next((line for line in lines if f" {alert_id} " in line), "")


@pytest.fixture
def stuck_compass_file(tmp_path: Path) -> Path:
    path = tmp_path / "stuck.nmea"
    write_nmea(simulate(scenarios.stuck_compass(), 7), path)
    return path


def test_watch_shows_acknowledges_and_fits_during_a_live_replay(mosquitto, stuck_compass_file):
    host, port = mosquitto
    url = f"mqtt://{host}:{port}"
    # GIVEN three alerts the service left listed and one hostile retained payload from some other app
    since = "2026-05-08T01:50:00.000Z"
    retained(host, port, [
        ("offwatch/alerts/pressure_fall", json.dumps({"id": "pressure_fall", "priority": "warning",
                                                      "state": "active", "since": since,
                                                      "text": "Barometer fell 5.3 hPa in 3 h."}).encode()),
        ("offwatch/alerts/current_strong", json.dumps({"id": "current_strong", "priority": "caution",
                                                       "state": "active", "since": since,
                                                       "text": "Current of 2.4 kn setting toward 250 deg."}).encode()),
        ("offwatch/alerts/front", json.dumps({"id": "front", "priority": "alarm", "state": "acknowledged",
                                              "since": since, "text": "Sea temperature rose 2.1 C."}).encode()),
        ("offwatch/alerts/evil", json.dumps({"id": "evil", "priority": {"level": 9}, "state": "active",
                                             "text": "\x1b[2J\x1b[1;1HALL CLEAR \x1b]0;owned\x07"}).encode()),
        ("offwatch/alerts/deep", b"[" * 5000),  # the replay never writes this topic: it stays retained
    ])
    watch = Terminal([sys.executable, "-m", "daemon.commands.cli", "watch", "--mqtt", url])
    replay = subprocess.Popen([sys.executable, "-m", "daemon.commands.cli", "replay", str(stuck_compass_file),
                               "--mqtt", url, "--speed", "100", "--quiet"], cwd=ROOT,
                              env={**os.environ, "PYTHONPATH": str(ROOT)},
                              stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        # WHEN the replay reaches the frozen compass's course change (0:30 of data, about 18 s at 100 x)
        watch.wait_for(lambda ls: "heading_suspect" in "\n".join(ls), 120, "the heading_suspect alert")
        watch.wait_for(lambda ls: "online" in ls[0] and "Position" in "\n".join(ls), 30, "live data")
        # THEN it is listed on one line with its priority, and the screen still fits: header on top,
        # keys at the bottom, five alerts each on one line with its id (four of them alerts of the service)
        lines = watch.lines()
        assert lines[0].startswith(" offwatch ")
        assert "acknowledge" in "\n".join(lines[-3:])
        for alert_id in ("heading_suspect", "pressure_fall", "current_strong", "front", "evil"):
            assert row_of(lines, alert_id), f"{alert_id} not on its own line"
        assert "WARN" in row_of(lines, "heading_suspect")
        # the hostile one: shown as text, its escapes did nothing (the screen was not cleared or moved)
        assert "ALL CLEAR" in row_of(lines, "evil") and "?" in row_of(lines, "evil")
        assert "refused 1" in lines[0]
        # WHEN the crew selects it and opens its details
        for _ in range(8):
            if row_of(watch.lines(), "heading_suspect").startswith("▶"):
                break
            watch.send("\x1b[B")  # arrow down
            time.sleep(0.6)
        assert row_of(watch.lines(), "heading_suspect").startswith("▶")
        watch.send("\r")
        watch.wait_for(lambda ls: any(line.startswith("── heading_suspect: warning") for line in ls), 10,
                       "the details")
        assert "Compass stuck at" in watch.text()
        # and acknowledges it with a key, THEN the service's answer shows it acknowledged
        watch.send("a")
        watch.wait_for(lambda ls: "✓ heading_suspect" in row_of(ls, "heading_suspect"), 30,
                       "the acknowledgement")
        lines = watch.lines()
        assert lines[0].startswith(" offwatch ") and len(lines) == ROWS
        watch.send("q")
        watch.proc.wait(timeout=10)
        assert watch.proc.returncode == 0
    finally:
        replay.terminate()
        replay.wait(timeout=20)
        watch.close()
