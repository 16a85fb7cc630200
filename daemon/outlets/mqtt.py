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
* On (re)connect the link republishes, on its own, the latest retained
  message of every topic (states, the status, each listed alert) unless a
  newer one of that topic still waits in the queue; then the queued alert
  changes follow in order. So a broker that lost its retained messages, or a
  will that said "offline", is put right without the pipeline knowing: the
  data-time stream (JSONL, recording) depends on the input alone, never on
  when a broker came and went. Messages paho already held when the
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

import dataclasses
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
from daemon.outlets.outbox import Outbox, Outgoing, is_state
from daemon.core.config import MqttSettings, mask_url_password, mqtt_problems
from daemon.core.payloads import encode_json, iso_utc
from daemon.core.readings import Message, RawLine
from daemon.intake.acks import valid_alert_id

log = logging.getLogger(__name__)

OUTBOX_FILE = "mqtt-outbox.sqlite"
MAX_ACK_BYTES = 1024          # a larger payload on <prefix>/ack is ignored unread
MAX_PAYLOAD_DEPTH = 8         # nesting of arrays/objects allowed in a payload we read (an ack needs 1)
MAX_WORK_ITEMS = 20_000       # bound of the in-memory work queue (messages not yet in the outbox)
HOLD_RESENT_S = 10.0          # after a reconnect, how long new queued messages wait for paho's resends
CALLBACK_FAILURE_HOLD_S = 60.0  # healthy() stays False this long after a callback failed
DIAGNOSE_EVERY_S = 30.0       # a failing link is probed for its reason at most this often
DIAGNOSE_TIMEOUT_S = 3.0      # each step of that probe (TCP, TLS, CONNACK)
WORKER_STALL_S = 15.0         # healthy() is False when the worker has not looped for this long
# States that come within this of the first one are stored together: one outbox transaction (one fsync,
# synchronous=FULL) for the second's burst, not one per state; anything else is stored at once
STATES_GATHER_S = 0.5


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
    expected = f"{key} = {mask_url_password(url)!r}: expected mqtt://host:port or mqtts://host:port"
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


def tls_context(s: MqttSettings) -> ssl.SSLContext:
    """The TLS context for mqtts:// from the settings' files (certificate and host name checked);
    a ConfigError naming the key when a file is missing or unusable. The service and the watch view
    both connect with it."""
    for key in ("ca_file", "cert_file", "key_file"):
        path = getattr(s, key)
        if path and not Path(path).is_file():
            raise ConfigError(f"mqtt.{key} = {path!r}: no such file (give the PEM file for mqtts://)")
    if bool(s.cert_file) != bool(s.key_file):
        raise ConfigError("mqtt.cert_file and mqtt.key_file: give both for a client certificate, or neither")
    try:
        ctx = ssl.create_default_context(cafile=s.ca_file or None)
        if s.cert_file:
            ctx.load_cert_chain(s.cert_file, s.key_file)
    except (ssl.SSLError, OSError, ValueError) as e:
        raise ConfigError(f"mqtt.ca_file/cert_file/key_file: cannot use them for TLS: {e}") from None
    return ctx


# -- payloads -----------------------------------------------------------------

def encode_payload(payload: Mapping[str, Any]) -> bytes:
    """Compact UTF-8 JSON, as every message's payload is sent (``Message.payload_json``)."""
    return encode_json(payload).encode("utf-8")


def offline_payload(reason: str, now_s: float | None = None) -> bytes:
    """The status the broker shows when offwatch is gone (last will, clean close)."""
    now_s = time.time() if now_s is None else now_s
    return encode_payload({"time": iso_utc(now_s), "state": "offline", "sensors": {}, "reason": reason})


class PayloadRefused(ValueError):
    """A received payload that is not read: too large, too deep, or not UTF-8 JSON."""


def decode_json_payload(payload: bytes, max_bytes: int, max_depth: int = MAX_PAYLOAD_DEPTH) -> Any:
    """Parse a received payload as JSON only once it is known to be small and shallow.

    Size and nesting are checked on the raw bytes before the parser runs, so a
    ``[[[[…`` of any depth costs one linear scan and never a RecursionError in
    the JSON parser (which recurses once per level). Raises PayloadRefused.
    """
    if len(payload) > max_bytes:
        raise PayloadRefused(f"payload of {len(payload)} bytes (more than {max_bytes})")
    depth = nesting_depth(payload)
    if depth > max_depth:
        raise PayloadRefused(f"nested more than {max_depth} levels deep")
    try:
        return json.loads(payload.decode("utf-8"))
    except (UnicodeDecodeError, ValueError, RecursionError):
        raise PayloadRefused("not UTF-8 JSON") from None


def nesting_depth(payload: bytes) -> int:
    """The deepest nesting of ``[`` and ``{`` outside JSON strings, in one pass over the bytes."""
    depth = deepest = 0
    in_string = escaped = False
    for byte in payload:
        if in_string:
            if escaped:
                escaped = False
            elif byte == 0x5C:      # backslash
                escaped = True
            elif byte == 0x22:      # closing quote
                in_string = False
        elif byte == 0x22:
            in_string = True
        elif byte in (0x5B, 0x7B):  # [ {
            depth += 1
            deepest = max(deepest, depth)
        elif byte in (0x5D, 0x7D):  # ] }
            depth -= 1
    return deepest


def parse_ack(payload: bytes) -> tuple[str | None, str]:
    """``{"id": "<alert id>"}`` -> (id, ""); anything else -> (None, why it was refused)."""
    try:
        doc = decode_json_payload(payload, MAX_ACK_BYTES)
    except PayloadRefused as e:
        return None, str(e)
    if not isinstance(doc, dict):
        return None, "not a JSON object"
    alert_id = doc.get("id")
    if not isinstance(alert_id, str):
        return None, "no string field 'id'"
    if not valid_alert_id(alert_id):
        return None, "'id' is empty, too long or has unprintable or wildcard characters"
    return alert_id, ""


def _is_state_item(item: tuple) -> bool:
    """A work item that is a new state: only the latest of its topic matters, it may wait a little."""
    return item[0] == "msg" and is_state(item[1].qos, item[1].retain)


# -- the sink -----------------------------------------------------------------

class MqttSink:
    """A Sink that publishes to an MQTT broker through a persistent outbox.

    ``on_ack(alert_id, reply)`` is called from paho's network thread for each
    well-formed acknowledgement. It answers by calling ``reply(alert_id,
    acknowledged)`` (from any thread, at once or later), or by returning
    True/False; ``ack_accepted`` counts only the acks that acknowledged a listed
    alarm or warning, ``ack_ignored`` everything else.
    ``on_connected()`` is called from the worker thread after each connect (a
    notice only: whatever the link republishes, it does itself).
    """

    def __init__(self, settings: MqttSettings, outbox_path: str | os.PathLike[str] | None = None, *,
                 on_ack: Callable[[str, Callable[[str, bool], None]], object] | None = None,
                 on_connected: Callable[[], object] | None = None,
                 on_swell: Callable[[bytes], str] | None = None) -> None:
        self.settings = settings
        self.broker = parse_broker_url(settings.url)
        for problem in mqtt_problems(settings)[:1]:  # the config's own check: settings made in code too
            raise ConfigError(f"[mqtt] {problem}")
        prefix = settings.prefix.strip("/")
        self.status_topic = f"{prefix}/status"
        self.ack_topic = f"{prefix}/ack"
        self._on_ack = on_ack
        self._on_connected = on_connected
        self.swell_topic = f"{prefix}/swell"  # a swell the crew reports (daemon.intake.swell)
        self._on_swell = on_swell
        self.counters: Counter[str] = Counter()
        self.outbox = Outbox(outbox_path, max_queued=settings.max_queued)
        self._work: queue.Queue[tuple] = queue.Queue()
        self.outbox.forget_latest(self.status_topic)  # an earlier process's status is not ours to repeat
        self._dirty_states: set[str] = set()       # topics whose latest retained message is due
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
        self.link_fault: str | None = None          # why the link is down, in words (None: no known fault)
        self._last_diagnosis = -math.inf
        self._left_at_close: dict[str, int] | None = None  # undelivered, counted as the worker ends
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
                    on_ack: Callable[[str, Callable[[str, bool], None]], object] | None = None,
                    on_connected: Callable[[], object] | None = None,
                    close_timeout_s: float | None = None,
                    on_swell: Callable[[bytes], str] | None = None) -> MqttSink:
        """Build from the [mqtt] config section (``url`` and ``close_timeout_s`` in place of its own
        when given); the outbox lives in ``state_dir`` (memory when None)."""
        changes: dict[str, Any] = {"url": url} if url else {}
        if close_timeout_s is not None:
            changes["close_timeout_s"] = close_timeout_s
        settings = dataclasses.replace(cfg, **changes) if changes else cfg
        path = Path(state_dir) / OUTBOX_FILE if state_dir is not None else None
        return cls(settings, path, on_ack=on_ack, on_connected=on_connected, on_swell=on_swell)

    def _make_client(self) -> paho.Client:
        s, b = self.settings, self.broker
        self._tls_context: ssl.SSLContext | None = None
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
        # our own context (certificate and host name checked), so the fault diagnosis uses the very same
        ctx = tls_context(self.settings)
        client.tls_set_context(ctx)
        self._tls_context = ctx

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
        # the text is made once per message and shared with the recording
        item = ("msg", Outgoing(msg.topic, msg.payload_json().encode("utf-8"), msg.qos, msg.retain))
        self._accepted += 1  # before put: the worker may store it at once
        self._work.put(item)

    def close(self) -> None:
        """Wait at most ``close_timeout_s`` for the broker to take what is queued (paho keeps
        reconnecting meanwhile), say offline, disconnect. What was not delivered stays in a
        file outbox for the next start, and is told by ``undelivered()``."""
        if self._closing:
            return
        self._closing = True
        self._work.put(("close",))
        self._worker.join(timeout=self.settings.close_timeout_s + 5.0)
        self._client.loop_stop()
        if not self._worker.is_alive():
            self.outbox.close()
            self._outbox_closed = True

    def undelivered(self) -> dict[str, int]:
        """After ``close()``: what the broker never took, by kind (alerts, events, status, states,
        dropped). Empty when everything arrived."""
        left = self._left_at_close if self._left_at_close is not None else self._count_left()
        return {k: v for k, v in left.items() if v}

    def _count_left(self) -> dict[str, int]:
        left = {"alerts": 0, "events": 0, "status": 0, "states": 0, "dropped": 0}
        if not self._outbox_closed:
            for entry in self.outbox.queued(limit=self.outbox.max_queued):
                kind = "alerts" if "/alerts/" in entry.topic else "status" if entry.topic == self.status_topic \
                    else "events" if not entry.retain else "states"
                left[kind] += 1
            left["states"] += len(self._dirty_states)
            left["dropped"] = self.outbox.dropped
        left["dropped"] += self.counters["dropped_work_queue_full"] + (self._accepted - self._stored)
        return left

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
                "fault": self.link_fault,
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
            words = str(reason)
            hint = (" (check mqtt.username and mqtt.password or mqtt.password_file)"
                    if any(k in words.lower() for k in ("user name", "password", "authori")) else "")
            self.link_fault = f"the broker refused the connection: {words}{hint}"
            self._log_change(f"refused:{words}", f"MQTT: broker {self.broker.host}:{self.broker.port} refused the "
                                                 f"connection: {words}{hint}; retrying")
            return
        client.subscribe(self.ack_topic, qos=1)
        if self._on_swell is not None:
            client.subscribe(self.swell_topic, qos=1)
        self._work.put(("connected", time.monotonic()))

    def _cb_connect_fail(self, client: paho.Client, userdata: Any) -> None:
        self.counters["connect_failed"] += 1
        self._work.put(("diagnose",))  # paho does not say why: the worker finds out

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
        if self._on_ack is None:
            self._ack_refused("nothing here takes acknowledgements")
            return
        answer = self._on_ack(alert_id, self._ack_answered)
        if isinstance(answer, bool):
            self._ack_answered(alert_id, answer)

    def _ack_answered(self, alert_id: str, acknowledged: bool) -> None:
        """The answer to one ack (any thread): counted by the worker, which owns the counters' writes."""
        self._work.put(("ack_answer", alert_id, acknowledged))

    def _count_ack_answer(self, alert_id: str, acknowledged: bool) -> None:
        if acknowledged:
            self.counters["ack_accepted"] += 1
            log.info("MQTT: acknowledgement for %r", alert_id)
        else:
            self._ack_refused(f"{alert_id!r} is not a listed alarm or warning waiting for an acknowledgement")

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
                    # wait even when disconnected: paho goes on reconnecting, and a broker back
                    # within the bound still gets everything
                    close_deadline = time.monotonic() + self.settings.close_timeout_s
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
        try:
            self._left_at_close = self._count_left()
        except Exception:
            log.exception("MQTT: could not count what was not delivered")
        self._say_offline()

    def _take_work(self) -> list[tuple]:
        """What waits on the work queue; while it is all states, what follows within STATES_GATHER_S too."""
        items: list[tuple] = []
        try:
            items.append(self._work.get(timeout=0.2))
        except queue.Empty:
            return items
        until = time.monotonic() + STATES_GATHER_S
        only_states = _is_state_item(items[0])
        while len(items) < 1000:
            wait_s = until - time.monotonic() if only_states else 0.0
            try:
                item = self._work.get(timeout=wait_s) if wait_s > 0 else self._work.get_nowait()
            except queue.Empty:
                break
            items.append(item)
            only_states = only_states and _is_state_item(item)
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
            elif kind == "diagnose":
                self._diagnose()
            elif kind == "ack_answer":
                self._count_ack_answer(it[1], it[2])
            elif kind == "close":
                closing = True
        return closing

    def _on_connect_event(self, at: float) -> None:
        self._connected = True
        self.link_fault = None
        self._last_diagnosis = -math.inf
        self.connected_at = at
        self.counters["connects"] += 1
        self._log_change("connected", f"MQTT: connected to {self.broker.host}:{self.broker.port}", logging.INFO)
        self._dirty_states = self._republishable()
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

    def _republishable(self) -> set[str]:
        """Retained topics whose latest message is not still on its way (queued or in paho's hands)."""
        waiting = self.outbox.queued_topics() | {o.topic for o in self._inflight.values()}
        return {s.topic for s in self.outbox.latest_states()} - waiting

    def _diagnose(self) -> None:
        """Name why connecting fails (TLS, certificates, a plain client on a TLS port...): logged once per
        state, kept for the status; at most one probe of our own every DIAGNOSE_EVERY_S."""
        now = time.monotonic()
        if self._connected or self._closing or now - self._last_diagnosis < DIAGNOSE_EVERY_S:
            return
        self._last_diagnosis = now
        from daemon.outlets.broker import diagnose_broker
        state, text = diagnose_broker(self.broker.host, self.broker.port, self._tls_context,
                                      cert_given=bool(self.settings.cert_file), timeout=DIAGNOSE_TIMEOUT_S)
        if state == "answers":
            return  # the transport works: a refusal, if any, is reported from the CONNACK
        self.link_fault = text
        self._log_change(state, f"MQTT: {text}; retrying, keeping messages in the outbox")

    def _on_disconnect_event(self, at: float) -> None:
        if not self._connected:
            self.counters["connect_failed"] += 1
            self._diagnose()  # lost before the CONNACK: a TLS alert, a plain client on a TLS port...
        else:
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

