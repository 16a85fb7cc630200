"""What flows from the inputs into the pipeline, and from the pipeline to the outputs."""

from __future__ import annotations

import json
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, Protocol

from daemon.core.payloads import clean
from estimators.samples import Sample


@dataclass(frozen=True, slots=True)
class RawLine:
    """One framed line exactly as received (TAG block included, no line ending).

    ``t_s`` is the data time given to it (TAG ``c:``, GNSS time, or the receive
    time when live); ``recv_utc`` is when it arrived (equal to ``t_s`` in replay
    of a file without receive times).
    """

    source: str
    t_s: float
    recv_utc: float
    text: str
    # What the line counted for, applied to the counters when the pipeline takes
    # the line, so counts follow data time exactly (also in a replay of a recording).
    sentence: str = ""
    counts: tuple[tuple[str, int], ...] = ()
    seen: bool = False  # the line carried values: its sentence's last_seen moves


@dataclass(frozen=True, slots=True)
class Acknowledgement:
    """The crew acknowledged alert ``alert_id`` at data time ``t_s`` (``daemon.intake.acks``)."""

    source: str
    t_s: float
    alert_id: str


@dataclass(frozen=True, slots=True)
class Reading:
    """One plausible measurement from one source, stamped with data time in ``sample.t_s``."""

    source: str
    sample: Sample
    recv_utc: float
    sentence: str = ""  # the NMEA sentence type it came from, e.g. "RMC"
    gnss_utc: float | None = None  # the sentence's own GNSS time (UNIX s) where it has one


@dataclass(frozen=True, slots=True)
class Message:
    """One publication as it leaves: full topic, payload with ``time`` first."""

    t_s: float
    topic: str
    payload: Mapping[str, Any]
    retain: bool
    qos: int = 0
    kind: str = "state"  # "state", "event", "alert" or "status"
    _json: str | None = field(default=None, init=False, compare=False, repr=False)

    def payload_json(self) -> str:
        """The payload as compact JSON text, made once by the first output that asks (the MQTT
        payload's UTF-8, the recording's ASCII form of it: ``ascii_json``), then shared."""
        text = self._json
        if text is None:
            text = encode_json(self.payload)
            object.__setattr__(self, "_json", text)  # a cache, not a value: the message stays as made
        return text


def json_default(obj: Any) -> Any:
    """numpy scalars and other number-likes become plain numbers; mappings become dicts."""
    if isinstance(obj, Mapping):
        return dict(obj)
    if hasattr(obj, "item"):
        return obj.item()
    if isinstance(obj, (set, frozenset, tuple)):
        return list(obj)
    return str(obj)


_COMPACT = json.JSONEncoder(ensure_ascii=False, separators=(",", ":"), allow_nan=False, default=json_default)


def encode_json(payload: Mapping[str, Any]) -> str:
    """Compact JSON, non-ASCII as it is. Payloads come cleaned from the payload layer; one that is
    not JSON (a non-finite number from elsewhere) is cleaned there, never written as NaN."""
    try:
        return _COMPACT.encode(payload)
    except ValueError:
        return _COMPACT.encode(clean(payload))


_NOT_PRINTABLE_ASCII = re.compile(r"[^ -~]")


def _escape(match: re.Match[str]) -> str:
    n = ord(match.group())
    if n < 0x10000:
        return f"\\u{n:04x}"
    n -= 0x10000  # a UTF-16 surrogate pair, as JSON writes a character beyond the BMP (RFC 8259 s. 7)
    return f"\\u{0xd800 | (n >> 10):04x}\\u{0xdc00 | (n & 0x3ff):04x}"


def ascii_json(text: str) -> str:
    """``encode_json``'s text as ``json.dumps(..., ensure_ascii=True)`` writes it: every character
    outside printable ASCII escaped. Outside strings JSON is ASCII, and inside them the compact form
    has already escaped the quote, the backslash and the control characters, so escaping the rest
    gives the same text."""
    return text if _NOT_PRINTABLE_ASCII.search(text) is None else _NOT_PRINTABLE_ASCII.sub(_escape, text)


class Sink(Protocol):
    """An output: the JSONL writer, the MQTT publisher, the recorder."""

    def raw(self, line: RawLine) -> None: ...

    def message(self, msg: Message) -> None: ...

    def close(self) -> None: ...
