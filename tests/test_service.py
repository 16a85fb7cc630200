"""``offwatch run`` as systemd would run it: a real process, real sockets, a real Mosquitto.

The daemon is started as a subprocess with a config of the test's own: one TCP
input (a loopback server in the test playing a simulated passage at a few
times real time, as an NMEA multiplexer would) and one UDP input (the
thermometer and the barometer, as a Wi-Fi gateway broadcasting datagrams).
``NOTIFY_SOCKET`` names a datagram socket the test listens on, as the service
manager's is.

Expected behaviour, from outside the project:
- sd_notify(3) and systemd.service(5) (systemd manual pages): ``READY=1``
  once up (``Type=notify``), ``WATCHDOG=1`` more often than ``WATCHDOG_USEC``,
  ``STATUS=`` free text, ``STOPPING=1`` when shutting down; SIGTERM is the
  stop signal and exit status 0 a clean stop.
- MQTT 3.1.1 (OASIS, 2014): a retained message goes to late subscribers
  (3.3.1.3); the will is published when the network connection closes
  without a DISCONNECT (3.1.2.5), which is what a kill -9 does.
- SQLite's ``PRAGMA integrity_check`` answers the single row ``ok`` for a
  sound database file (sqlite.org, "Pragma statements supported by SQLite").
- interface.md: topics, payload fields, the ack topic and the alert lifecycle
  (an alarm or warning acknowledged by the crew; a caution never).
"""

from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
import threading
import time
import uuid
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path

import pytest

from tests.helpers import PREFIX, Display, NotifyListener, Received, free_port, integrity, wait_until
from tests.shared import REPO

TCP_SOURCES = {"gnss", "compass", "log", "vane", "sounder", "attitude"}
UDP_SOURCES = {"thermo", "baro"}
PLAY_SPEED = 3.0          # simulated seconds per wall second on the live inputs
WATCHDOG_USEC = 8_000_000  # systemd would restart a service silent this long


def simulated_lines(minutes: float = 6.0, seed: int = 11) -> list[tuple[float, str, str]]:
    """A short simulated passage (invented boat, invented water) as (t_s, source, sentence).

    Sources are the instruments' TAG-block names of the simulator's writer.
    """
    from tools.simulator import (Ocean, PressureField, Scenario, SeaTemperatureField, SensorSpec, Steer,
                                  SteadyCurrent, WindField, simulate)
    from tools.simulator.nmea_writer import WriterOptions, run_lines
    from tools.simulator.scenarios import MIN, utc

    t0, lat, lon = utc(2026, 6, 2, 9), 44.1, -31.2
    ocean = Ocean(currents=(SteadyCurrent(80.0, 0.6),), sea_temp=SeaTemperatureField(15.2, lat, lon),
                  pressure=PressureField(((t0, 1013.0),)), wind=WindField(((t0, 240.0, 11.0),)))
    scenario = Scenario(name="service_test", start_utc=t0, duration_s=minutes * MIN, start_lat=lat,
                        start_lon=lon, helm=(Steer(100.0, 5.5, minutes * MIN),), ocean=ocean,
                        sensors=SensorSpec(heading_hz=1.0))
    out = []
    for line in run_lines(simulate(scenario, seed), WriterOptions(tag_blocks=True)):
        tag, sentence = line[1:].split("\\", 1)
        fields = dict(f.split(":", 1) for f in tag.split("*")[0].split(","))
        out.append((int(fields["c"]) / 1000.0, fields["s"], sentence))
    return out


class LivePlayer:
    """Plays simulated lines to the daemon: a TCP server (one client at a time) and UDP datagrams.

    ``drop_sources`` may be changed while it plays (e.g. ``{"gnss"}``: the GNSS
    falls silent while the compass and the log go on).
    """

    def __init__(self, lines: list[tuple[float, str, str]], udp_port: int, speed: float = PLAY_SPEED,
                 flood: bool = False) -> None:
        """``flood``: send the passage over TCP again and again, as fast as the socket takes it."""
        self.lines = lines
        self.flood = flood
        self.udp_port = udp_port
        self.speed = speed
        self.drop_sources: set[str] = set()
        self.sent = {"tcp": 0, "udp": 0}
        self.server = socket.create_server(("127.0.0.1", 0))
        self.server.settimeout(0.2)
        self.tcp_port = self.server.getsockname()[1]
        self._udp = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._serve, daemon=True)
        self._thread.start()

    def _serve(self) -> None:
        while not self._stop.is_set():
            try:
                conn, _ = self.server.accept()
            except socket.timeout:
                continue
            except OSError:
                return
            with conn:
                try:
                    self._play(conn)
                except OSError:
                    continue  # the daemon went away; wait for the next connection

    def _play(self, conn: socket.socket) -> None:
        if self.flood:
            blob = "".join(text + "\r\n" for _, src, text in self.lines if src in TCP_SOURCES).encode("ascii")
            while not self._stop.is_set():
                conn.sendall(blob)
                self.sent["tcp"] += len(self.lines)
            return
        t_first = self.lines[0][0]
        wall0 = time.monotonic()
        i = 0
        while not self._stop.is_set() and i < len(self.lines):
            due = wall0 + (self.lines[i][0] - t_first) / self.speed
            delay = due - time.monotonic()
            if delay > 0:
                self._stop.wait(min(delay, 0.2))
                continue
            tcp = bytearray()
            t_now = self.lines[i][0]
            while i < len(self.lines) and self.lines[i][0] == t_now:
                _, src, text = self.lines[i]
                i += 1
                if src in self.drop_sources:
                    continue
                data = (text + "\r\n").encode("ascii")
                if src in UDP_SOURCES:
                    self._udp.sendto(data, ("127.0.0.1", self.udp_port))
                    self.sent["udp"] += 1
                else:
                    tcp += data
                    self.sent["tcp"] += 1
            if tcp:
                conn.sendall(bytes(tcp))
        while not self._stop.is_set():  # passage over: keep the connection, silent
            self._stop.wait(0.2)

    def close(self) -> None:
        self._stop.set()
        self.server.close()
        self._thread.join(3)
        self._udp.close()


@dataclass
class Daemon:
    """One ``offwatch run`` subprocess and what it was given."""

    proc: subprocess.Popen
    state_dir: Path
    log_path: Path
    notify: NotifyListener | None
    extra: dict = field(default_factory=dict)

    def log(self) -> str:
        return self.log_path.read_text(errors="replace") if self.log_path.exists() else ""

    def stop(self, sig: int = signal.SIGTERM, timeout_s: float = 20.0) -> int:
        if self.proc.poll() is None:
            self.proc.send_signal(sig)
        return self.proc.wait(timeout=timeout_s)

    def kill(self) -> None:
        if self.proc.poll() is None:
            self.proc.kill()
            self.proc.wait(timeout=10)


def write_run_config(path: Path, *, state_dir: Path, tcp_port: int, udp_port: int, broker: tuple[str, int],
                     extra: str = "") -> Path:
    host, port = broker
    path.write_text(
        "# a test boat (invented)\n"
        "[installation]\nvariation_source = \"model\"\n\n"
        f"[inputs.mux]\nkind = \"tcp\"\nhost = \"127.0.0.1\"\nport = {tcp_port}\n\n"
        f"[inputs.wifi]\nkind = \"udp\"\nbind = \"127.0.0.1\"\nport = {udp_port}\n\n"
        f"[mqtt]\nurl = \"mqtt://{host}:{port}\"\nprefix = \"{PREFIX}\"\nclient_id = \"offwatch-test-{uuid.uuid4().hex[:6]}\"\n\n"
        f"[state]\ndir = \"{state_dir}\"\n\n"
        "[recording]\nper = \"start\"\n"
        f"{extra}")
    return path


def start_daemon(tmp: Path, cfg: Path, notify: NotifyListener | None, name: str = "run") -> Daemon:
    env = {k: v for k, v in os.environ.items() if k not in ("NOTIFY_SOCKET", "WATCHDOG_USEC", "WATCHDOG_PID")}
    env["PYTHONUNBUFFERED"] = "1"
    if notify is not None:
        env["NOTIFY_SOCKET"] = notify.name
        env["WATCHDOG_USEC"] = str(WATCHDOG_USEC)
    log_path = tmp / f"{name}.log"
    with open(log_path, "wb") as log_file:
        proc = subprocess.Popen([sys.executable, "-m", "daemon", "run", "--config", str(cfg)], cwd=REPO, env=env,
                                stdout=log_file, stderr=subprocess.STDOUT)
    return Daemon(proc, tmp / "state", log_path, notify)


def run_cli(*args: str, timeout_s: float = 90.0) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "daemon", *args], cwd=REPO, capture_output=True, text=True,
                          timeout=timeout_s)


# --------------------------------------------------------------------------- fixtures

@pytest.fixture(scope="module")
def passage() -> list[tuple[float, str, str]]:
    return simulated_lines()


@pytest.fixture
def live(tmp_path: Path, passage, mosquitto) -> Iterator[dict]:
    """The live inputs, a display on the broker, a notify socket; all closed at the end."""
    udp_port = free_port(socket.SOCK_DGRAM)
    player = LivePlayer(passage, udp_port)
    notify = NotifyListener()
    state = tmp_path / "state"
    cfg = write_run_config(tmp_path / "offwatch.toml", state_dir=state, tcp_port=player.tcp_port,
                           udp_port=udp_port, broker=tuple(mosquitto))
    display = Display(*mosquitto)
    daemons: list[Daemon] = []

    def start(name: str = "run", with_notify: bool = True) -> Daemon:
        d = start_daemon(tmp_path, cfg, notify if with_notify else None, name)
        daemons.append(d)
        return d

    try:
        yield {"player": player, "notify": notify, "display": display, "start": start, "state": state,
               "broker": mosquitto, "cfg": cfg}
    finally:
        for d in daemons:
            d.kill()
        display.close()
        notify.close()
        player.close()


# --------------------------------------------------------------------------- the tests

def test_run_tells_systemd_publishes_and_stops_cleanly_on_sigterm(live, tmp_path):
    """The service life under systemd: READY, watchdog pings, status, MQTT states; SIGTERM: a clean stop."""
    # GIVEN a running daemon fed over TCP and UDP, watched by the notify socket and a display
    notify, display, player = live["notify"], live["display"], live["player"]
    t_start = time.monotonic()
    daemon = live["start"]()
    try:
        # THEN it says READY=1 once its inputs and outputs are up
        assert wait_until(lambda: notify.times_of("READY=1"), 30), daemon.log()
        time_to_ready = notify.times_of("READY=1")[0] - t_start
        # AND a display sees the retained status online with sensor ages and input counters for both inputs
        def status_with_both_inputs():
            m = display.latest(f"{PREFIX}/status")
            return m and m.payload["state"] == "online" and {"mux", "wifi"} <= set(m.payload.get("inputs", {}))
        assert wait_until(status_with_both_inputs, 30), (display.topics(), daemon.log())
        # AND the states computed from the feeds arrive
        assert wait_until(lambda: {f"{PREFIX}/position", f"{PREFIX}/sea_temperature"} <= display.topics(), 30), \
            (display.topics(), daemon.log())
        # AND the watchdog is pinged repeatedly, with STATUS= text
        assert wait_until(lambda: len(notify.times_of("WATCHDOG=1")) >= 4, 20), notify.datagrams
        running_status = display.latest(f"{PREFIX}/status").payload
        daemon_alive_during_run = daemon.proc.poll() is None
    finally:
        # WHEN systemd stops it with SIGTERM
        rc = daemon.stop(signal.SIGTERM, timeout_s=30)
    t_stop = time.monotonic()
    log = daemon.log()

    assert daemon_alive_during_run
    # THEN it said STOPPING=1 and exited 0
    assert notify.times_of("STOPPING=1"), notify.datagrams
    assert rc == 0, log
    assert notify.times_of("STOPPING=1")[-1] > notify.times_of("READY=1")[0]
    pings = notify.times_of("WATCHDOG=1")
    ready = notify.times_of("READY=1")[0]
    gaps = [b - a for a, b in zip([ready, *pings], pings)]
    # no gap long enough for systemd's watchdog (WATCHDOG_USEC) to fire
    assert max(gaps) < WATCHDOG_USEC / 1e6, gaps
    assert notify.values_of("STATUS"), notify.datagrams

    assert any(text.startswith(("running", "current")) for text in notify.values_of("STATUS"))

    # the status while running: sensor ages of the kinds both inputs gave (fix and heading over TCP,
    # sea temperature and pressure over UDP), the line counters and the state of each input
    assert running_status["state"] == "online"
    assert {"fix", "heading", "sea_temperature", "pressure"} <= set(running_status["sensors"]), running_status
    assert all(0 <= age < 60 for age in running_status["sensors"].values()), running_status["sensors"]
    for name in ("mux", "wifi"):
        assert running_status["inputs"][name]["totals"]["good"] > 0, running_status["inputs"]
        assert running_status["sources"][name]["state"] == "open", running_status["sources"]
    assert running_status["mqtt"]["connected"] is True
    # the last status before the stop counts what was sent (nothing was spoiled, so all lines are good)
    status = display.latest(f"{PREFIX}/status")
    last_online = [m for m in display.on(f"{PREFIX}/status") if m.payload["state"] == "online"][-1].payload
    good = sum(last_online["inputs"][name]["totals"]["good"] for name in ("mux", "wifi"))
    assert 0 < good <= player.sent["tcp"] + player.sent["udp"]
    # the position came from the GNSS; a clean stop leaves the retained status offline
    position = display.latest(f"{PREFIX}/position").payload
    assert position["source"] == "gnss" and abs(position["lat"] - 44.1) < 0.2 and abs(position["lon"] + 31.2) < 0.2
    assert status.payload["state"] == "offline", status

    # AND the state directory holds a sound recording that replays, the calibration and the alerts
    state = live["state"]
    recordings = sorted((state / "recordings").glob("offwatch-*.sqlite"))
    assert len(recordings) == 1, list(state.rglob("*"))
    assert integrity(recordings[0]) == "ok"
    replay = run_cli("replay", str(recordings[0]), "--jsonl", str(tmp_path / "rec.jsonl"))
    assert replay.returncode == 0, replay.stderr
    replayed_topics = {json.loads(line)["topic"] for line in (tmp_path / "rec.jsonl").read_text().splitlines()}
    # (replayed without the run's config: the default prefix)
    assert {"offwatch/position", "offwatch/sea_temperature", "offwatch/status"} <= replayed_topics, replayed_topics
    calibration = json.loads((state / "calibration.json").read_text())
    assert "stw_scale" in json.dumps(calibration)
    alerts = json.loads((state / "alerts.json").read_text())
    assert isinstance(alerts.get("alerts"), list)
    print(f"\nfigures: READY after {time_to_ready:.1f} s; {len(pings)} watchdog pings, largest gap "
          f"{max(gaps):.2f} s; stop took {t_stop - t_start:.1f} s in all; "
          f"lines sent tcp {player.sent['tcp']} udp {player.sent['udp']}")


def test_kill9_leaves_the_last_will_and_a_sound_recording(live, tmp_path):
    """A power cut or a kill -9: the broker says offline for us, and the recording survives."""
    # GIVEN a daemon that has been publishing and recording for a few seconds
    display = live["display"]
    daemon = live["start"]("killed")
    # (states and the QoS-1 status travel apart: wait for both)
    assert wait_until(lambda: display.latest(f"{PREFIX}/position") is not None
                      and display.latest(f"{PREFIX}/status") is not None, 30), daemon.log()
    assert display.latest(f"{PREFIX}/status").payload["state"] == "online"
    time.sleep(3.0)  # a few of the recorder's one-second commits
    # WHEN it is killed with SIGKILL (no chance to clean up)
    t_kill = time.monotonic()
    daemon.kill()
    assert daemon.proc.returncode == -signal.SIGKILL

    # THEN the broker publishes the will: status offline, retained, with a reason (MQTT 3.1.1 3.1.2.5)
    assert wait_until(lambda: display.latest(f"{PREFIX}/status").payload["state"] == "offline", 15), \
        [m.payload for m in display.on(f"{PREFIX}/status")][-3:]
    will_after = display.latest(f"{PREFIX}/status").at - t_kill
    assert display.latest(f"{PREFIX}/status").payload["reason"] == "connection lost"
    late = Display(*live["broker"])  # a display that starts only now gets it as the retained state
    try:
        # the broker sends the retained messages one after another: wait for both
        assert wait_until(lambda: late.latest(f"{PREFIX}/status") is not None
                          and late.latest(f"{PREFIX}/position") is not None, 10)
        got = late.latest(f"{PREFIX}/status")
        assert got.retain and got.payload["state"] == "offline"
        assert late.latest(f"{PREFIX}/position").retain  # the last position stays for the display
    finally:
        late.close()

    # AND the recording opens, passes the integrity check, holds the lines and replays
    recordings = sorted((live["state"] / "recordings").glob("offwatch-*.sqlite"))
    assert len(recordings) == 1
    assert integrity(recordings[0]) == "ok"
    from daemon.outlets.recording.reading import iter_raw
    assert sum(1 for _ in iter_raw(recordings[0])) > 20
    out = tmp_path / "killed.jsonl"
    replay = run_cli("replay", str(recordings[0]), "--jsonl", str(out))
    assert replay.returncode == 0, replay.stderr
    topics = {json.loads(line)["topic"] for line in out.read_text().splitlines()}
    assert "offwatch/position" in topics
    print(f"\nfigures: will seen {will_after:.2f} s after the kill")


def test_ack_over_mqtt_acknowledges_a_warning_and_ignores_the_rest(live, tmp_path):
    """gnss_lost (a warning) is acknowledged by {"id": "gnss_lost"} on <prefix>/ack; junk is ignored."""
    display, player = live["display"], live["player"]
    # a short clear time so the end of the lifecycle (acknowledged -> cleared) fits in the test
    cfg = live["cfg"]
    cfg.write_text(cfg.read_text() + "\n[alerts]\nclear_after_by_id = { gnss_lost = 1.0 }\n")
    daemon = live["start"]("ack")
    alert = f"{PREFIX}/alerts/gnss_lost"
    stale = f"{PREFIX}/alerts/sensor_stale"
    ack = f"{PREFIX}/ack"

    def state_of(topic):
        m = display.latest(topic)
        return None if m is None else m.payload["state"]

    try:
        assert wait_until(lambda: display.latest(f"{PREFIX}/position") is not None, 30), daemon.log()
        # GIVEN the GNSS falls silent while the compass and the log go on
        t_silent = time.monotonic()
        player.drop_sources = {"gnss"}
        # THEN gnss_lost is raised as an active warning (after 10 s without a fix)
        assert wait_until(lambda: state_of(alert) == "active", 30), (display.topics(), daemon.log()[-2000:])
        raised_after = display.latest(alert).at - t_silent
        assert display.latest(alert).payload["priority"] == "warning"
        # and the silent GNSS is gnss_lost's alone: no sensor_stale beside it (one failure, one alert)
        assert display.latest(stale) is None, display.topics()

        # WHEN a display sends junk to the ack topic: a huge payload naming gnss_lost, malformed JSON,
        # the wrong types, and a caution's id
        display.publish(ack, json.dumps({"id": "gnss_lost", "pad": "x" * 200_000}).encode())
        display.publish(ack, b'{"id": "gnss_lost"')
        display.publish(ack, b"\xff\xfe not even UTF-8")
        display.publish(ack, b'["gnss_lost"]')
        display.publish(ack, b'{"id": 17}')
        display.publish(ack, b'{"id": "sensor_stale"}')
        t_junk = time.monotonic()
        # THEN nothing changes and the daemon goes on publishing its status
        assert wait_until(lambda: any(m.at > t_junk + 1.0 for m in display.on(f"{PREFIX}/status")), 20)
        assert daemon.proc.poll() is None, daemon.log()[-2000:]
        assert state_of(alert) == "active"
        assert display.latest(stale) is None

        # WHEN a display acknowledges the warning properly
        display.publish(ack, b'{"id": "gnss_lost"}')
        # THEN it is acknowledged while the condition lasts
        assert wait_until(lambda: state_of(alert) == "acknowledged", 10), [m.payload for m in display.on(alert)]
        acked = display.latest(alert).payload
        assert acked["id"] == "gnss_lost" and acked["priority"] == "warning"
        # AND once fixes return it is cleared
        player.drop_sources = set()
        assert wait_until(lambda: state_of(alert) == "cleared", 30), [m.payload for m in display.on(alert)]
        # the daemon counted the refused payloads (the caution's id is refused by the alert manager instead)
        assert wait_until(lambda: display.latest(f"{PREFIX}/status").payload["mqtt"].get("ack_ignored", 0) >= 4, 15), \
            display.latest(f"{PREFIX}/status").payload["mqtt"]
        assert "acknowledgement of 'sensor_stale' ignored" in daemon.log()
    finally:
        rc = daemon.stop(signal.SIGTERM, timeout_s=30)
    assert rc == 0, daemon.log()[-3000:]
    states = [m.payload["state"] for m in display.on(alert)]
    # the lifecycle in order (re-announcements may repeat a state): active, acknowledged, cleared
    assert [s for i, s in enumerate(states) if i == 0 or states[i - 1] != s] == ["active", "acknowledged", "cleared"]
    print(f"\nfigures: gnss_lost raised {raised_after:.1f} s after the last fix")


def test_broker_away_at_start_and_at_stop(live):
    """The service does not wait for the broker: READY without it, it publishes once the broker comes,
    and SIGTERM while the broker is away still ends it promptly with status 0 (systemd's
    TimeoutStopSec in systemd/offwatch.service is 20 s)."""
    broker, notify = live["broker"], live["notify"]
    # GIVEN the boat's broker is not running yet
    live["display"].close()
    broker.stop()
    daemon = live["start"]("away")
    try:
        # THEN the service is ready anyway and keeps pinging the watchdog
        assert wait_until(lambda: notify.times_of("READY=1"), 30), daemon.log()
        assert wait_until(lambda: len(notify.times_of("WATCHDOG=1")) >= 3, 15), daemon.log()
        # WHEN the broker comes up
        t_up = time.monotonic()
        broker.start()
        display = Display(*broker)
        try:
            # THEN the status and the position arrive (the outbox kept the latest states)
            assert wait_until(lambda: {f"{PREFIX}/status", f"{PREFIX}/position"} <= display.topics(), 20), \
                (display.topics(), daemon.log()[-2000:])
            connected_after = min(m.at for m in display.messages) - t_up
            assert display.latest(f"{PREFIX}/status").payload["state"] == "online"
        finally:
            display.close()
        # WHEN the broker goes away again and systemd stops the service
        broker.stop()
        time.sleep(1.0)
        t_term = time.monotonic()
        rc = daemon.stop(signal.SIGTERM, timeout_s=20)
        stop_took = time.monotonic() - t_term
    finally:
        daemon.kill()
    # THEN it stopped cleanly, and said so
    assert rc == 0, daemon.log()[-3000:]
    assert notify.times_of("STOPPING=1")
    assert "stopped cleanly" in daemon.log()
    print(f"\nfigures: first message {connected_after:.1f} s after the broker came up; "
          f"SIGTERM with the broker away took {stop_took:.1f} s")


def test_an_unacknowledged_warning_survives_a_kill_and_restart(live):
    """Bridge alert management: a warning stays listed until the crew acknowledges it, even when
    the service is killed and restarted in between (the state directory keeps it)."""
    display, player = live["display"], live["player"]
    alert = f"{PREFIX}/alerts/gnss_lost"
    # a restored alert no estimator re-asserts counts as gone after restore_confirm_s (default 2 min;
    # a fresh position estimator does not say "not lost" of a loss it never saw): short here
    cfg = live["cfg"]
    cfg.write_text(cfg.read_text() + "\n[alerts]\nrestore_confirm_s = 5.0\nclear_after_by_id = { gnss_lost = 1.0 }\n")
    # GIVEN gnss_lost raised as an active warning, never acknowledged
    first = live["start"]("before")
    assert wait_until(lambda: display.latest(f"{PREFIX}/position") is not None, 30), first.log()
    player.drop_sources = {"gnss"}
    assert wait_until(lambda: (display.latest(alert) or Received("", {"state": ""}, False, 0)).payload["state"]
                      == "active", 30), first.log()[-2000:]
    time.sleep(2.0)  # the alert states are saved at most a second after a change
    # WHEN the service is killed and started again, and the GNSS is back
    first.kill()
    alerts_file = json.loads((live["state"] / "alerts.json").read_text())
    saved = {a["id"]: a for a in alerts_file["alerts"]}
    assert saved["gnss_lost"]["state"] == "active" and saved["gnss_lost"]["priority"] == "warning", saved
    player.drop_sources = set()
    t_restart = time.monotonic()
    second = live["start"]("after")
    try:
        # THEN the restarted service announces the warning again, still active
        assert wait_until(lambda: any(m.at > t_restart and m.payload["state"] == "active"
                                      for m in display.on(alert)), 30), second.log()[-2000:]
        # AND with fixes back it stays listed, rectified (condition false), until acknowledged
        assert wait_until(lambda: display.latest(alert).at > t_restart and
                          display.latest(alert).payload["condition"] is False, 40), \
            ([m.payload for m in display.on(alert)], second.log()[-2000:])
        assert display.latest(alert).payload["state"] == "rectified"
        display.publish(f"{PREFIX}/ack", b'{"id": "gnss_lost"}')
        assert wait_until(lambda: display.latest(alert).payload["state"] == "cleared", 10), \
            [m.payload for m in display.on(alert)]
        assert second.stop(signal.SIGTERM, timeout_s=30) == 0
    finally:
        second.kill()
    # and a third start would not list it again (the stale-fix caution may still wait out its clear time)
    assert "gnss_lost" not in {a["id"] for a in json.loads((live["state"] / "alerts.json").read_text())["alerts"]}


def test_a_flooding_input_does_not_starve_the_watchdog(tmp_path, passage, mosquitto):
    """A TCP feed sending faster than the pipeline can take (a multiplexer dumping a file, say):
    the loop still ticks and pings the watchdog, and SIGTERM still stops it."""
    udp_port = free_port(socket.SOCK_DGRAM)
    player = LivePlayer(passage, udp_port, flood=True)
    notify = NotifyListener()
    cfg = write_run_config(tmp_path / "offwatch.toml", state_dir=tmp_path / "state", tcp_port=player.tcp_port,
                           udp_port=udp_port, broker=tuple(mosquitto))
    daemon = start_daemon(tmp_path, cfg, notify, "flood")
    try:
        assert wait_until(lambda: notify.times_of("READY=1"), 30), daemon.log()
        ready = notify.times_of("READY=1")[0]
        time.sleep(10.0)
        pings = [t for t in notify.times_of("WATCHDOG=1") if t > ready]
        gaps = [b - a for a, b in zip([ready, *pings], [*pings, time.monotonic()])]
        # THEN the watchdog never went silent long enough for systemd to restart the service
        assert max(gaps) < WATCHDOG_USEC / 1e6, (gaps, daemon.log()[-2000:])
        t_term = time.monotonic()
        assert daemon.stop(signal.SIGTERM, timeout_s=20) == 0, daemon.log()[-2000:]
        print(f"\nfigures: flood: {len(pings)} pings in 10 s, largest gap {max(gaps):.1f} s; "
              f"stopped {time.monotonic() - t_term:.1f} s after SIGTERM")
    finally:
        daemon.kill()
        notify.close()
        player.close()


def test_sigterm_with_half_a_sentence_received_stops_cleanly(tmp_path, mosquitto):
    """The stop finds a sentence cut off (its line end never came): exit status 0 all the same."""
    server = socket.create_server(("127.0.0.1", 0))
    server.settimeout(20)
    cfg = write_run_config(tmp_path / "offwatch.toml", state_dir=tmp_path / "state",
                           tcp_port=server.getsockname()[1], udp_port=free_port(socket.SOCK_DGRAM),
                           broker=tuple(mosquitto))
    notify = NotifyListener()
    daemon = start_daemon(tmp_path, cfg, notify, "half")
    try:
        conn, _ = server.accept()
        # GIVEN one whole sentence and the first half of the next (NMEA 0183 RMC, checksum computed)
        from tools.simulator.nmea_writer import sentence
        whole = sentence("GP", "RMC", "120000.00,A,4406.000,N,03112.000,W,5.5,100.0,020626,,,A".split(","))
        conn.sendall((whole + "\r\n").encode() + whole[:20].encode())
        assert wait_until(lambda: notify.times_of("READY=1"), 30), daemon.log()
        time.sleep(2.0)
        # WHEN systemd stops the service
        rc = daemon.stop(signal.SIGTERM, timeout_s=20)
        conn.close()
    finally:
        daemon.kill()
        notify.close()
        server.close()
    # THEN it stops cleanly (it used to end in an AssertionError from the live Ingest's flush)
    assert rc == 0, daemon.log()[-3000:]
    assert "stopped cleanly" in daemon.log()


def test_status_line_for_a_current_not_yet_estimable():
    """The STATUS= text (sd_notify(3): free text) for every shape of the current payload; a None
    drift once ended the whole service with a TypeError."""
    from daemon.commands.service import status_text

    assert status_text(None) == "running"
    assert status_text({"drift_kn": None, "set_deg": None, "quality": "unavailable"}) == "running; current unavailable"
    assert status_text({"drift_kn": 1.26, "set_deg": 44.6, "quality": "valid"}) == "current 1.3 kn toward 045°, valid"


def test_status_line_leads_with_trouble():
    """GNSS lost, every feed silent: the line said "current 0.7 kn toward 179°, degraded" as if all were well."""
    from daemon.commands.service import status_text

    cur = {"drift_kn": 0.72, "set_deg": 179.4, "quality": "degraded"}
    alerts = [
        {"id": "sensor_stale", "priority": "caution", "state": "active"},
        {"id": "pressure_fall", "priority": "warning", "state": "acknowledged"},
        {"id": "gnss_lost", "priority": "warning", "state": "active"},
        {"id": "front", "priority": "caution", "state": "active"},
        {"id": "rapid_deepening", "priority": "warning", "state": "rectified"},
        {"id": "junk", "priority": {"x": 1}, "state": "active"},  # data, never trusted
    ]
    assert status_text(cur, alerts) == ("WARNING gnss_lost, CAUTION front, CAUTION sensor_stale, +2 more | "
                                        "current 0.7 kn toward 179°, degraded")
    assert status_text(cur, alerts[4:5]) == "WARNING rapid_deepening (rectified) | current 0.7 kn toward 179°, degraded"
    assert status_text(cur, []) == "current 0.7 kn toward 179°, degraded"
