"""Set and drift back to the instruments: NMEA 0183 sentences to TCP clients.

A chartplotter or an instrument display that reads NMEA 0183 over TCP (port
10110 is customary) connects and receives:

- ``$IIVDR`` (set and drift) at most once a second of data time, while the
  current is ``valid`` or ``degraded`` (also ``converging`` on request): direction TOWARD in degrees true and
  magnetic, and the drift in knots. The field layout, from NMEA 0183 v3.01 and
  v4.10 as remembered: ``$--VDR,x.x,T,x.x,M,x.x,N*hh`` (direction true, T,
  direction magnetic, M, current speed, N). The magnetic direction uses the
  World Magnetic Model at the latest position; empty while no position is known.
- optionally (``alerts = true``) ``$IIALR`` for each alert change and every
  ``alert_repeat_s`` for alerts still listed. Layout, NMEA 0183 v3.01, from
  memory: ``$--ALR,hhmmss.ss,xxx,A,A,c--c*hh`` (time of the change UTC, alarm
  number 000-999, condition A = threshold exceeded / V = not, acknowledge state
  A = acknowledged / V = not, description). The description is cut so the
  sentence stays within 82 characters (``$`` to CR LF, NMEA 0183's limit) and
  has no reserved character.

Every sentence ends in CR LF with its checksum (the codec's ``checksum_hex``).

The pipeline never waits for a client: ``message()`` only formats and puts the
sentences on a bounded queue (full: dropped and counted). One thread owns the
sockets: it accepts clients (up to ``max_clients``; one more is closed and
counted), gives each a bounded buffer (a client that never reads loses the
sentences that do not fit, counted, and is dropped once it has been stuck for
``stall_s``), and throws away whatever a client sends. It binds to 127.0.0.1
unless the config says otherwise: the output is for this boat's network only.
"""

from __future__ import annotations

import logging
import queue
import selectors
import socket
import threading
import time
from dataclasses import dataclass
from datetime import datetime, timezone
from typing import Any

from daemon.core.readings import Message, RawLine
from daemon.errors import ConfigError
from daemon.intake.magvar import VariationProvider
from daemon.nmea0183.codec import checksum_hex, place
from estimators.params import param

log = logging.getLogger("offwatch.nmea_tcp")

MAX_SENTENCE = 82  # NMEA 0183: at most 82 characters from '$' to CR LF inclusive
RESERVED = set("$*,!\\^~\r\n")  # NMEA 0183 reserved characters: never inside a field
QUALITIES_SENT = ("valid", "degraded")

# alarm numbers in ALR (000-999): ours, one per alert id; unknown ids get 900 onwards
ALARM_NUMBERS = {"pressure_fall": 1, "rapid_deepening": 2, "front": 3, "gnss_lost": 4, "sensor_stale": 5,
                 "log_suspect": 6, "current_strong": 7, "wind_against_current": 8, "unstable_air": 9}


@dataclass(frozen=True)
class NmeaOutParams:
    enabled: bool = param(False, doc="send set and drift (VDR) to NMEA 0183 TCP clients")
    bind: str = param("127.0.0.1", doc="address to listen on; 0.0.0.0 for the whole boat network")
    port: int = param(10110, "", 1, 65535, "TCP port (10110 is customary for NMEA 0183)")
    talker: str = param("II", doc="talker ID of the sentences sent (II: integrated instrumentation)")
    send_converging: bool = param(False, doc="also send the current while the filter is still converging "
                                             "(its sigma above the 'valid' limit); a display shows no sigma")
    alerts: bool = param(False, doc="also send the alerts as ALR sentences")
    alert_repeat_s: float = param(30.0, "s", 1.0, 3600.0, "ALR of a listed alert repeated this often")
    max_clients: int = param(8, "", 1, 64, "clients at once; one more is refused")
    client_buffer_bytes: int = param(16384, "bytes", 512, 1048576, "unsent bytes kept per client")
    stall_s: float = param(30.0, "s", 1.0, 3600.0, "a client whose buffer stays full this long is dropped")

    def __post_init__(self) -> None:
        if len(self.talker) != 2 or not self.talker.isalpha() or not self.talker.isupper():
            raise ConfigError(f"[nmea_out] talker = {self.talker!r}: expected two capital letters, e.g. \"II\"")


def sentence(talker: str, kind: str, fields: list[str]) -> str:
    """``$<talker><kind>,f1,f2,...*hh`` with CR LF (NMEA 0183 framing, the codec's checksum)."""
    body = f"{talker}{kind}," + ",".join(fields)
    return f"${body}*{checksum_hex(body)}\r\n"


def _deg(v: float) -> str:
    """A direction to a tenth, 0.0 to 359.9 (359.96 is written 0.0, never 360.0)."""
    return f"{round(v % 360.0, 1) % 360.0:.1f}"


def vdr(talker: str, set_true_deg: float, drift_kn: float, variation_east_deg: float | None) -> str:
    """VDR: set (toward) true and magnetic, drift in knots."""
    set_mag = "" if variation_east_deg is None else _deg(set_true_deg - variation_east_deg)
    return sentence(talker, "VDR", place("VDR", set_true=_deg(set_true_deg), true_mark="T", set_magnetic=set_mag,
                                         magnetic_mark="M", drift_kn=f"{drift_kn:.2f}", kn_unit="N"))


def clean_text(text: str) -> str:
    """A description an NMEA field can carry: printable ASCII, no reserved character."""
    out = []
    for ch in text:
        if ch in RESERVED or not (" " <= ch <= "~"):
            ch = {"°": " deg"}.get(ch, " ")
        out.append(ch)
    return " ".join("".join(out).split())


def alr(talker: str, t_s: float, number: int, exceeded: bool, acknowledged: bool, text: str) -> str:
    """ALR: one alert's state; the text cut to keep the sentence within 82 characters."""
    hhmmss = datetime.fromtimestamp(t_s, tz=timezone.utc).strftime("%H%M%S.00")
    def fields(description: str) -> list[str]:
        return place("ALR", time=hhmmss, number=f"{number:03d}", condition="A" if exceeded else "V",
                     acknowledged="A" if acknowledged else "V", text=description)

    room = MAX_SENTENCE - len(sentence(talker, "ALR", fields("")))
    return sentence(talker, "ALR", fields(clean_text(text)[:max(0, room)]))


@dataclass
class NmeaOutStats:
    clients: int = 0
    accepted: int = 0
    refused: int = 0
    sentences: int = 0
    dropped_queue: int = 0
    dropped_client: int = 0
    stalled_clients: int = 0


class _Client:
    def __init__(self, sock: socket.socket, addr: Any) -> None:
        self.sock = sock
        self.addr = addr
        self.buf = bytearray()
        self.full_since: float | None = None
        self.dropped = 0


class NmeaTcpSink:
    """A Sink: current and alert messages in, NMEA 0183 sentences out to every TCP client."""

    def __init__(self, params: NmeaOutParams, *, clock=time.monotonic) -> None:
        self.p = params
        self.clock = clock
        self.stats = NmeaOutStats()
        self._queue: queue.Queue[bytes] = queue.Queue(maxsize=1000)
        self._variation = VariationProvider(mode="model")
        self._last_vdr_s = -float("inf")
        self._alerts: dict[str, dict[str, Any]] = {}
        self._last_alr_repeat_s = -float("inf")
        self._stop = threading.Event()
        try:
            self._listener = socket.create_server((params.bind, params.port), reuse_port=False)
        except OSError as e:
            raise ConfigError(f"[nmea_out] cannot listen on {params.bind}:{params.port}: {e.strerror or e}; "
                              "choose another port or bind address") from None
        self._listener.setblocking(False)
        self._clients: dict[int, _Client] = {}
        self._thread = threading.Thread(target=self._serve, name="nmea-tcp", daemon=True)
        self._thread.start()
        log.info("NMEA 0183 output listening on %s:%d", params.bind, self.port)

    @property
    def port(self) -> int:
        return self._listener.getsockname()[1]

    # -- Sink ---------------------------------------------------------------------
    def raw(self, line: RawLine) -> None:
        pass

    def message(self, msg: Message) -> None:
        name = msg.topic.rsplit("/", 1)[-1]
        p = msg.payload
        if name == "position" and msg.kind == "state":
            lat, lon = p.get("lat"), p.get("lon")
            if isinstance(lat, (int, float)) and isinstance(lon, (int, float)):
                self._variation.note_position(lat, lon, msg.t_s)
            self._repeat_alerts(msg.t_s)
        elif name == "current" and msg.kind == "state":
            self._current(msg)
        elif msg.kind == "alert" and self.p.alerts:
            self._alert(msg)

    def close(self) -> None:
        self._stop.set()
        self._thread.join(timeout=5.0)
        for c in list(self._clients.values()):
            c.sock.close()
        self._listener.close()

    def snapshot(self) -> dict[str, int]:
        return dict(vars(self.stats))

    def client_snapshot(self) -> list[dict[str, Any]]:
        """Per client: its port, bytes waiting for it, sentences it lost (a copy; for tests and status)."""
        return [{"port": c.addr[1] if isinstance(c.addr, tuple) else None, "buffered": len(c.buf),
                 "dropped": c.dropped} for c in list(self._clients.values())]

    # -- what is sent -------------------------------------------------------------
    def _current(self, msg: Message) -> None:
        p = msg.payload
        set_deg, drift = p.get("set_deg"), p.get("drift_kn")
        sent = QUALITIES_SENT + (("converging",) if self.p.send_converging else ())
        if p.get("quality") not in sent or not isinstance(set_deg, (int, float)) \
                or not isinstance(drift, (int, float)):
            return
        if msg.t_s - self._last_vdr_s < 1.0:  # 1 Hz of data time at most
            return
        self._last_vdr_s = msg.t_s
        self._send(vdr(self.p.talker, set_deg, drift, self._variation.east_deg(msg.t_s)))
        self._repeat_alerts(msg.t_s)

    def _alert(self, msg: Message) -> None:
        p = msg.payload
        aid, state = str(p.get("id", "")), p.get("state")
        if state == "cleared":
            self._alerts.pop(aid, None)
        else:
            self._alerts[aid] = dict(p)
        self._send(self._alr(msg.t_s, aid, p))

    def _alr(self, t_s: float, aid: str, p: Any) -> str:
        number = ALARM_NUMBERS.get(aid, 900 + sum(aid.encode()) % 100)
        state = p.get("state")
        exceeded = state in ("active", "acknowledged")
        acknowledged = state in ("acknowledged", "cleared")
        return alr(self.p.talker, t_s, number, exceeded, acknowledged, str(p.get("text", aid)))

    def _repeat_alerts(self, t_s: float) -> None:
        if not self._alerts or t_s - self._last_alr_repeat_s < self.p.alert_repeat_s:
            return
        self._last_alr_repeat_s = t_s
        for aid, p in self._alerts.items():
            self._send(self._alr(t_s, aid, p))

    def _send(self, text: str) -> None:
        try:
            self._queue.put_nowait(text.encode("ascii"))
            self.stats.sentences += 1
        except queue.Full:
            self.stats.dropped_queue += 1

    # -- the socket thread --------------------------------------------------------
    def _serve(self) -> None:
        sel = selectors.DefaultSelector()
        sel.register(self._listener, selectors.EVENT_READ, None)
        try:
            while not self._stop.is_set():
                for key, events in sel.select(timeout=0.05):
                    if key.data is None:
                        self._accept(sel)
                    elif events & selectors.EVENT_READ:
                        self._discard_input(sel, key.data)
                self._distribute()
                self._write_all(sel)
            self._distribute()  # what was queued before close still goes out, as far as clients take it
            self._write_all(sel)
        finally:
            sel.close()

    def _accept(self, sel: selectors.BaseSelector) -> None:
        try:
            sock, addr = self._listener.accept()
        except OSError:
            return
        if len(self._clients) >= self.p.max_clients:
            self.stats.refused += 1
            sock.close()
            return
        sock.setblocking(False)
        # the kernel's send buffer bounded too: a client that never reads holds little memory anywhere
        sock.setsockopt(socket.SOL_SOCKET, socket.SO_SNDBUF, self.p.client_buffer_bytes)
        client = _Client(sock, addr)
        self._clients[sock.fileno()] = client
        sel.register(sock, selectors.EVENT_READ, client)
        self.stats.accepted += 1
        self.stats.clients = len(self._clients)
        log.info("NMEA 0183 client %s connected", addr[0] if isinstance(addr, tuple) else addr)

    def _discard_input(self, sel: selectors.BaseSelector, client: _Client) -> None:
        """Whatever a client sends is not read for meaning; an empty read is its goodbye."""
        try:
            data = client.sock.recv(4096)
        except BlockingIOError:
            return
        except OSError:
            data = b""
        if not data:
            self._drop(sel, client)

    def _distribute(self) -> None:
        while True:
            try:
                data = self._queue.get_nowait()
            except queue.Empty:
                return
            for c in list(self._clients.values()):
                if len(c.buf) + len(data) > self.p.client_buffer_bytes:
                    self._flush(c)  # a burst: make room if the client reads
                if len(c.buf) + len(data) > self.p.client_buffer_bytes:
                    self.stats.dropped_client += 1
                    c.dropped += 1
                    if c.full_since is None:
                        c.full_since = self.clock()
                else:
                    c.buf += data

    def _flush(self, c: _Client) -> bool:
        """Send what the socket takes now; False when the client is gone."""
        try:
            sent = c.sock.send(c.buf)
        except BlockingIOError:
            return True
        except OSError:
            return False
        del c.buf[:sent]
        if sent:
            c.full_since = None
        return True

    def _write_all(self, sel: selectors.BaseSelector) -> None:
        now = self.clock()
        for c in list(self._clients.values()):
            if c.buf and not self._flush(c):
                self._drop(sel, c)
                continue
            if c.full_since is not None and now - c.full_since > self.p.stall_s:
                self.stats.stalled_clients += 1
                log.warning("NMEA 0183 client %s never reads: dropped", c.addr)
                self._drop(sel, c)

    def _drop(self, sel: selectors.BaseSelector, client: _Client) -> None:
        try:
            sel.unregister(client.sock)
        except (KeyError, ValueError):
            pass
        self._clients.pop(client.sock.fileno(), None)
        client.sock.close()
        self.stats.clients = len(self._clients)


__all__ = ["NmeaOutParams", "NmeaTcpSink", "vdr", "alr", "sentence", "clean_text", "ALARM_NUMBERS"]
