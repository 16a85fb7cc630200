"""A swell the crew (or a display app) tells offwatch about, on ``<prefix>/swell``.

offwatch cannot see a swell: no sentence carries one. A person who sees it (or
has it from a forecast) can publish, retained so it survives restarts::

    {"period_s": 11, "from_deg": 250}      a swell of 11 s from 250 degrees true
    {"period_s": null}  or  {}              no swell (back to the [sea_state] config)

The payload is data from outside: at most ``MAX_SWELL_BYTES``, a flat JSON
object, finite numbers in range, unknown keys refused; anything else is
refused with the reason (counted and logged by the MQTT side), never fatal.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass

MAX_SWELL_BYTES = 256
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


def _number(v: object) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)
