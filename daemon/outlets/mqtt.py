"""The MQTT output: publishes every Message to a broker, and takes acknowledgements back.

How it is built (paho-mqtt 2.x, callback API version 2):

* ``message()`` only serialises the payload and puts it on an in-memory work
  queue: the reading loop never waits for the network or the disk.
* One **worker thread** owns the outbox (daemon/outlets/outbox.py) and hands paho what
  may be in flight. Paho's network thread (``loop_start``) only reports events
  (connected, disconnected, published ``mid``) back onto the same work queue,
  so the outbox is touched by one thread only.
* Paho's own queue is not trusted with what must arrive: it keeps QoS-1
  messages in memory without bound, loses them on restart and drops QoS 0
  while disconnected. So paho only ever holds a small window (``window``) of
  queued messages; the rest wait in the outbox, and an entry leaves the outbox
  only once paho reports it published (PUBACK for QoS 1).
* On (re)connect: the latest state of every topic is published again, the
  ``on_connected`` hook runs (the pipeline republishes its status), then the
  queued alert changes follow in order. Messages paho already held when the
  connection dropped are resent by paho itself; new ones wait until those are
  acknowledged, so the order holds across a broker restart.
* ``<prefix>/status`` carries a retained last will ``{"state": "offline"}``; a
  clean ``close()`` publishes the same itself, since a clean disconnect
  suppresses the will.
* An exception escaping a paho callback would end paho's network thread for
  good: every callback catches, logs and counts. ``healthy()`` tells the
  watchdog whether both threads live and callbacks are not failing.
* ``<prefix>/ack`` is the one command topic: ``{"id": "<alert id>"}`` is handed
  to ``on_ack``; anything else is logged and counted, never fatal.
"""

from __future__ import annotations

import json
import logging
import math
import os
import queue
import ssl
import threading
import time
from collections import Counter
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any
from urllib.parse import unquote, urlsplit

import paho.mqtt.client as paho
from paho.mqtt.enums import CallbackAPIVersion, MQTTErrorCode

from daemon.errors import ConfigError
from daemon.outlets.outbox import DEFAULT_MAX_QUEUED, Outbox, Outgoing
from daemon.core.readings import Message, RawLine
from estimators.base import iso_utc

log = logging.getLogger(__name__)

OUTBOX_FILE = "mqtt-outbox.sqlite"
MAX_ACK_BYTES = 1024          # a larger payload on <prefix>/ack is ignored unread
MAX_WORK_ITEMS = 20_000       # bound of the in-memory work queue (messages not yet in the outbox)
HOLD_RESENT_S = 10.0          # after a reconnect, how long new queued messages wait for paho's resends
CALLBACK_FAILURE_HOLD_S = 60.0  # healthy() stays False this long after a callback failed
WORKER_STALL_S = 15.0         # healthy() is False when the worker has not looped for this long


# -- the broker address -------------------------------------------------------

@dataclass(frozen=True, slots=True)
class BrokerUrl:
    """``mqtt://[user[:password]@]host[:port]`` (1883) or ``mqtts://…`` (TLS, 8883)."""

    host: str
    port: int
    tls: bool
    username: str = ""
    password: str = ""


def parse_broker_url(url: str, key: str = "mqtt.url") -> BrokerUrl:
    """Parse a broker URL; a bad one raises ConfigError naming ``key`` and the expected form."""
    expected = f"{key} = {url!r}: expected mqtt://host:port or mqtts://host:port"
    try:
        parts = urlsplit(url.strip())
        port = parts.port
    except ValueError:
        raise ConfigError(expected) from None
    if parts.scheme not in ("mqtt", "mqtts") or not parts.hostname:
        raise ConfigError(expected)
    if parts.path not in ("", "/") or parts.query or parts.fragment:
        raise ConfigError(expected + " (no path or query)")
    tls = parts.scheme == "mqtts"
    return BrokerUrl(host=parts.hostname, port=port or (8883 if tls else 1883), tls=tls,
                     username=unquote(parts.username or ""), password=unquote(parts.password or ""))


@dataclass(frozen=True, slots=True)
class MqttSettings:
    """Everything the sink needs to reach a broker (the [mqtt] section plus tuning)."""

    url: str = "mqtt://127.0.0.1:1883"
    prefix: str = "offwatch"
    client_id: str = "offwatch"
    username: str = ""
    password: str = ""
    ca_file: str = ""        # mqtts://: CA certificate file; empty: the system's CAs
    cert_file: str = ""      # mqtts://: client certificate (optional)
    key_file: str = ""       # mqtts://: client key (optional)
    protocol: str = "3.1.1"  # or "5"
    keepalive_s: int = 30
    max_queued: int = DEFAULT_MAX_QUEUED
    window: int = 10         # queued messages paho may hold at once
    close_timeout_s: float = 2.0


# -- payloads -----------------------------------------------------------------

def encode_payload(payload: Mapping[str, Any]) -> bytes:
    """Compact UTF-8 JSON; a non-finite number (not JSON) becomes null."""
    try:
        text = json.dumps(payload, ensure_ascii=False, separators=(",", ":"), allow_nan=False)
    except ValueError:
        text = json.dumps(_finite_or_null(payload), ensure_ascii=False, separators=(",", ":"), allow_nan=False)
    return text.encode("utf-8")


def _finite_or_null(value: Any) -> Any:
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, Mapping):
        return {k: _finite_or_null(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_finite_or_null(v) for v in value]
    return value


def offline_payload(reason: str, now_s: float | None = None) -> bytes:
    """The status the broker shows when offwatch is gone (last will, clean close)."""
    now_s = time.time() if now_s is None else now_s
    return encode_payload({"time": iso_utc(now_s), "state": "offline", "sensors": {}, "reason": reason})


def parse_ack(payload: bytes) -> tuple[str | None, str]:
    """``{"id": "<alert id>"}`` -> (id, ""); anything else -> (None, why it was refused)."""
    if len(payload) > MAX_ACK_BYTES:
        return None, f"payload of {len(payload)} bytes (more than {MAX_ACK_BYTES})"
    try:
        doc = json.loads(payload.decode("utf-8"))
    except (UnicodeDecodeError, ValueError):
        return None, "not UTF-8 JSON"
    if not isinstance(doc, dict):
        return None, "not a JSON object"
    alert_id = doc.get("id")
    if not isinstance(alert_id, str):
        return None, "no string field 'id'"
    if not alert_id or len(alert_id) > 128 or not alert_id.isprintable() or any(c in alert_id for c in "+#"):
        return None, "'id' is empty, too long or has unprintable or wildcard characters"
    return alert_id, ""


# -- the sink -----------------------------------------------------------------

class MqttSink:
    """A Sink that publishes to an MQTT broker through a persistent outbox.

    ``on_ack(alert_id)`` is called from paho's network thread for each valid
    acknowledgement; it may return False to say the id is unknown (counted).
    ``on_connected()`` is called from the worker thread after each connect.
    """

    def __init__(self, settings: MqttSettings, outbox_path: str | os.PathLike[str] | None = None, *,
                 on_ack: Callable[[str], object] | None = None,
                 on_connected: Callable[[], object] | None = None,
                 on_swell: Callable[[bytes], str] | None = None) -> None:
        self.settings = settings
        self.broker = parse_broker_url(settings.url)
        prefix = settings.prefix.strip("/")
        if not prefix or any(c in prefix for c in "+#"):
            raise ConfigError(f"mqtt.prefix = {settings.prefix!r}: expected a topic without wildcards, e.g. offwatch")
        if settings.protocol not in ("3.1.1", "5"):
            raise ConfigError(f"mqtt.protocol = {settings.protocol!r}: expected '3.1.1' or '5'")
        if settings.window < 1:
            raise ConfigError(f"mqtt.window = {settings.window!r}: expected at least 1")
        self.status_topic = f"{prefix}/status"
        self.ack_topic = f"{prefix}/ack"
        self._on_ack = on_ack
        self._on_connected = on_connected
        self.swell_topic = f"{prefix}/swell"  # a swell the crew reports (daemon.intake.swell)
        self._on_swell = on_swell
        self.counters: Counter[str] = Counter()
        self.outbox = Outbox(outbox_path, max_queued=settings.max_queued)
        self._work: queue.Queue[tuple] = queue.Queue()
        self._dirty_states: set[str] = {s.topic for s in self.outbox.latest_states()}
        self._inflight: dict[int, Outgoing] = {}   # paho mid -> queued entry paho holds
        self._held: set[int] = set()               # mids paho resends after a reconnect
        self._hold_until = 0.0
        self._connected = False
        self._closing = False
        self._outbox_closed = False
        self._accepted = 0   # messages put on the work queue (pipeline thread)
        self._stored = 0     # of those, stored in the outbox (worker thread)
        self._last_callback_failure = -math.inf
        self._heartbeat = time.monotonic()
        self.connected_at: float | None = None      # monotonic time of the latest CONNACK
        self.disconnected_at: float | None = None   # monotonic time of the latest loss
        self._client = self._make_client()
        self._worker = threading.Thread(target=self._work_loop, name="offwatch-mqtt-outbox", daemon=True)
        self._worker.start()
        self._client.connect_async(self.broker.host, self.broker.port, keepalive=settings.keepalive_s,
                                   **({"clean_start": True} if settings.protocol == "5" else {}))
        self._client.loop_start()

    @classmethod
    def from_config(cls, cfg: Any, *, url: str | None = None, state_dir: str | os.PathLike[str] | None = None,
                    on_ack: Callable[[str], object] | None = None,
                    on_connected: Callable[[], object] | None = None,
                    on_swell: Callable[[bytes], str] | None = None) -> MqttSink:
        """Build from the [mqtt] config section; the outbox lives in ``state_dir`` (memory when None)."""
        names = ("prefix", "client_id", "username", "password", "ca_file", "cert_file", "key_file", "protocol")
        settings = MqttSettings(url=url or cfg.url, **{n: getattr(cfg, n) for n in names if hasattr(cfg, n)})
        path = Path(state_dir) / OUTBOX_FILE if state_dir is not None else None
        return cls(settings, path, on_ack=on_ack, on_connected=on_connected, on_swell=on_swell)

    def _make_client(self) -> paho.Client:
        s, b = self.settings, self.broker
        protocol = paho.MQTTv5 if s.protocol == "5" else paho.MQTTv311
        client = paho.Client(CallbackAPIVersion.VERSION2, client_id=s.client_id, protocol=protocol,
                             **({} if protocol == paho.MQTTv5 else {"clean_session": True}))
        username = s.username or b.username
        if username:
            client.username_pw_set(username, s.password or b.password or None)
        if b.tls:
            self._set_tls(client)
        client.will_set(self.status_topic, offline_payload("connection lost"), qos=1, retain=True)
        client.reconnect_delay_set(min_delay=1, max_delay=5)
        client.max_inflight_messages_set(s.window)
        client.on_connect = self._guarded(self._cb_connect)
        client.on_disconnect = self._guarded(self._cb_disconnect)
        client.on_publish = self._guarded(self._cb_publish)
        client.on_message = self._guarded(self._cb_message)
        client.on_connect_fail = self._guarded(self._cb_connect_fail)
        return client

    def _set_tls(self, client: paho.Client) -> None:
        s = self.settings
        for key in ("ca_file", "cert_file", "key_file"):
            path = getattr(s, key)
            if path and not Path(path).is_file():
                raise ConfigError(f"mqtt.{key} = {path!r}: no such file (give the PEM file for mqtts://)")
        if bool(s.cert_file) != bool(s.key_file):
            raise ConfigError("mqtt.cert_file and mqtt.key_file: give both for a client certificate, or neither")
        try:
            client.tls_set(ca_certs=s.ca_file or None, certfile=s.cert_file or None, keyfile=s.key_file or None,
                           cert_reqs=ssl.CERT_REQUIRED, tls_version=ssl.PROTOCOL_TLS_CLIENT)
        except (ssl.SSLError, OSError, ValueError) as e:
            raise ConfigError(f"mqtt.ca_file/cert_file/key_file: cannot use them for TLS: {e}") from None

    # -- the Sink protocol (pipeline thread) ----------------------------------

    def raw(self, line: RawLine) -> None:
        pass

    def message(self, msg: Message) -> None:
        """Queue one message for the worker; never blocks."""
        if self._closing:
            return
        if self._work.qsize() >= MAX_WORK_ITEMS:
            self.counters["dropped_work_queue_full"] += 1
            return
        item = ("msg", Outgoing(msg.topic, encode_payload(msg.payload), msg.qos, msg.retain))
        self._accepted += 1  # before put: the worker may store it at once
        self._work.put(item)

    def close(self) -> None:
        """Keep what is pending in the outbox, say offline, disconnect; waits at most ~close_timeout_s."""
        if self._closing:
            return
        self._closing = True
        self._work.put(("close",))
        self._worker.join(timeout=self.settings.close_timeout_s + 5.0)
        self._client.loop_stop()
        if not self._worker.is_alive():
            self.outbox.close()
            self._outbox_closed = True

    # -- health -----------------------------------------------------------------

    def healthy(self) -> bool:
        """For the watchdog: both threads alive and no callback failed lately."""
        net = getattr(self._client, "_thread", None)  # paho keeps its loop_start() thread here
        if net is None or not net.is_alive() or not self._worker.is_alive():
            return False
        now = time.monotonic()
        if now - self._heartbeat > WORKER_STALL_S:
            return False
        return now - self._last_callback_failure > CALLBACK_FAILURE_HOLD_S

    @property
    def connected(self) -> bool:
        return self._connected

    def snapshot(self) -> dict[str, Any]:
        """Counters and state for the health report and the status topic."""
        return {"connected": self._connected, "healthy": self.healthy(), "pending": self.pending(),
                "dropped_outbox_full": self.outbox.dropped if not self._outbox_closed else None,
                **dict(self.counters)}

    def pending(self) -> int:
        """Queued messages not yet taken by the broker (outbox and work queue)."""
        queued = 0 if self._outbox_closed else self.outbox.queued_count()
        return queued + (self._accepted - self._stored)

    # -- paho callbacks (network thread): report, never raise --------------------

    def _guarded(self, fn: Callable[..., None]) -> Callable[..., None]:
        def call(*args: Any) -> None:
            try:
                fn(*args)
            except Exception:
                self.counters["callback_errors"] += 1
                self._last_callback_failure = time.monotonic()
                log.exception("MQTT: error in the %s callback (caught; the network thread goes on)", fn.__name__)
        call.__name__ = fn.__name__
        return call

    def _cb_connect(self, client: paho.Client, userdata: Any, flags: Any, reason: Any, properties: Any) -> None:
        if reason.is_failure:
            self.counters["connect_refused"] += 1
            self._log_change("refused", f"MQTT: broker {self.broker.host}:{self.broker.port} refused: {reason}")
            return
        client.subscribe(self.ack_topic, qos=1)
        if self._on_swell is not None:
            client.subscribe(self.swell_topic, qos=1)
        self._work.put(("connected", time.monotonic()))

    def _cb_connect_fail(self, client: paho.Client, userdata: Any) -> None:
        self.counters["connect_failed"] += 1
        self._log_change("unreachable", f"MQTT: broker {self.broker.host}:{self.broker.port} does not answer;"
                                        " retrying, keeping messages in the outbox")

    def _cb_disconnect(self, client: paho.Client, userdata: Any, flags: Any, reason: Any, properties: Any) -> None:
        self._work.put(("disconnected", time.monotonic()))

    def _cb_publish(self, client: paho.Client, userdata: Any, mid: int, reason: Any, properties: Any) -> None:
        self._work.put(("published", mid, bool(getattr(reason, "is_failure", False))))

    def _cb_message(self, client: paho.Client, userdata: Any, msg: paho.MQTTMessage) -> None:
        if msg.topic == self.swell_topic and self._on_swell is not None:
            why = self._on_swell(bytes(msg.payload))  # retained is fine: the swell is a state
            self.counters["swell_ignored" if why else "swell_accepted"] += 1
            if why:
                log.warning("MQTT: ignored a message on %s: %s", self.swell_topic, why)
            return
        if msg.topic != self.ack_topic:
            return
        if msg.retain:
            # a retained ack would acknowledge again at every reconnect
            self._ack_refused("a retained message")
            return
        alert_id, why = parse_ack(msg.payload)
        if alert_id is None:
            self._ack_refused(why)
            return
        answer = self._on_ack(alert_id) if self._on_ack is not None else None
        if answer is False:
            self._ack_refused(f"unknown or not acknowledgeable id {alert_id!r}")
        else:
            self.counters["ack_accepted"] += 1
            log.info("MQTT: acknowledgement for %r", alert_id)

    def _ack_refused(self, why: str) -> None:
        self.counters["ack_ignored"] += 1
        log.warning("MQTT: ignored a message on %s: %s", self.ack_topic, why)

    _last_logged = ""

    def _log_change(self, state: str, text: str, level: int = logging.WARNING) -> None:
        """Log once per state change, not once per retry."""
        if state != self._last_logged:
            self._last_logged = state
            log.log(level, text)

    # -- the worker thread: owns the outbox ------------------------------------

    def _work_loop(self) -> None:
        closing = False
        close_deadline = math.inf
        while True:
            items = self._take_work()
            self._heartbeat = time.monotonic()
            try:
                closing |= self._handle(items)
                if closing and close_deadline == math.inf:
                    close_deadline = time.monotonic() + (self.settings.close_timeout_s if self._connected else 0.0)
                self._pump()
                if closing and (time.monotonic() >= close_deadline or self._drained()):
                    break
            except Exception:
                # a broken outbox must not end the worker: count it, try again at the next item
                self.counters["worker_errors"] += 1
                self._last_callback_failure = time.monotonic()
                log.exception("MQTT: error in the outbox worker")
                if closing:
                    break
        self._say_offline()

    def _take_work(self) -> list[tuple]:
        items: list[tuple] = []
        try:
            items.append(self._work.get(timeout=0.2))
            while len(items) < 1000:
                items.append(self._work.get_nowait())
        except queue.Empty:
            pass
        return items

    def _handle(self, items: list[tuple]) -> bool:
        """Store new messages in one transaction, then apply the network events in order."""
        new = [it[1] for it in items if it[0] == "msg"]
        if new:
            for it, seq in zip(new, self.outbox.store(new)):
                if seq is None:
                    self._dirty_states.add(it.topic)
            self._stored += len(new)
        closing = False
        for it in items:
            kind = it[0]
            if kind == "connected":
                self._on_connect_event(it[1])
            elif kind == "disconnected":
                self._on_disconnect_event(it[1])
            elif kind == "published":
                self._on_published(it[1], it[2])
            elif kind == "close":
                closing = True
        return closing

    def _on_connect_event(self, at: float) -> None:
        self._connected = True
        self.connected_at = at
        self.counters["connects"] += 1
        self._log_change("connected", f"MQTT: connected to {self.broker.host}:{self.broker.port}", logging.INFO)
        self._dirty_states = {s.topic for s in self.outbox.latest_states()}
        # paho resends what it held at the drop; new queued messages wait for those
        self._held = {mid for mid, o in self._inflight.items() if o.qos > 0}
        self._hold_until = time.monotonic() + HOLD_RESENT_S
        self._publish_states()
        if self._on_connected is not None:
            try:
                self._on_connected()
            except Exception:
                self.counters["callback_errors"] += 1
                self._last_callback_failure = time.monotonic()
                log.exception("MQTT: error in the on_connected hook")

    def _on_disconnect_event(self, at: float) -> None:
        if self._connected:
            self.counters["disconnects"] += 1
            self.disconnected_at = at
            self._log_change("lost", f"MQTT: lost the broker {self.broker.host}:{self.broker.port};"
                                     " keeping messages in the outbox")
        self._connected = False
        # QoS 0 that paho had not written is gone with the connection: hand it again later
        for mid in [m for m, o in self._inflight.items() if o.qos == 0]:
            del self._inflight[mid]

    def _on_published(self, mid: int, refused: bool) -> None:
        entry = self._inflight.pop(mid, None)
        self._held.discard(mid)
        if entry is None:
            return  # a state, or the offline status
        if refused:
            self.counters["refused_by_broker"] += 1
            log.warning("MQTT: the broker refused %s; dropped", entry.topic)
        else:
            self.counters["delivered"] += 1
        assert entry.seq is not None
        self.outbox.remove(entry.seq)

    def _pump(self) -> None:
        """Hand paho the latest states, then queued messages up to the window."""
        if not self._connected:
            return
        self._publish_states()
        if self._held:
            if time.monotonic() < self._hold_until:
                return
            # paho did not resend them in time: forget them, the outbox hands them again
            for mid in self._held:
                self._inflight.pop(mid, None)
            self._held.clear()
        free = self.settings.window - len(self._inflight)
        if free <= 0:
            return
        handed = {o.seq for o in self._inflight.values()}
        for entry in self.outbox.queued(limit=free + len(handed)):
            if free <= 0:
                break
            if entry.seq in handed:
                continue
            info = self._client.publish(entry.topic, entry.payload, qos=entry.qos, retain=entry.retain)
            if info.rc == MQTTErrorCode.MQTT_ERR_SUCCESS or (entry.qos > 0 and info.rc == MQTTErrorCode.MQTT_ERR_NO_CONN):
                self._inflight[info.mid] = entry  # QoS 1 without a connection: paho holds it and resends
                free -= 1
                self.counters["handed"] += 1
            else:
                break

    def _publish_states(self) -> None:
        for topic in sorted(self._dirty_states):
            state = self.outbox.latest(topic)
            if state is None:
                self._dirty_states.discard(topic)
                continue
            info = self._client.publish(state.topic, state.payload, qos=state.qos, retain=state.retain)
            if info.rc != MQTTErrorCode.MQTT_ERR_SUCCESS:
                return  # the connection went; all states are published again at the next connect
            self._dirty_states.discard(topic)
            self.counters["states_published"] += 1

    def _drained(self) -> bool:
        return not self._inflight and self.outbox.queued_count() == 0 and not self._dirty_states

    def _say_offline(self) -> None:
        """A clean disconnect suppresses the will: publish the offline status ourselves."""
        try:
            if self._connected:
                info = self._client.publish(self.status_topic, offline_payload("stopped"), qos=1, retain=True)
                info.wait_for_publish(timeout=1.0)
            self._client.disconnect()
        except Exception:
            log.exception("MQTT: could not say offline at close")

