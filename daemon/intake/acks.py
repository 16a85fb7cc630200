"""The crew's acknowledgements, kept as inputs so that a replay of a recording repeats them.

A display acknowledges an alarm or a warning on ``<prefix>/ack`` (the MQTT side
checks the payload: ``daemon.outlets.mqtt.parse_ack``). An acknowledgement that
changed an alert is an input like a sentence: the pipeline feeds it through its
one doorway as a raw line of the source ``ACK_SOURCE`` (its text the id written
again as canonical JSON, never the bytes received) at the data time it was
handled, then hands it to the alert manager. The recorder keeps the line with
the others; replaying the recording turns it back into an ``Acknowledgement``
at the same place in the stream (``replayed``), so the replay's alerts follow
the run's, acknowledgements included. An acknowledgement that changed nothing
(an unknown id, a caution) is not kept: it changed no output.
"""

from __future__ import annotations

import json

from daemon.core.readings import Acknowledgement, RawLine

ACK_SOURCE = "crew-ack"  # the source name of the crew's acknowledgements in the counters and the recording (reserved)
SENTENCE = "ack"  # the counters' row for them
MAX_ID_CHARS = 128


def valid_alert_id(alert_id: object) -> bool:
    """An id as a display may send it: a non-empty printable string of at most ``MAX_ID_CHARS``, no MQTT wildcard."""
    return (isinstance(alert_id, str) and 0 < len(alert_id) <= MAX_ID_CHARS and alert_id.isprintable()
            and not any(c in alert_id for c in "+#"))


def canonical_text(alert_id: str) -> str:
    """The acknowledgement as the recording keeps it: ``{"id":"..."}`` (ASCII, bounded by the id's check)."""
    return json.dumps({"id": alert_id}, separators=(",", ":"))


def ack_items(alert_id: str, t_s: float, recv_utc: float | None = None) -> tuple[RawLine, Acknowledgement]:
    """The raw line (for the recording and the counters) and the acknowledgement at data time ``t_s``:
    what the pipeline takes, live and in a replay alike."""
    recv = t_s if recv_utc is None else recv_utc
    line = RawLine(ACK_SOURCE, t_s, recv, canonical_text(alert_id), sentence=SENTENCE, counts=(("good", 1),))
    return line, Acknowledgement(ACK_SOURCE, t_s, alert_id)


def replayed(line: RawLine) -> list[RawLine | Acknowledgement]:
    """A recorded acknowledgement back to its items (a recording is data too: a line that does not parse
    again is kept as a line, counted ``unparseable``, and acknowledges nothing)."""
    alert_id = _recorded_id(line.text)
    if alert_id is None:
        return [RawLine(ACK_SOURCE, line.t_s, line.recv_utc, line.text, sentence=SENTENCE,
                        counts=(("unparseable", 1),))]
    return list(ack_items(alert_id, line.t_s, line.recv_utc))


def _recorded_id(text: str) -> str | None:
    if len(text) > MAX_ID_CHARS * 6 + 16:  # the longest canonical line: every character \\uXXXX-escaped
        return None
    try:
        doc = json.loads(text)
    except (ValueError, RecursionError):
        return None
    if not isinstance(doc, dict) or set(doc) != {"id"} or not valid_alert_id(doc["id"]):
        return None
    return doc["id"]
