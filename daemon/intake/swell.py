"""A swell the crew (or a display app) tells offwatch about, on ``<prefix>/swell``.

offwatch cannot see a swell: no sentence carries one. A person who sees it (or
has it from a forecast) can publish, retained so it survives restarts::

    {"period_s": 11, "from_deg": 250}      a swell of 11 s from 250 degrees true
    {"period_s": null}  or  {}              no swell (back to the [sea_state] config)

The payload is data from outside: at most ``MAX_SWELL_BYTES``, a flat JSON
object, finite numbers in range, unknown keys refused; anything else is
refused with the reason (counted and logged by the MQTT side), never fatal.

An accepted report is an input like a sentence: the pipeline stamps it with
data time and feeds it through its one doorway as a raw line of the source
``SWELL_SOURCE`` (its text the report written again as canonical JSON, never
the bytes received) and a ``Swell`` reading (``swell_items``). The recorder
keeps the line with the others, and replaying a recording turns it back into
the same reading (``replayed``), so a replay gives the sea state the run gave.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass

from daemon.core.readings import RawLine, Reading
from estimators.samples import Swell

MAX_SWELL_BYTES = 256
SWELL_SOURCE = "swell-report"  # the source name of the crew's reports in the counters and the recording (reserved)
SENTENCE = "swell"  # the counters' row for them
PERIOD_RANGE_S = (3.0, 30.0)  # wind waves of under 3 s are no swell; over 30 s no ocean swell
KEYS = frozenset({"period_s", "from_deg"})


@dataclass(frozen=True, slots=True)
class SwellReport:
    """A swell's period (s) and where it comes from (deg true); ``period_s`` None: no swell."""

    period_s: float | None
    from_deg: float | None


def parse_swell(payload: bytes) -> tuple[SwellReport | None, str]:
    """The payload -> (report, ""), or (None, why it was refused)."""
    if len(payload) > MAX_SWELL_BYTES:
        return None, f"payload of {len(payload)} bytes (more than {MAX_SWELL_BYTES})"
    if not payload.strip():
        return SwellReport(None, None), ""  # an empty retained message clears the topic: no swell
    try:
        doc = json.loads(payload.decode("utf-8"))
    except (UnicodeDecodeError, ValueError, RecursionError):
        return None, "not UTF-8 JSON"
    if not isinstance(doc, dict):
        return None, "not a JSON object"
    unknown = set(doc) - KEYS
    if unknown:
        return None, f"unknown field(s) {', '.join(sorted(map(repr, unknown)))[:80]}: expected period_s and from_deg"
    period, from_deg = doc.get("period_s"), doc.get("from_deg")
    if period is None:
        return SwellReport(None, None), ""
    if not _number(period) or not PERIOD_RANGE_S[0] <= period <= PERIOD_RANGE_S[1]:
        return None, f"period_s must be a number of seconds from {PERIOD_RANGE_S[0]:g} to {PERIOD_RANGE_S[1]:g}"
    if not _number(from_deg) or not 0.0 <= from_deg <= 360.0:
        return None, "from_deg must be a direction in degrees true, 0 to 360"
    return SwellReport(float(period), float(from_deg) % 360.0), ""


def canonical_text(report: SwellReport) -> str:
    """The report as the recording keeps it: compact JSON of the parsed values (ASCII, bounded)."""
    return json.dumps({"period_s": report.period_s, "from_deg": report.from_deg}, separators=(",", ":"))


def swell_items(report: SwellReport, t_s: float, recv_utc: float | None = None) -> tuple[RawLine, Reading]:
    """The raw line (for the recording and the counters) and the reading of one accepted report at data time
    ``t_s``: what the pipeline feeds, live and in a replay alike."""
    recv = t_s if recv_utc is None else recv_utc
    line = RawLine(SWELL_SOURCE, t_s, recv, canonical_text(report), sentence=SENTENCE, counts=(("good", 1),),
                   seen=True)
    return line, Reading(SWELL_SOURCE, Swell(t_s, report.period_s, report.from_deg), recv, sentence=SENTENCE)


def replayed(line: RawLine) -> list[RawLine | Reading]:
    """A recorded report back to its items (a recording is data too: a line that does not parse again
    is kept as a line, counted ``unparseable``, and gives no reading)."""
    report, _ = parse_swell(line.text.encode("utf-8", "surrogateescape"))
    if report is None:
        return [RawLine(SWELL_SOURCE, line.t_s, line.recv_utc, line.text, sentence=SENTENCE,
                        counts=(("unparseable", 1),))]
    return list(swell_items(report, line.t_s, line.recv_utc))


def _number(v: object) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)
