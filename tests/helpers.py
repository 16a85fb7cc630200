"""What several test modules need, in one place: waiting for a condition, a free loopback port,
a Mosquitto of the test's own and a display app listening to it, the NMEA checksum written
independently of the codec, a stand-in for the variation provider, a sink that keeps what a
pipeline sends, the interface's payload rules, a database's integrity check, the standard
atmosphere.

Test modules import from here (and from ``tests.shared`` for the shared captures; fixtures come
from ``conftest.py``), never from one another.
"""

from __future__ import annotations

import json
import math
import os
import re
import getpass
import shutil
import signal
import socket
import sqlite3
import subprocess
import threading
import time
import uuid
from collections.abc import Callable
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path

import paho.mqtt.client as paho
from paho.mqtt.enums import CallbackAPIVersion

from daemon.outlets.broker import broker_answers
from daemon.core.readings import Message

PREFIX = "testboat"  # the topic prefix of the tests' own services
MOSQUITTO = shutil.which("mosquitto") or "/usr/sbin/mosquitto"


def wait_until(cond: Callable[[], object], timeout_s: float = 10.0, step_s: float = 0.02) -> bool:
    """Poll ``cond`` until it is true or ``timeout_s`` has passed; its last value. A limit to give up
    waiting, never a figure under test (timings belong in tools/bench)."""
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if cond():
            return True
        time.sleep(step_s)
    return bool(cond())


def free_port(kind: int = socket.SOCK_STREAM) -> int:
    """A port on 127.0.0.1 free at this moment, for TCP (default) or UDP (``socket.SOCK_DGRAM``)."""
    with socket.socket(socket.AF_INET, kind) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def nmea_checksum(body: str) -> str:
    """NMEA 0183 (v4.10, 5.2.3; TAG blocks alike): XOR of every character between the delimiter and '*',
    two upper-case hex digits. Computed here, a plain loop over ord(), independently of daemon.nmea0183."""
    x = 0
    for ch in body:
        x ^= ord(ch)
    return f"{x:02X}"


def sentence(body: str, start: str = "$") -> str:
    """``body`` framed as a sentence with its checksum: ``$BODY*hh`` (no line ending)."""
    return f"{start}{body}*{nmea_checksum(body)}"


class NotifyListener:
    """The service manager's end of ``NOTIFY_SOCKET``: a datagram socket read all the time, as systemd reads it.

    ``name`` is what ``NOTIFY_SOCKET`` takes: an abstract-namespace name (``@...``), or ``path`` when given.
    Each datagram is kept with its ``time.monotonic()``.
    """

    def __init__(self, path: Path | None = None) -> None:
        self.sock = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM)
        if path is None:
            self.name = f"@offwatch-test-{os.getpid()}-{uuid.uuid4().hex[:8]}"
            self.sock.bind(b"\0" + self.name[1:].encode())
        else:
            self.name = str(path)
            self.sock.bind(self.name)
        self.sock.settimeout(0.2)
        self.datagrams: list[tuple[float, list[str]]] = []
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)
        self._thread.start()

    def _run(self) -> None:
        while not self._stop.is_set():
            try:
                data = self.sock.recv(4096)
            except socket.timeout:
                continue
            except OSError:
                return
            self.datagrams.append((time.monotonic(), data.decode("utf-8", "replace").split("\n")))

    def times_of(self, assignment: str) -> list[float]:
        return [t for t, lines in list(self.datagrams) if assignment in lines]

    def values_of(self, key: str) -> list[str]:
        return [line[len(key) + 1:] for _, lines in list(self.datagrams) for line in lines
                if line.startswith(key + "=")]

    def close(self) -> None:
        self._stop.set()
        self._thread.join(2)
        self.sock.close()


class Keep:
    """A sink that keeps every message and raw line a pipeline sends (the Sink protocol)."""

    def __init__(self) -> None:
        self.messages: list = []
        self.raws: list = []
        self.closed = False

    def raw(self, line) -> None:
        self.raws.append(line)

    def message(self, msg) -> None:
        self.messages.append(msg)

    def close(self) -> None:
        self.closed = True


class StandInVariation:
    """A tiny stand-in for daemon.intake.magvar.VariationProvider("sentence"): the latest noted value."""

    def __init__(self, fixed: float | None = None) -> None:
        self.value = fixed
        self.noted: list[tuple[float, float]] = []
        self.positions: list[tuple[float, float, float]] = []

    def note_sentence_variation(self, east_deg: float, t_s: float) -> None:
        self.value = east_deg
        self.noted.append((east_deg, t_s))

    def note_position(self, lat_deg: float, lon_deg: float, t_s: float) -> None:
        self.positions.append((lat_deg, lon_deg, t_s))

    def east_deg(self, t_s: float) -> float | None:
        return self.value


def station_from_msl(msl_hpa: float, height_m: float) -> float:
    """ISO 2533 standard atmosphere: p = p0 (1 - 2.25577e-5 h)^5.25588 (independent of the reduction)."""
    return msl_hpa * (1.0 - 2.25577e-5 * height_m) ** 5.25588


# --------------------------------------------------------------------------- a broker and a display

class Mosquitto:
    """A Mosquitto process on 127.0.0.1:<port> with a config in a temp directory.

    Unpacks as ``host, port = mosquitto``; ``restart()`` comes back on the same
    port. Persistence is on (in the temp directory), so persistent sessions and
    their queued QoS-1 messages survive a restart, as on a real boat.
    """

    def __init__(self, workdir: Path, listener_conf: str = "", persistence: bool = True) -> None:
        """``listener_conf``: lines for the listener (e.g. cafile/certfile/keyfile for TLS);
        ``persistence=False``: a restart forgets retained messages and sessions (Mosquitto's default)."""
        self.host = "127.0.0.1"
        self.port = free_port()
        self.workdir = workdir
        self.tls = "certfile" in listener_conf
        self.conf = workdir / "mosquitto.conf"
        self.log = workdir / "mosquitto.log"
        self.conf.write_text(
            f"listener {self.port} {self.host}\n"
            f"{listener_conf}"
            # started as root, mosquitto would drop to its own user, who cannot read the temp dir
            f"user {getpass.getuser()}\n"
            "allow_anonymous true\n"
            f"persistence {'true' if persistence else 'false'}\n"
            "autosave_interval 1\n"
            f"persistence_location {workdir}/\n"
            f"log_dest file {self.log}\n"
            "log_type all\n")
        self.proc: subprocess.Popen | None = None

    def __iter__(self):
        return iter((self.host, self.port))

    def start(self, timeout_s: float = 10.0) -> None:
        self.proc = subprocess.Popen([MOSQUITTO, "-c", str(self.conf)],
                                     stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
        deadline = time.monotonic() + timeout_s
        while not self._answers():
            if self.proc.poll() is not None:
                err = self.proc.stderr.read().decode(errors="replace") if self.proc.stderr else ""
                raise RuntimeError(f"mosquitto exited with {self.proc.returncode}: {err}")
            if time.monotonic() > deadline:
                raise RuntimeError(f"mosquitto did not answer on port {self.port}")
            time.sleep(0.05)

    def _answers(self) -> bool:
        if not self.tls:
            return broker_answers(self.host, self.port, timeout=0.5)
        try:  # a TLS listener: the MQTT probe speaks plain TCP, so a connect must do
            socket.create_connection((self.host, self.port), timeout=0.5).close()
            return True
        except OSError:
            return False

    def stop(self) -> None:
        if self.proc is not None and self.proc.poll() is None:
            self.proc.terminate()  # SIGTERM: mosquitto saves its persistence file on the way out
            try:
                self.proc.wait(timeout=10)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait()
        self.proc = None

    def kill(self) -> None:
        """SIGKILL: gone without saving, like a power cut (what was saved a second ago survives)."""
        if self.proc is not None:
            self.proc.kill()
            self.proc.wait()
        self.proc = None

    def wait_saved(self, timeout_s: float = 10.0) -> bool:
        """Wait for the broker to write its persistence file after this call (autosave_interval 1):
        what it knew before, such as a display's session, then survives a SIGKILL."""
        db = self.workdir / "mosquitto.db"
        called = time.time()
        return wait_until(lambda: db.exists() and db.stat().st_mtime > called + 0.01, timeout_s)

    def freeze(self) -> None:
        """SIGSTOP: the broker keeps its sockets but answers nothing (packets stay in flight)."""
        assert self.proc is not None
        self.proc.send_signal(signal.SIGSTOP)

    def restart(self) -> None:
        self.stop()
        self.start()

    @property
    def running(self) -> bool:
        return self.proc is not None and self.proc.poll() is None


@dataclass
class Received:
    topic: str
    payload: dict | None
    retain: bool
    at: float  # monotonic arrival time


class Display:
    """A display app on the boat's network: subscribes to ``<prefix>/#`` and keeps everything.

    ``persistent=True`` keeps a session on the broker (a fixed client id, clean
    session off), so QoS-1 messages wait for it while it is away, even across a
    broker restart (Mosquitto persistence is on in the fixture).
    """

    def __init__(self, host: str, port: int, prefix: str = PREFIX, persistent: bool = False) -> None:
        self.messages: list[Received] = []
        self._lock = threading.Lock()
        self.connected = threading.Event()
        self.subscribed = threading.Event()
        self.connects = 0
        self.client = paho.Client(CallbackAPIVersion.VERSION2, client_id=f"display-{uuid.uuid4().hex[:8]}",
                                  clean_session=not persistent)
        self.client.reconnect_delay_set(min_delay=1, max_delay=1)
        self.filter = f"{prefix}/#"

        def on_connect(client, userdata, flags, reason, properties):
            self.connects += 1
            if not flags.session_present:
                client.subscribe(self.filter, qos=1)
            else:
                self.subscribed.set()
            self.connected.set()

        def on_disconnect(client, userdata, flags, reason, properties):
            self.connected.clear()

        self.client.on_connect = on_connect
        self.client.on_disconnect = on_disconnect
        self.client.on_subscribe = lambda c, u, mid, rc, p: self.subscribed.set()
        self.client.on_message = self._keep
        self.client.connect(host, port, keepalive=5)
        self.client.loop_start()
        assert self.subscribed.wait(10), "the display could not subscribe"

    def _keep(self, client, userdata, msg) -> None:
        try:
            payload = json.loads(msg.payload)
        except ValueError:
            payload = None
        with self._lock:
            self.messages.append(Received(msg.topic, payload, bool(msg.retain), time.monotonic()))

    def received(self, since: int = 0) -> list[Received]:
        """A copy of everything received (from the ``since``-th message on), safe against the network thread."""
        with self._lock:
            return self.messages[since:]

    def on(self, topic: str) -> list[Received]:
        with self._lock:
            return [m for m in self.messages if m.topic == topic]

    def latest(self, topic: str) -> Received | None:
        got = self.on(topic)
        return got[-1] if got else None

    def topics(self) -> set[str]:
        with self._lock:
            return {m.topic for m in self.messages}

    def publish(self, topic: str, payload: bytes) -> None:
        self.client.publish(topic, payload, qos=1).wait_for_publish(5)

    def close(self) -> None:
        self.client.loop_stop()
        self.client.disconnect()


def integrity(db_path: Path) -> str:
    """``PRAGMA integrity_check`` of a database as any reader opens it (a WAL left by a crash is read too)."""
    db = sqlite3.connect(str(db_path))
    try:
        return db.execute("PRAGMA integrity_check").fetchone()[0]
    finally:
        db.close()


# --------------------------------------------------------------------------- the interface (interface.md)

ISO_Z = re.compile(r"^\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}(\.\d{1,6})?Z$")  # ISO 8601, UTC with Z (interface.md)
QUALITIES = {"converging", "valid", "degraded", "unavailable"}        # interface.md, offwatch/current
PRIORITIES = {"alarm", "warning", "caution"}                          # interface.md, alerts
STATES = {"active", "acknowledged", "rectified", "cleared"}           # interface.md, alerts
CURRENT_FIELDS = ("set_deg", "drift_kn", "east_kn", "north_kn", "set_sigma_deg", "drift_sigma_kn", "quality",
                  "stw_scale", "heading_offset_deg")
PRESSURE_FIELDS = ("msl_hpa", "tendency_3h_hpa", "rate_hpa_per_h", "descriptor", "characteristic")
SEA_STATE_FIELDS = ("true_wind_from_deg", "true_wind_kn", "ground_wind_from_deg", "ground_wind_kn",
                    "opposing_current_kn", "height_factor", "length_factor", "steepness_factor")


def _utc_s(iso: str) -> float:
    return datetime.fromisoformat(iso.replace("Z", "+00:00")).timestamp()


def _num(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _payload_problems(topic: str, p: dict) -> list[str]:
    """What in one payload breaks interface.md's table of topics and payloads."""
    name = topic.split("/", 1)[1] if "/" in topic else topic
    bad: list[str] = []
    if name == "status":
        if p.get("state") not in ("online", "offline"):
            bad.append(f"status state {p.get('state')!r}")
        sensors = p.get("sensors")
        if not isinstance(sensors, dict) or not all(_num(a) and a >= 0 for a in sensors.values()):
            bad.append(f"status sensors {sensors!r}: per input kind its age in s")
    elif name == "position":
        if not (_num(p.get("lat")) and -90 <= p["lat"] <= 90 and _num(p.get("lon")) and -180 <= p["lon"] <= 180):
            bad.append(f"position lat/lon {p.get('lat')!r}, {p.get('lon')!r}")
        if p.get("source") not in ("gnss", "dead_reckoning"):
            bad.append(f"position source {p.get('source')!r}")
        if not (_num(p.get("sigma_m")) and p["sigma_m"] > 0):
            bad.append(f"position sigma_m {p.get('sigma_m')!r}")
    elif name == "current":
        bad += [f"current lacks {k}" for k in CURRENT_FIELDS if k not in p]
        if p.get("quality") not in QUALITIES:
            bad.append(f"current quality {p.get('quality')!r}")
        if all(_num(p.get(k)) for k in ("set_deg", "drift_kn", "east_kn", "north_kn")):
            # set is the direction the current flows TOWARD, degrees true 0..<360 (interface.md, trade usage);
            # east/north are the same vector: drift = |(e, n)|, set = atan2(e, n). 0.011 kn / 0.6 deg: rounding.
            s, d, e, n = p["set_deg"], p["drift_kn"], p["east_kn"], p["north_kn"]
            if not 0 <= s < 360 or d < 0:
                bad.append(f"current set/drift {s}, {d}")
            # each of drift, east, north is published to 0.01 kn (±0.005, and ±0.0005 more where the
            # estimator rounded to 0.001 first): |(e, n)| and d may differ by 0.0055 (1 + √2) ≈ 0.0133
            if abs(math.hypot(e, n) - d) > 0.0133:
                bad.append(f"current drift {d} but |(east, north)| = {math.hypot(e, n):.3f}")
            if d > 0.05 and abs((math.degrees(math.atan2(e, n)) - s + 180) % 360 - 180) > 0.6 + 1.0 / d:
                bad.append(f"current set {s} but atan2(east, north) = {math.degrees(math.atan2(e, n)) % 360:.1f}")
    elif name == "pressure":
        bad += [f"pressure lacks {k}" for k in PRESSURE_FIELDS if k not in p]
        # MSL pressure stays within the observed world extremes, about 870 to 1084 hPa (WMO records, from memory)
        if not (_num(p.get("msl_hpa")) and 860 <= p["msl_hpa"] <= 1090):
            bad.append(f"pressure msl_hpa {p.get('msl_hpa')!r}")
        c = p.get("characteristic")
        if c is not None and (not isinstance(c, int) or not 0 <= c <= 8):  # WMO code table 0200: 0..8
            bad.append(f"pressure characteristic {c!r}")
    elif name == "sea_temperature":
        bad += [f"sea_temperature lacks {k}" for k in ("temp_c", "gradient_c_per_nm") if k not in p]
        if not (_num(p.get("temp_c")) and -2.5 <= p["temp_c"] <= 40):  # sea water freezes near -1.9 C
            bad.append(f"sea_temperature temp_c {p.get('temp_c')!r}")
    elif name == "sea_state":
        bad += [f"sea_state lacks {k}" for k in SEA_STATE_FIELDS if k not in p]
    elif name == "instruments":
        # added with the watch view: the latest readings, each with its age in s (never negative)
        if not all(_num(v) and v >= 0 for k, v in p.items() if k.endswith("_age_s")):
            bad.append(f"instruments ages {p!r}")
        for k in ("heading_deg", "wind_from_deg"):
            if k in p and not (_num(p[k]) and 0 <= p[k] < 360.5):
                bad.append(f"instruments {k} {p[k]!r}")
    elif name == "events":
        bad += [f"event lacks {k}" for k in ("kind", "lat", "lon") if k not in p]
        if p.get("kind") == "front_crossing":
            bad += [f"front_crossing lacks {k}" for k in ("delta_c", "gradient_c_per_nm", "warmer") if k not in p]
            if _num(p.get("delta_c")) and p.get("warmer") is not (p["delta_c"] > 0):
                bad.append(f"front_crossing delta_c {p['delta_c']} but warmer {p.get('warmer')}")
    elif name.startswith("alerts/"):
        alert_id = name.split("/", 1)[1]
        if p.get("id") != alert_id:
            bad.append(f"alert id {p.get('id')!r} on {topic}")
        if p.get("priority") not in PRIORITIES or p.get("state") not in STATES:
            bad.append(f"alert priority/state {p.get('priority')!r}/{p.get('state')!r}")
        # every alert text carries the advisory wording (the project's rules; daemon.core.payloads.ADVISORY)
        if "not for navigation" not in str(p.get("text", "")).lower():
            bad.append(f"alert {alert_id} text without the advisory: {p.get('text')!r}")
        since = p.get("since")
        if not (isinstance(since, str) and ISO_Z.match(since)) or _utc_s(since) > _utc_s(p["time"]) + 1e-3:
            bad.append(f"alert since {since!r} (time {p.get('time')})")
    else:
        bad.append(f"topic {topic} is not in interface.md")
    return bad


def interface_problems(lines: list[str], prefix: str = "offwatch") -> list[str]:
    """Every way the JSONL lines break interface.md, as readable strings (empty: all good).

    Each line is ``{"t": <data time, UNIX s>, "topic": "<full topic>", "payload": {...}}``; the payload's
    ``time`` is ISO 8601 UTC with ``Z`` and names the same instant as ``t``; lines are in order.
    """
    bad: list[str] = []
    last_t = -math.inf
    for i, line in enumerate(lines, start=1):
        d = json.loads(line)
        if set(d) != {"t", "topic", "payload"}:
            bad.append(f"line {i}: keys {sorted(d)}")
            continue
        t, topic, p = d["t"], d["topic"], d["payload"]
        where = f"line {i} ({topic})"
        if not topic.startswith(prefix + "/"):
            bad.append(f"{where}: topic outside {prefix}/")
        time = p.get("time")
        if not (isinstance(time, str) and ISO_Z.match(time)):
            bad.append(f"{where}: payload time {time!r} is not ISO 8601 UTC with Z")
        elif not (_num(t) and abs(_utc_s(time) - t) <= 0.0011):  # t to the ms, time to the ms
            bad.append(f"{where}: t {t} is not payload time {time}")
        if _num(t):
            if t < last_t:
                bad.append(f"{where}: t {t} before the line above ({last_t})")
            last_t = max(last_t, t)
        bad += [f"{where}: {b}" for b in _payload_problems(topic, p)]
        if len(bad) > 20:
            break
    return bad


class FakeAlerts:
    """An alert manager that keeps the conditions and acks it is given (pipeline tests)."""

    def __init__(self):
        self.conditions, self.acks = [], []

    def on_condition(self, cond):
        self.conditions.append(cond)
        return []

    def tick(self, t_s):
        return []

    def acknowledge(self, alert_id, t_s):
        self.acks.append((alert_id, t_s))
        if alert_id == "no_such_alert":  # as the real manager: an unknown id changes nothing
            return []
        return [Message(t_s, "boat/alerts/" + alert_id, {"id": alert_id}, True, 1, "alert")]
