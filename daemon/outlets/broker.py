"""Is a broker there? And, for the demo only, a small one of our own.

``broker_answers`` sends a real MQTT 3.1.1 CONNECT and waits for the CONNACK
(OASIS MQTT Version 3.1.1, sections 3.1 and 3.2): an open TCP port alone does
not prove an MQTT broker.

``EmbeddedBroker`` runs a pure-Python broker (amqtt, the optional extra
``offwatch[demo]``) on loopback in a background thread, so the demo works on a
machine without Mosquitto. ``offwatch run`` never starts one: on a boat the
broker is the system's Mosquitto.
"""

from __future__ import annotations

import asyncio
import logging
import os
import socket
import ssl
import struct
import threading
from typing import Any

from daemon.errors import OutputError

log = logging.getLogger(__name__)


def connect_packet(client_id: str, keepalive_s: int = 10) -> bytes:
    """An MQTT 3.1.1 CONNECT with a clean session and no will, user or password."""

    def utf8(s: str) -> bytes:
        b = s.encode("utf-8")
        return struct.pack("!H", len(b)) + b

    # variable header: protocol name "MQTT", level 4 (3.1.1), flags 0x02 (clean session), keep alive
    body = utf8("MQTT") + bytes([4, 0x02]) + struct.pack("!H", keepalive_s) + utf8(client_id)
    return bytes([0x10]) + remaining_length(len(body)) + body


def remaining_length(n: int) -> bytes:
    """The variable-length encoding of MQTT 3.1.1 section 2.2.3 (7 bits a byte, high bit = more)."""
    out = bytearray()
    while True:
        n, digit = divmod(n, 128)
        out.append(digit | (0x80 if n else 0))
        if not n:
            return bytes(out)


def broker_answers(host: str, port: int, timeout: float = 1.0) -> bool:
    """True when an MQTT broker at host:port answers a CONNECT with a CONNACK (any return code)."""
    try:
        with socket.create_connection((host, port), timeout=timeout) as sock:
            sock.settimeout(timeout)
            sock.sendall(connect_packet(f"offwatch-probe-{os.getpid()}"))
            reply = b""
            while len(reply) < 4:
                chunk = sock.recv(4 - len(reply))
                if not chunk:
                    return False
                reply += chunk
            # CONNACK: type 2 (0x20), remaining length 2, ack flags, return code (3.2)
            ok = reply[0] == 0x20 and reply[1] == 0x02
            if ok and reply[3] == 0:
                sock.sendall(b"\xe0\x00")  # DISCONNECT, so the broker logs a clean goodbye
            return ok
    except OSError:
        return False


# -- why a broker cannot be reached ---------------------------------------------

def diagnose_broker(host: str, port: int, tls: ssl.SSLContext | None, *, cert_given: bool = False,
                    timeout: float = 3.0) -> tuple[str, str]:
    """Why a connection to the broker fails, in words a person can act on: ``(state, text)``.

    One connection attempt of our own, step by step (TCP, then the TLS
    handshake, then an MQTT CONNECT), so each fault is named where it happens:
    paho only reports that a connection failed. ``state`` is ``"answers"`` (and
    the text empty) when the broker sent a CONNACK, whatever its code: the
    transport works and paho's own report of the refusal says the rest.
    """
    where = f"{host}:{port}"
    try:
        raw = socket.create_connection((host, port), timeout=timeout)
    except socket.gaierror as e:
        return "no_such_host", f"cannot find the broker's host {host!r} ({e.strerror})"
    except ConnectionRefusedError:
        return "refused", f"nothing listens on {where} (is the broker running? is the port right?)"
    except OSError as e:
        return "unreachable", f"{where} does not answer ({e.strerror or e.__class__.__name__})"
    with raw:
        raw.settimeout(timeout)
        sock: socket.socket = raw
        if tls is not None:
            try:
                sock = tls.wrap_socket(raw, server_hostname=host)
            except ssl.SSLCertVerificationError as e:
                return "tls_certificate", (f"TLS: the broker's certificate at {where} does not verify "
                                           f"({e.verify_message}): check mqtt.ca_file (empty: the system's CAs)")
            except ssl.SSLError as e:
                return _tls_failure(e, where, cert_given)
            except OSError:
                return "tls_not_tls", (f"TLS: {where} does not speak TLS (no handshake came back): use mqtt:// "
                                       "for a plain port, or give the broker's TLS port")
        try:
            if tls is not None:
                _early_tls_alert(sock)  # TLS 1.3: a refused client certificate comes after the handshake
            sock.sendall(connect_packet(f"offwatch-probe-{os.getpid()}"))
            reply = _read_up_to(sock, 4)
        except ssl.SSLEOFError:
            if tls is not None and not cert_given:
                return "tls_client_certificate", (f"TLS: the broker at {where} closed the connection right after "
                                                  "the handshake: it may demand a client certificate "
                                                  "(mqtt.cert_file and mqtt.key_file)")
            reply = b""
        except ssl.SSLError as e:
            return _tls_failure(e, where, cert_given)
        except OSError:
            reply = b""
    if len(reply) == 4 and reply[0] == 0x20:
        return "answers", ""
    if tls is None and (not reply or reply[0] in (0x15, 0x16)):  # a TLS alert or handshake record (RFC 8446, 5.1)
        return "not_mqtt", (f"{where} closed the connection without an MQTT answer: "
                            "if it is a TLS port, use mqtts://")
    return "not_mqtt", f"{where} answers, but not as an MQTT broker: check the port"


def _tls_failure(e: ssl.SSLError, where: str, cert_given: bool) -> tuple[str, str]:
    reason = (e.reason or str(e)).upper()
    if "CERTIFICATE_REQUIRED" in reason or (not cert_given and "HANDSHAKE_FAILURE" in reason):
        return "tls_client_certificate", (f"TLS: the broker at {where} demands a client certificate: "
                                          "set mqtt.cert_file and mqtt.key_file")
    if cert_given and any(k in reason for k in ("BAD_CERTIFICATE", "UNKNOWN_CA", "HANDSHAKE_FAILURE",
                                                  "CERTIFICATE_UNKNOWN", "DECRYPT_ERROR")):
        return "tls_client_certificate", (f"TLS: the broker at {where} did not accept our client certificate "
                                          f"({e.reason}): check mqtt.cert_file and mqtt.key_file")
    if any(k in reason for k in ("WRONG_VERSION_NUMBER", "RECORD_LAYER_FAILURE", "PACKET_LENGTH_TOO_LONG",
                                 "UNEXPECTED_EOF", "HTTP_REQUEST")):
        return "tls_not_tls", (f"TLS: {where} does not speak TLS: use mqtt:// for a plain port, "
                               "or give the broker's TLS port")
    return "tls_failed", f"TLS with {where} failed: {e.reason or e}"


def _early_tls_alert(sock: socket.socket, wait_s: float = 0.5) -> None:
    """Give a TLS 1.3 server a moment to send its alert (RFC 8446, 4.4.2.4) before we write; an alert
    raises its SSLError here, silence returns."""
    timeout = sock.gettimeout()
    sock.settimeout(wait_s)
    try:
        if sock.recv(1) == b"":  # a broker says nothing before our CONNECT: end of stream is a refusal
            raise ssl.SSLEOFError("closed right after the handshake")
    except TimeoutError:
        pass
    finally:
        sock.settimeout(timeout)


def _read_up_to(sock: socket.socket, n: int) -> bytes:
    reply = b""
    while len(reply) < n:
        chunk = sock.recv(n - len(reply))
        if not chunk:
            break
        reply += chunk
    return reply


class EmbeddedBroker:
    """An amqtt broker on loopback in its own thread and event loop (demo use only).

    ``port=0`` picks a free port; ``.port`` tells which after ``start()``.
    """

    def __init__(self, host: str = "127.0.0.1", port: int = 1883, start_timeout_s: float = 10.0) -> None:
        self.host = host
        self.port = port
        self.start_timeout_s = start_timeout_s
        self._loop: asyncio.AbstractEventLoop | None = None
        self._broker: Any = None
        self._thread: threading.Thread | None = None
        self._ready = threading.Event()
        self._error: BaseException | None = None

    def _config(self) -> dict[str, Any]:
        return {
            "listeners": {"default": {"type": "tcp", "bind": f"{self.host}:{self.port}"}},
            "plugins": {"amqtt.plugins.authentication.AnonymousAuthPlugin": {"allow_anonymous": True}},
        }

    def start(self) -> EmbeddedBroker:
        try:
            from amqtt.broker import Broker
        except ImportError:
            raise OutputError("the embedded broker needs amqtt: pip install 'offwatch[demo]'") from None
        for name in ("amqtt", "transitions"):
            logging.getLogger(name).setLevel(logging.WARNING)
        self._thread = threading.Thread(target=self._run, args=(Broker,), name="offwatch-embedded-broker",
                                        daemon=True)
        self._thread.start()
        if not self._ready.wait(self.start_timeout_s) or self._error is not None:
            self.stop()
            why = self._error or "it did not start in time"
            raise OutputError(f"cannot start the embedded broker on {self.host}:{self.port}: {why}")
        return self

    def _run(self, broker_cls: type) -> None:
        loop = asyncio.new_event_loop()
        self._loop = loop
        asyncio.set_event_loop(loop)
        try:
            loop.run_until_complete(self._start(broker_cls))
        except BaseException as e:  # reported to start(), which raises OutputError
            self._error = e
            self._ready.set()
            loop.close()
            return
        self._ready.set()
        try:
            loop.run_forever()
        finally:
            loop.close()

    async def _start(self, broker_cls: type) -> None:
        self._broker = broker_cls(self._config())
        await self._broker.start()
        if self.port == 0:
            server = self._broker._servers["default"].instance  # amqtt keeps the asyncio.Server here
            self.port = server.sockets[0].getsockname()[1]

    def stop(self) -> None:
        loop, thread = self._loop, self._thread
        if loop is None or thread is None or not thread.is_alive():
            return
        if self._broker is not None and self._error is None:
            fut = asyncio.run_coroutine_threadsafe(self._broker.shutdown(), loop)
            try:
                fut.result(timeout=10.0)
            except Exception:
                log.exception("embedded broker: error at shutdown")
        loop.call_soon_threadsafe(loop.stop)
        thread.join(timeout=10.0)

    def __enter__(self) -> EmbeddedBroker:
        return self.start()

    def __exit__(self, *exc: object) -> None:
        self.stop()
