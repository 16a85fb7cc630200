"""What flows from the inputs into the pipeline, and from the pipeline to the outputs."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, NamedTuple, Protocol

from daemon.core.payloads import encode_json
from estimators.samples import Sample


class RawLine(NamedTuple):
    """One framed line exactly as received (TAG block included, no line ending).

    ``t_s`` is the data time given to it (TAG ``c:``, GNSS time, or the receive
    time when live); ``recv_utc`` is when it arrived (equal to ``t_s`` in replay
    of a file without receive times).

    A named tuple, not a frozen dataclass: one is made for every line, and a frozen dataclass's
    ``__init__`` sets each field through ``object.__setattr__`` (1.7 us against 0.3 us). Immutable
    and compared field by field either way.
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


class Reading(NamedTuple):
    """One plausible measurement from one source, stamped with data time in ``sample.t_s``
    (a named tuple, as ``RawLine`` and for the same reason: one or more a line)."""

    source: str
    sample: Sample
    recv_utc: float
    sentence: str = ""  # the NMEA sentence type it came from, e.g. "RMC"
    gnss_utc: float | None = None  # the sentence's own GNSS time (UNIX s) where it has one


@dataclass(slots=True)
class Message:
    """One publication as it leaves: full topic, payload with ``time`` first.

    Every output is handed the same message and none changes it. Not a frozen dataclass: one is
    made for every publication, and a frozen dataclass's ``__init__`` sets each of its seven fields
    through ``object.__setattr__`` (about 11 000 machine instructions against 2 300). It was
    never hashable either way (its payload is a dict)."""

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
            self._json = text  # a cache, not a value: not compared, not shown
        return text


class Sink(Protocol):
    """An output: the JSONL writer, the MQTT publisher, the recorder."""

    def raw(self, line: RawLine) -> None: ...

    def message(self, msg: Message) -> None: ...

    def close(self) -> None: ...
