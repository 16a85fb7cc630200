"""The payload layer: how every published payload is made, once.

Estimators hand back plain numbers (at full precision is best: a value an
estimator rounds itself, to 0.001 say, is rounded a second time here); here,
and only here, they become what leaves the boat (MQTT, JSONL, the recording):

- ``time`` first, the data time as ISO 8601 UTC with milliseconds and a ``Z``
  (the interface's format), by ``iso_utc``;
- every float rounded to the decimals its field deserves, from one table
  (``DECIMALS``): a position to about a metre, pressure to the 0.1 hPa a
  barometer shows, speeds to 0.01 kn, angles to 0.1°; never "-0.0";
  a non-finite number becomes null, an unknown type its text;
- alert texts end with the advisory sentence (``with_advisory``).
- the JSON text of a message, made once (``encode_json``, by ``Message.payload_json``) and
  shared by MQTT and the recording, which keeps its ASCII form (``ascii_json``).

The rounding is deterministic, so a replay and the replay of its own
recording stay byte for byte the same.
"""

from __future__ import annotations

import json
import json.encoder
import math
import re
from collections.abc import Callable, Iterable, Mapping
from datetime import datetime, timezone
from functools import lru_cache
from typing import Any

# What offwatch can and cannot promise: appended to every alert text.
ADVISORY = "Advisory only, not for navigation: check official forecasts, charts and your own seamanship."

# Field name (exact) -> decimals. Checked first.
_BY_NAME: dict[str, int] = {
    "lat": 5,                 # 1e-5 deg of latitude is 1.1 m: about a metre, the worth of a GNSS fix
    "lon": 5,                 # 1e-5 deg of longitude is 1.1 m x cos(lat): no worse than latitude
    "stw_scale": 4,           # 0.01 % of the log's reading
    "stw_scale_sigma": 4,
    "q_inflation": 2,
    "water_walk_kn_per_sqrt_h": 3,  # the water's walk behind the published sigma: 0.001 kn/sqrt(h) tells steady water
    "noise_scale": 2,         # the instruments' noise over the filter's model of it, 1/4 to 1
    "hdop": 1,                # GGA sends HDOP to 0.1
    "last_seen": 3,           # UNIX seconds to the millisecond, as the payload's time
    "sensors": 1,             # status: each feed's age, s
    "last_nis": 2,            # a normalised innovation squared: about 1 to 2 when all is well
    "breaking_fraction": 2,   # the steepened sea's H/L as a share of the breaking limit
}
# Field name ending -> decimals, the longest ending that matches wins (units are in the names).
_BY_SUFFIX: dict[str, int] = {
    "_lat": 5, "_lon": 5,     # as lat / lon
    "_kn": 2,                 # 0.01 kn is 5 mm/s: below any log's resolution (1 kn ~ 50 cm/s, common practice)
    "_mps": 2,
    "_deg": 1,                # 0.1 deg: a compass card's finest reading
    "_hpa": 1,                # 0.1 hPa: what a marine barometer and MDA/XDR report
    "_hpa_per_h": 2,          # rates are small numbers: 0.01 hPa/h
    "_kn_per_h": 2,           # the current's steady change: 0.01 kn/h is 0.1 kn in ten hours
    "_c": 2,                  # sea and air temperature; fronts are judged on tenths
    "_c_per_nm": 3,
    "_nm": 3,                 # 0.001 nm is 1.85 m
    "_m": 1,
    "_s": 1,
    "_pct": 1,
    "_factor": 2,             # sea-state ratios against the still-water case
}
DEFAULT_DECIMALS = 3  # a float with no rule above: enough to read, never seven digits
MAX_DEPTH = 8         # payloads are shallow; anything deeper is cut (data, never trusted)


@lru_cache(maxsize=1024)  # a few dozen field names, asked for with every payload
def rule_for(name: str) -> int | None:
    """The table's decimals for field ``name``: by name, else by its unit ending; None without a rule."""
    if name in _BY_NAME:
        return _BY_NAME[name]
    best = ""
    for suffix in _BY_SUFFIX:
        if name.endswith(suffix) and len(suffix) > len(best):
            best = suffix
    return _BY_SUFFIX[best] if best else None


@lru_cache(maxsize=4096)  # asked for every field of every payload: one cached call, not two
def decimals_for(name: str, inherited: int | None = None) -> int:
    """Decimals for field ``name``: its rule, else the enclosing field's, else the default."""
    rule = rule_for(name)
    if rule is not None:
        return rule
    return DEFAULT_DECIMALS if inherited is None else inherited


def clean(value: Any, decimals: int | None = None, depth: int = 0) -> Any:
    """JSON-safe ``value``: floats rounded (no negative zero, non-finite -> None), mappings and
    sequences cleaned field by field (a nested field without its own rule takes its parent's)."""
    if type(value) is float:  # most of what is published: the test below, taken first
        if not math.isfinite(value):
            return None
        return round(value, DEFAULT_DECIMALS if decimals is None else decimals) + 0.0
    if isinstance(value, bool) or value is None or isinstance(value, (int, str)):
        return value
    if isinstance(value, float):
        if not math.isfinite(value):
            return None
        return round(value, DEFAULT_DECIMALS if decimals is None else decimals) + 0.0  # + 0.0: -0.0 -> 0.0
    if depth >= MAX_DEPTH:
        return None
    if isinstance(value, Mapping):
        return _clean_fields(value.items(), decimals, depth + 1, {})
    if isinstance(value, (list, tuple)):
        return [clean(v, decimals, depth + 1) for v in value]
    return str(value)


@lru_cache(maxsize=4096)  # a field's values repeat (a sigma, a count of seconds): 2 in 3 are found here
def _float_field(value: float, name: str, inherited: int | None) -> float | None:
    """A float field as published: rounded by the table (never -0.0), None when not finite.

    Kept by value and field because round() to decimals is dear (about 3 000 machine
    instructions: its correctly rounded decimal string and back) and a cache hit is a few
    hundred. -0.0 shares 0.0's entry and its answer, 0.0; a NaN is never found again."""
    if not math.isfinite(value):
        return None
    return round(value, decimals_for(name, inherited)) + 0.0


def _clean_fields(items: Iterable[tuple[Any, Any]], inherited: int | None, depth: int,
                  out: dict[str, Any]) -> dict[str, Any]:
    """``clean`` of each field into ``out``, a float or a plain value without the call (most fields are)."""
    for k, v in items:
        name = k if type(k) is str else str(k)
        kind = type(v)
        if kind is float:
            out[name] = _float_field(v, name, inherited)
        elif kind is str or kind is int or kind is bool or v is None:
            out[name] = v
        elif kind is dict and depth < MAX_DEPTH:  # clean's branches for a mapping and a list, without its tests
            out[name] = _clean_fields(v.items(), decimals_for(name, inherited), depth + 1, {})
        elif kind is list and depth < MAX_DEPTH:
            decimals = decimals_for(name, inherited)
            out[name] = [clean(x, decimals, depth + 1) for x in v]
        else:
            out[name] = clean(v, decimals_for(name, inherited), depth)
    return out


def iso_utc(t_s: float) -> str:
    """ISO 8601 UTC with milliseconds and a Z, as every payload's ``time``."""
    ms = int(round(t_s * 1000.0))
    sec, milli = divmod(ms, 1000)
    return f"{_utc_second(sec)}.{milli:03d}Z"


@lru_cache(maxsize=16)  # the messages of one data second share it
def _utc_second(sec: int) -> str:
    day, sec_of_day = divmod(sec, 86400)  # UNIX time has no leap seconds: every day is 86 400 s
    hours, sec_of_hour = divmod(sec_of_day, 3600)
    return f"{_utc_day(day)}T{hours:02d}:{sec_of_hour // 60:02d}:{sec_of_hour % 60:02d}"


@lru_cache(maxsize=4)  # a passage's days: the date made once a day, not once a second (strftime is dear)
def _utc_day(day: int) -> str:
    return datetime.fromtimestamp(day * 86400, tz=timezone.utc).strftime("%Y-%m-%d")


def payload(t_s: float, fields: Mapping[str, Any]) -> dict[str, Any]:
    """A publication's payload: ``time`` first, then the fields, cleaned."""
    out: dict[str, Any] = {"time": iso_utc(t_s)}
    items = fields.items() if "time" not in fields else ((k, v) for k, v in fields.items() if k != "time")
    return _clean_fields(items, None, 1, out)


def with_advisory(text: str) -> str:
    """An alert text with the advisory sentence after it (the sentence alone for no text)."""
    return f"{text} {ADVISORY}" if text else ADVISORY


# -- JSON text: made once per message (Message.payload_json) for MQTT and the recording --

def json_default(obj: Any) -> Any:
    """numpy scalars and other number-likes become plain numbers; mappings become dicts."""
    if isinstance(obj, Mapping):
        return dict(obj)
    if hasattr(obj, "item"):
        return obj.item()
    if isinstance(obj, (set, frozenset, tuple)):
        return list(obj)
    return str(obj)


def json_encoder(**options: Any) -> Callable[[Any], str]:
    """``json.JSONEncoder(check_circular=False, **options).encode``, built once: the same text.

    ``JSONEncoder.encode`` makes a new C encoder at every call (and a table of the containers
    it is inside, to find a cycle); this one is made here, once, and looks for no cycle: what
    is encoded is a tree, made afresh (the payload layer, a recording's row) or decoded from
    JSON. A cycle would raise RecursionError instead of ValueError. Without the C encoder
    (another Python), the library's own path."""
    encoder = json.JSONEncoder(check_circular=False, **options)
    make = json.encoder.c_make_encoder
    if make is None or encoder.indent is not None:
        return encoder.encode
    strings = json.encoder.encode_basestring_ascii if encoder.ensure_ascii else json.encoder.encode_basestring
    c_encode = make(None, encoder.default, strings, None, encoder.key_separator, encoder.item_separator,
                    encoder.sort_keys, encoder.skipkeys, encoder.allow_nan)
    return lambda value: "".join(c_encode(value, 0))


_compact = json_encoder(ensure_ascii=False, separators=(",", ":"), allow_nan=False, default=json_default)


def encode_json(payload: Mapping[str, Any]) -> str:
    """Compact JSON, non-ASCII as it is. Payloads come cleaned from the payload layer; one that is
    not JSON (a non-finite number from elsewhere, a cycle) is cleaned there, never written as NaN."""
    try:
        return _compact(payload)
    except (ValueError, RecursionError):
        return _compact(clean(payload))


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

