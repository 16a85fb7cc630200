"""What several test modules need, in one place: waiting for a condition, a free loopback port,
the NMEA checksum written independently of the codec, and a sink that keeps what a pipeline sends.

Test modules import from here (and from ``tests.shared`` for the shared captures), never from
one another.
"""

from __future__ import annotations

import socket
import time
from collections.abc import Callable


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
