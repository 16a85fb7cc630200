"""Live inputs: serial ports, a TCP client, a UDP listener, a followed file.

Each input is one small reader with an open / read / close life; ``read``
returns within a fraction of a second (empty bytes when nothing came), so the
supervisor can notice a stop request. One supervisor thread per input drives
it: open, read until it fails, close, back off, try again; it logs once per
change of state (``open``, ``lost``, ``cannot open``), not once per attempt.

Every read becomes a ``Chunk`` on one bounded queue shared by all inputs. A
put waits at most ``PUT_TIMEOUT_S``; a chunk that still finds the queue full
is dropped and counted in that input's ``SourceHealth``, so a stalled consumer
never blocks a reader for ever (the OS buffers of a serial port are small).
"""

from __future__ import annotations

import ipaddress
import logging
import os
import queue
import socket
import threading
import time
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, Protocol

from daemon.core.config import InputConfig, input_problems
from daemon.errors import ConfigError

log = logging.getLogger(__name__)

READ_TIMEOUT_S = 0.2       # longest a read blocks before the stop flag is checked
PUT_TIMEOUT_S = 0.1        # longest a reader waits on a full queue before dropping
FIRST_RETRY_S = 0.25
RETRY_CAP_S = {"serial": 1.0, "tcp": 3.0, "udp": 2.0, "file": 1.0}  # serial: replug seen within ~1 s
TCP_SILENCE_S = 30.0       # a connected multiplexer silent this long is reconnected
READ_SIZE = 65536
LOOPBACK = "127.0.0.1"


@dataclass(frozen=True, slots=True)
class Chunk:
    """Bytes as one read returned them; ``recv_utc`` UNIX seconds, ``recv_mono`` monotonic seconds."""

    source: str
    data: bytes
    recv_utc: float
    recv_mono: float


class SourceHealth:
    """What one input has been doing, for status. Written by its thread, read by anyone."""

    def __init__(self, name: str, kind: str) -> None:
        self.name = name
        self.kind = kind
        self._lock = threading.Lock()
        self.state = "starting"     # starting, open, lost, cannot_open, stopped
        self.opens = 0
        self.reconnects = 0         # opens after the first
        self.bytes = 0
        self.chunks = 0
        self.dropped_chunks = 0
        self.dropped_bytes = 0
        self.last_error = ""
        self.last_data_mono: float | None = None

    def set_state(self, state: str, error: str = "") -> bool:
        """Record a state; True when it changed (the caller then logs it)."""
        with self._lock:
            changed = state != self.state
            self.state = state
            if error:
                self.last_error = error
            return changed

    def opened(self) -> None:
        with self._lock:
            self.opens += 1
            if self.opens > 1:
                self.reconnects += 1

    def received(self, n: int, mono: float) -> None:
        with self._lock:
            self.bytes += n
            self.chunks += 1
            self.last_data_mono = mono

    def dropped(self, n: int) -> None:
        with self._lock:
            self.dropped_chunks += 1
            self.dropped_bytes += n

    def snapshot(self) -> dict[str, Any]:
        with self._lock:
            age = None if self.last_data_mono is None else round(time.monotonic() - self.last_data_mono, 1)
            return {"kind": self.kind, "state": self.state, "reconnects": self.reconnects,
                    "bytes": self.bytes, "chunks": self.chunks, "dropped_chunks": self.dropped_chunks,
                    "dropped_bytes": self.dropped_bytes, "last_error": self.last_error,
                    "data_age_s": age}


class Reader(Protocol):
    def describe(self) -> str: ...

    def open(self) -> None: ...

    def read(self) -> bytes: ...  # b"" on a quiet interval; raises OSError when the input is lost

    def close(self) -> None: ...


class SerialReader:
    """A serial port (pyserial). A USB adapter pulled out shows as a read error; reopening finds it again."""

    def __init__(self, device: str, baud: int) -> None:
        self.device, self.baud = device, baud
        self._port = None

    def describe(self) -> str:
        return f"{self.device} at {self.baud} baud"

    def open(self) -> None:
        import serial  # pyserial

        try:
            self._port = serial.Serial(self.device, self.baud, timeout=READ_TIMEOUT_S)
        except (serial.SerialException, ValueError) as e:
            raise OSError(str(e)) from e

    def read(self) -> bytes:
        import serial

        try:
            waiting = self._port.in_waiting
            return self._port.read(min(max(waiting, 1), READ_SIZE))
        except (serial.SerialException, OSError, TypeError) as e:
            raise OSError(str(e) or "read failed") from e

    def close(self) -> None:
        if self._port is not None:
            try:
                self._port.close()
            except Exception:  # a vanished device may fail to close; nothing left to do
                pass
            self._port = None


class TcpReader:
    """A TCP client, e.g. to an NMEA multiplexer. A close or a long silence counts as lost."""

    def __init__(self, host: str, port: int, silence_s: float = TCP_SILENCE_S) -> None:
        self.host, self.port, self.silence_s = host, port, silence_s
        self._sock: socket.socket | None = None
        self._last = 0.0

    def describe(self) -> str:
        return f"tcp://{self.host}:{self.port}"

    def open(self) -> None:
        sock = socket.create_connection((self.host, self.port), timeout=3.0)
        sock.setsockopt(socket.SOL_SOCKET, socket.SO_KEEPALIVE, 1)
        sock.settimeout(READ_TIMEOUT_S)
        self._sock, self._last = sock, time.monotonic()

    def read(self) -> bytes:
        try:
            data = self._sock.recv(READ_SIZE)
        except socket.timeout:
            if time.monotonic() - self._last > self.silence_s:
                raise OSError(f"silent for {self.silence_s:.0f} s") from None
            return b""
        if not data:
            raise OSError("connection closed by the other end")
        self._last = time.monotonic()
        return data

    def close(self) -> None:
        if self._sock is not None:
            self._sock.close()
            self._sock = None


class UdpReader:
    """A UDP listener (broadcast or unicast datagrams); one datagram per read."""

    def __init__(self, bind: str, port: int) -> None:
        self.bind, self.port = bind, port
        self._sock: socket.socket | None = None

    def describe(self) -> str:
        return f"udp {self.bind}:{self.port}"

    def open(self) -> None:
        sock = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
        try:
            sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
            sock.setsockopt(socket.SOL_SOCKET, socket.SO_BROADCAST, 1)
            sock.bind((self.bind, self.port))
        except OSError:
            sock.close()
            raise
        sock.settimeout(READ_TIMEOUT_S)
        self._sock = sock
        if not ipaddress.ip_address(self.bind).is_loopback:
            log.info("udp input listens on %s:%d: anything on that network can send it sentences "
                     "(the checked, bounded parsers are all that stands between)", self.bind, self.port)

    @property
    def address(self) -> tuple[str, int] | None:
        return None if self._sock is None else self._sock.getsockname()

    def read(self) -> bytes:
        try:
            data, _ = self._sock.recvfrom(READ_SIZE)
        except socket.timeout:
            return b""
        return data

    def close(self) -> None:
        if self._sock is not None:
            self._sock.close()
            self._sock = None


class FileFollowReader:
    """A file or FIFO read as it grows (like a log another program appends to)."""

    def __init__(self, path: str) -> None:
        self.path = path
        self._fd: int | None = None

    def describe(self) -> str:
        return self.path

    def open(self) -> None:
        self._fd = os.open(self.path, os.O_RDONLY | os.O_NONBLOCK)

    def read(self) -> bytes:
        try:
            data = os.read(self._fd, READ_SIZE)
        except BlockingIOError:
            data = b""
        if not data:
            time.sleep(READ_TIMEOUT_S)
        return data

    def close(self) -> None:
        if self._fd is not None:
            os.close(self._fd)
            self._fd = None


def make_reader(name: str, cfg: InputConfig) -> Reader:
    """The reader for input ``name``; a ConfigError naming it and the key when the input is not whole
    (the config's own check, so inputs made in code are held to it too)."""
    for problem in input_problems(cfg)[:1]:
        raise ConfigError(f"[inputs.{name}] {problem}")
    if cfg.kind == "serial":
        return SerialReader(cfg.device, cfg.baud)
    if cfg.kind == "tcp":
        return TcpReader(cfg.host, cfg.port)
    if cfg.kind == "udp":
        return UdpReader(cfg.bind or LOOPBACK, cfg.port)  # a LAN listener only when the config says so
    return FileFollowReader(cfg.path)


class SourceSupervisor(threading.Thread):
    """One input's life: open, read into the queue, on failure close, back off and retry."""

    def __init__(self, source: str, cfg: InputConfig, reader: Reader, out: queue.Queue, stop: threading.Event,
                 health: SourceHealth | None = None) -> None:
        super().__init__(name=f"input-{source}", daemon=True)
        self.source, self.cfg, self.reader, self.out, self.stop_event = source, cfg, reader, out, stop
        self.health = health or SourceHealth(source, cfg.kind)
        self.retry_cap_s = RETRY_CAP_S.get(cfg.kind, 2.0)

    def run(self) -> None:
        delay = FIRST_RETRY_S
        while not self.stop_event.is_set():
            if not self._try_open():
                self.stop_event.wait(delay)
                delay = min(delay * 2.0, self.retry_cap_s)
                continue
            got_data = self._pump()
            self.reader.close()
            if got_data:
                delay = FIRST_RETRY_S
            if not self.stop_event.is_set():
                self.stop_event.wait(delay)
                delay = min(delay * 2.0, self.retry_cap_s)
        self.reader.close()
        self.health.set_state("stopped")

    def _try_open(self) -> bool:
        try:
            self.reader.open()
        except OSError as e:
            if self.health.set_state("cannot_open", str(e)):
                log.warning("input %s: cannot open %s (%s); retrying", self.source, self.reader.describe(), e)
            return False
        self.health.opened()
        self.health.set_state("open")
        log.info("input %s: open %s", self.source, self.reader.describe())
        return True

    def _pump(self) -> bool:
        """Read until lost or stopped; True when any data came."""
        got = False
        while not self.stop_event.is_set():
            try:
                data = self.reader.read()
            except OSError as e:
                self.health.set_state("lost", str(e))
                log.warning("input %s: lost %s (%s); reopening", self.source, self.reader.describe(), e)
                return got
            if data:
                got = True
                self._offer(data)
        return got

    def _offer(self, data: bytes) -> None:
        mono = time.monotonic()
        chunk = Chunk(self.source, data, time.time(), mono)
        self.health.received(len(data), mono)
        try:
            self.out.put(chunk, timeout=PUT_TIMEOUT_S)
        except queue.Full:
            self.health.dropped(len(data))


def start_sources(inputs: Mapping[str, InputConfig], out: queue.Queue, stop: threading.Event
                  ) -> tuple[list[SourceSupervisor], list[SourceHealth]]:
    """Start one supervisor thread per input (the config's ``{name: InputConfig}``); returns the
    threads and their health records.

    Every input is checked before any thread starts, so a bad one fails the start with a ConfigError.
    """
    readers = {name: make_reader(name, cfg) for name, cfg in inputs.items()}
    threads = [SourceSupervisor(name, cfg, readers[name], out, stop) for name, cfg in inputs.items()]
    for t in threads:
        t.start()
    return threads, [t.health for t in threads]
