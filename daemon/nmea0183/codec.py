"""One NMEA 0183 line to typed values: checksum, TAG block, fields, plausibility.

Two steps, both pure:

1. :func:`parse_line` checks the frame of one line: an optional TAG block
   (``\\c:<unix time>,s:<source>*hh\\``, parsed by hand, own checksum), the
   start character, the checksum (XOR of every byte between the start
   character and ``*``, two hex digits in either case), the address (talker
   and formatter). It sorts the line into exactly one counter: ``ok`` (to be
   extracted) or one of ``bad_checksum``, ``no_checksum``, ``unparseable``,
   ``unknown``, ``proprietary``, ``ais``, ``not_sentence``.
2. :func:`extract` turns the fields of an understood sentence into values, in
   SI-free trade units (kn, degrees, hPa, °C, m), each checked against its
   plausible range. An implausible value (out of range, NaN, infinite, a void
   fix) is counted and dropped, never passed on.

The hot path is written by hand: the fields are the text between the address
and the checksum split on commas (no regular expression, no foreign parser), and
every value is taken by its field's position in one table, ``LAYOUTS`` (sentence ->
field names in order; positions resolved at import), which the simulator's writer
also places its fields by. Field layouts follow NMEA 0183 v4.10, from memory of the standard and checked
against real devices' sentences in the tests (marked where older layouts are
accepted too). pynmea2 is the tests' oracle: every sentence of these types in
the real captures and the simulator's output is read by both, field by field
(its typed attributes are not used here because they mislead for real data: an
empty position comes back as 0.0, 0.0; ``RMC.is_valid`` ignores the NMEA 4.1
mode indicator; numbers come as Decimal, float or str).

Each understood sentence gives an :class:`Extract`: typed values
(:class:`Measured`, :class:`LabelledHeading`, :class:`SensorHeading`,
:class:`Variation`, :class:`WindOffBow`, :class:`WindFromMagnetic`), the count
of dropped ones, and its own GNSS time where it carries one.

The talker (``GP``, ``GN``, ``II``, ``HC``, ``AP``...) is never checked against
a list: any two letters or digits will do.
"""

from __future__ import annotations

import datetime as dt
import math
import re
from collections import namedtuple
from collections.abc import Iterable
from dataclasses import dataclass
from functools import lru_cache, reduce
from operator import xor
from typing import Any

# Plausible ranges: one table for the parser and the estimators. Each is checked as lo <= x <= hi, False for NaN.
from estimators.limits import (
    AIR_TEMP_C, ATTITUDE_MAX_DEG, DATA_TIME_S, DEPTH_MAX_M, HDOP_MAX, LAT_MAX_DEG, LON_MAX_DEG,
    PRESSURE_HPA, SEA_TEMP_C, SOG_MAX_KN, STW_MAX_KN, VARIATION_MAX_DEG, WIND_MAX_KN,
)
from estimators.samples import (
    AirTemperature, ApparentWind, Attitude, Depth, Fix, GroundVelocity, Pressure,
    SeaTemperature, WaterSpeed, WaterWind,
)

KMH_TO_KN = 1 / 1.852  # 1 kn = 1.852 km/h exactly
MPS_TO_KN = 3600 / 1852
MPH_TO_KN = 1609.344 / 1852  # statute mile = 1609.344 m exactly
FT_TO_M = 0.3048  # international foot, exactly
FATHOM_TO_M = 1.8288  # 6 ft
INHG_TO_HPA = 33.8639  # 1 inHg = 3386.39 Pa (standard conversion, from memory)
TAG_MS_THRESHOLD = 1e11  # a TAG c: above this is milliseconds (interface.md)
_TAG_T_MIN, _TAG_T_MAX = DATA_TIME_S
_EPOCH_ORDINAL = dt.date(1970, 1, 1).toordinal()

# --- the field layouts ----------------------------------------------------------------

# Sentence -> its fields' names, in order (NMEA 0183 v4.10, from memory of the standard;
# tests/test_codec_oracle.py checks every position against pynmea2's own field lists).
# The one table of where a field stands: the parsers below take fields by these names
# (``_RMC.status``: positions resolved here, at import); the simulator and the NMEA
# output place the fields of what they write by them (``place``). A ``_unit`` or ``_mark`` field is the
# letter beside the value before it (N knots, K km/h, T true, M magnetic or metres, ...).
LAYOUTS: dict[str, tuple[str, ...]] = {
    "RMC": ("time", "status", "lat", "lat_hemi", "lon", "lon_hemi", "sog_kn", "cog_true", "date",
            "variation", "variation_hemi", "mode", "nav_status"),  # mode v2.3+, nav_status v4.1
    "GGA": ("time", "lat", "lat_hemi", "lon", "lon_hemi", "quality", "satellites", "hdop",
            "altitude", "altitude_unit", "geoid_sep", "geoid_sep_unit", "dgps_age", "dgps_station"),
    "GLL": ("lat", "lat_hemi", "lon", "lon_hemi", "time", "status", "mode"),  # status, mode: v2.3+
    "VTG": ("cog_true", "true_mark", "cog_magnetic", "magnetic_mark", "sog_kn", "kn_unit",
            "sog_kmh", "kmh_unit", "mode"),
    "ZDA": ("time", "day", "month", "year", "zone_hours", "zone_minutes"),
    "HDG": ("heading", "deviation", "deviation_hemi", "variation", "variation_hemi"),
    "HDM": ("heading", "magnetic_mark"),
    "HDT": ("heading", "true_mark"),
    "THS": ("heading", "mode"),
    "VHW": ("heading_true", "true_mark", "heading_magnetic", "magnetic_mark", "stw_kn", "kn_unit",
            "stw_kmh", "kmh_unit"),
    "VBW": ("water_long_kn", "water_trans_kn", "water_status", "ground_long_kn", "ground_trans_kn",
            "ground_status", "stern_water_kn", "stern_water_status", "stern_ground_kn", "stern_ground_status"),
    "MTW": ("temp", "temp_unit"),
    "MDA": ("inhg", "inhg_unit", "bar", "bar_unit", "air_temp", "air_temp_unit", "water_temp",
            "water_temp_unit", "rel_humidity", "abs_humidity", "dew_point", "dew_point_unit",
            "wind_from_true", "true_mark", "wind_from_magnetic", "magnetic_mark", "wind_kn", "kn_unit",
            "wind_mps", "mps_unit"),
    "XDR": ("type", "value", "unit", "name"),  # one transducer; the group of four repeats
    "MWV": ("angle", "reference", "speed", "speed_unit", "status"),
    "MWD": ("from_true", "true_mark", "from_magnetic", "magnetic_mark", "speed_kn", "kn_unit",
            "speed_mps", "mps_unit"),
    "DBT": ("depth_ft", "ft_unit", "depth_m", "m_unit", "depth_fathoms", "fathoms_unit"),
    "DPT": ("depth_m", "offset_m", "max_range_m"),  # max_range_m: v3.0+
    # written only (the NMEA output of daemon/outlets/nmea_tcp.py): the current, and an alert's state
    "VDR": ("set_true", "true_mark", "set_magnetic", "magnetic_mark", "drift_kn", "kn_unit"),
    "ALR": ("time", "number", "condition", "acknowledged", "text"),
}


@lru_cache(maxsize=None)  # one per sentence of the table
def positions(key: str) -> Any:
    """The sentence's field positions by name (``positions("RMC").status == 1``), a named tuple."""
    names = LAYOUTS[key]
    return namedtuple(f"{key}Fields", names)(*range(len(names)))


def place(key: str, **values: str) -> list[str]:
    """A sentence's fields in their places: ``values`` by name, the fields between them empty, up to
    the last one given (what a talker writes; the fields after it are left off)."""
    at = positions(key)
    unknown = set(values) - set(at._fields)
    if unknown:
        raise KeyError(f"{key} has no field {sorted(unknown)}")
    out = [""] * (1 + max(getattr(at, name) for name in values))
    for name, text in values.items():
        out[getattr(at, name)] = text
    return out


# --- step 1: the frame of one line -------------------------------------------------

class Line:
    """One checked line: ``status`` is ``ok`` or the counter it belongs to."""

    __slots__ = ("status", "key", "talker", "fields", "tag_time", "tag_source", "sentence")

    def __init__(self, status: str, key: str, talker: str = "", fields: list[str] | None = None,
                 tag_time: float | None = None, tag_source: str | None = None, sentence: str = "") -> None:
        self.status = status
        self.key = key  # "RMC"; "PGRME" for proprietary; "-" not a sentence; "TAG" a bad TAG block
        self.talker = talker
        self.fields = fields if fields is not None else []
        self.tag_time = tag_time  # UNIX seconds from TAG c:, or None
        self.tag_source = tag_source
        self.sentence = sentence  # the sentence without its TAG block


def checksum(body: str) -> int:
    """XOR of every character of ``body`` (the text between the start char and ``*``)."""
    return reduce(xor, body.encode("ascii"), 0)


def checksum_hex(body: str) -> str:
    """The checksum as a sentence or TAG block writes it: two upper-case hex digits."""
    return f"{checksum(body):02X}"


def format_sentence(talker: str, formatter: str, fields: Iterable[str]) -> str:
    """``$<talker><formatter>,<fields>*hh``: a sentence as a talker writes it (no line ending)."""
    body = ",".join([talker + formatter, *fields])
    return f"${body}*{checksum_hex(body)}"


_TAG_UNSAFE_RE = re.compile(r"[^\x21-\x7e]|[,*\\$!^~]")  # NMEA 0183 reserved characters (from memory)


def tag_block(t_s: float, source: str) -> str:
    """``\\c:<UNIX ms>,s:<source>*hh\\`` (NMEA 0183 v4.10 TAG block); a character a TAG
    value cannot hold becomes '_'."""
    ms = round(t_s * 1000) if math.isfinite(t_s) else 0
    body = f"c:{ms},s:{_TAG_UNSAFE_RE.sub('_', source)}"
    return f"\\{body}*{checksum_hex(body)}\\"


def _check_star(text: str, start: int, allow_no_checksum: bool) -> tuple[str, int]:
    """(status, end of body) for the text from ``start`` (after the start char, which is never a star)."""
    body, star, digits = text.rpartition("*")  # one call where a search and two slices were three
    if not star:
        return ("ok" if allow_no_checksum else "no_checksum"), len(text)
    end = len(body)
    if len(digits) != 2:  # two hex digits after the star, nothing more
        return "bad_checksum", end
    try:
        want = int(digits, 16)
    except ValueError:
        return "bad_checksum", end
    if reduce(xor, body[start:].encode("ascii", "replace"), 0) != want:  # non-ASCII: never equal
        return "bad_checksum", end
    return "ok", end


@lru_cache(maxsize=64)  # the lines of one second share a TAG block: each is read once
def parse_tag_block(tag: str) -> tuple[str, float | None, str | None]:
    """(status, c: time in s, s: source) of a TAG block's text between the backslashes.

    NMEA 0183 v4.10 §7 (TAG blocks; from memory): ``code:value`` pairs separated
    by commas, then ``*hh``, the XOR of the pairs. ``c:`` is UNIX time, seconds
    (milliseconds above 1e11, as the interface allows); ``s:`` the source.
    """
    status, end = _check_star(tag, 0, False)
    if status != "ok":
        return status, None, None
    t: float | None = None
    src: str | None = None
    for pair in tag[:end].split(","):
        code, sep, value = pair.partition(":")
        if not sep:
            return "unparseable", None, None
        if code == "c":
            try:
                t = float(value)
            except ValueError:
                return "unparseable", None, None
            if t > TAG_MS_THRESHOLD:
                t /= 1000.0
            # no logger's clock (1e19 hung the tick loop, 3e14 crashed dates); False for NaN, inf, < 0
            if not _TAG_T_MIN <= t <= _TAG_T_MAX:
                return "unparseable", None, None
        elif code == "s":
            src = value
    return "ok", t, src


def has_tag_block(text: str) -> bool:
    """True when a line starts with something shaped like a TAG block (``\\...\\``)."""
    return text.startswith("\\") and text.find("\\", 1) > 0


def split_tag(text: str) -> tuple[str, float | None, str | None, str]:
    """(status, c: time, s: source, what follows) of a line that may open with a TAG block.

    A line with no TAG block is ``("ok", None, None, text)``; one whose TAG block
    fails gives that block's status and the whole line.
    """
    if text[:1] != "\\":
        return "ok", None, None, text
    parts = text.split("\\", 2)  # "", the block, what follows: one call where a find and two slices were three
    if len(parts) < 3:
        return "unparseable", None, None, text
    status, tag_time, tag_source = parse_tag_block(parts[1])
    if status != "ok":
        return status, None, None, text
    return "ok", tag_time, tag_source, parts[2]


def open_line(text: str) -> tuple[str, str, float | None, str | None, str]:
    """(status, key, c: time, s: source, sentence) of a line before its sentence is looked at: status ``ok``
    with the sentence that follows any TAG block, or the counter and key of a line refused already."""
    if not text.isascii():  # the framer never lets one through; a recording or a caller might
        return "not_sentence", "-", None, None, ""
    if text[:1] != "\\":  # no TAG block: most live lines
        return "ok", "", None, None, text
    status, tag_time, tag_source, sentence = split_tag(text)
    if status != "ok":
        return status, "TAG", None, None, ""
    return "ok", "", tag_time, tag_source, sentence


def check_sentence(sentence: str, allow_no_checksum: bool = False) -> tuple[str, str, str, list[str]]:
    """(status, key, talker, fields) of a sentence without its TAG block; fields only when ``ok``."""
    if not sentence or sentence[0] not in "$!":
        return "not_sentence", "-", "", []
    status, end = _check_star(sentence, 1, allow_no_checksum)
    body = sentence[1:end]
    address, _, rest = body.partition(",")
    if address[:1] == "P":  # "P" + a manufacturer's mnemonic; the rest is theirs to define
        key = address if address.isalnum() and len(address) <= 8 else address[:4]
        return ("proprietary" if status == "ok" else status), key, "", []
    if not address.isalnum() or not address.isupper() and not address.isdigit():
        return ("unparseable" if status == "ok" else status), "-", "", []
    talker, key = address[:2], address[2:]
    if not key:
        return ("unparseable" if status == "ok" else status), "-", "", []
    if status != "ok":
        return status, key, talker, []
    if sentence[0] == "!":
        return "ais", key, talker, []
    if key not in EXTRACTORS:
        return "unknown", key, talker, []
    return "ok", key, talker, rest.split(",")


def parse_line(text: str, allow_no_checksum: bool = False) -> Line:
    """Check the frame of one line (no line ending) and sort it into one counter."""
    status, key, tag_time, tag_source, sentence = open_line(text)
    if status != "ok":
        return Line(status, key)
    status, key, talker, fields = check_sentence(sentence, allow_no_checksum)
    if status != "ok":
        return Line(status, key, talker, tag_time=tag_time)
    return Line("ok", key, talker, fields, tag_time, tag_source, sentence)


class ValuesFault(Exception):
    """An extractor failed with something other than ``Unparseable`` (a bug): raised from it, with the key."""

    def __init__(self, key: str) -> None:
        super().__init__(key)
        self.key = key


def read_sentence(sentence: str, allow_no_checksum: bool = False) -> tuple[str, str, Extract | None]:
    """(status, key, values) of a sentence without its TAG block: ``check_sentence``, then ``extract``
    when the status is ``ok`` (values None: a field unparseable; a bug in an extractor raises
    ``ValuesFault`` from it). The same text always gives the same answer, and nothing changes an
    Extract once made, so a caller may keep the answers of texts that repeat (``Ingest`` does)."""
    status, key, _talker, fields = check_sentence(sentence, allow_no_checksum)
    if status != "ok":
        return status, key, None
    try:
        return status, key, extract(key, fields)
    except Exception as exc:
        raise ValuesFault(key) from exc


# --- step 2: typed values -----------------------------------------------------------

# What an understood sentence gives: typed values (the ingest turns them into samples
# once the line has its data time, applying variation and the installation's settings).
# Dataclasses with slots, not frozen: one or more is made for every line, and a frozen
# dataclass's __init__ sets each field through object.__setattr__. Nothing changes them.

@dataclass(slots=True)
class Measured:
    """A sample the estimators take as it is: ``kind(t_s, *args)`` at the line's data time."""

    kind: type
    args: tuple


@dataclass(slots=True)
class LabelledHeading:
    """HDT, HDM, THS: a heading, degrees, as the sentence labels it (``"T"`` true, ``"M"`` magnetic)."""

    deg: float
    reference: str


@dataclass(slots=True)
class SensorHeading:
    """HDG: the magnetic sensor's heading, degrees, and its own deviation (east positive) if sent."""

    deg: float
    deviation_east_deg: float | None


@dataclass(slots=True)
class Variation:
    """Magnetic variation a sentence states (RMC, HDG), degrees east positive."""

    east_deg: float


@dataclass(slots=True)
class WindOffBow:
    """MWV theoretical (reference T): wind over the water, angle off the bow (degrees) and knots."""

    angle_deg: float
    speed_kn: float


@dataclass(slots=True)
class WindFromMagnetic:
    """MWD with only a magnetic direction: the wind comes from (degrees magnetic), knots."""

    from_magnetic_deg: float
    speed_kn: float


Value = Measured | LabelledHeading | SensorHeading | Variation | WindOffBow | WindFromMagnetic


class Extract:
    """What one understood sentence gave: values, dropped ones, its own GNSS time."""

    __slots__ = ("values", "implausible", "tod_s", "day")

    def __init__(self) -> None:
        self.values: list[Value] = []
        self.implausible = 0
        self.tod_s: float | None = None  # UTC seconds of day, when the sentence is a valid time source
        self.day: int | None = None  # days since 1970-01-01, when it also carries a date

    def drop(self) -> None:
        self.implausible += 1

    def add(self, cls: type, *args: object) -> None:
        self.values.append(Measured(cls, args))


class Unparseable(ValueError):
    """A field that is not what its layout says."""


def _get(fields: list[str], i: int) -> str:
    """Field i, or "" past the end (XDR's repeating groups; every other sentence's fields come padded)."""
    return fields[i] if i < len(fields) else ""


def num(s: str) -> float | None:
    """A number field: None when empty. NaN and infinity pass through (plausibility drops them)."""
    if not s:
        return None
    try:
        return float(s)
    except ValueError:
        raise Unparseable(s) from None


def direction(s: str) -> float | None | bool:
    """A direction 0..360 (360 taken as 0); None when empty; False when implausible."""
    x = num(s)
    if x is None:
        return None
    if not 0.0 <= x <= 360.0:
        return False
    return 0.0 if x == 360.0 else x


def latlon(value: str, hemi: str, is_lat: bool) -> float | None:
    """ddmm.mmmm / dddmm.mmmm with N/S or E/W to signed degrees; None when empty.

    Raises Unparseable for a bad hemisphere or minutes >= 60; the range
    check (|lat| <= 90, |lon| <= 180) is the caller's plausibility.
    """
    if not value:
        return None
    v = num(value)
    assert v is not None
    if not math.isfinite(v) or v < 0:
        raise Unparseable(value)
    deg = math.floor(v / 100.0)
    minutes = v - 100.0 * deg
    if minutes >= 60.0:
        raise Unparseable(value)
    x = deg + minutes / 60.0
    if hemi == ("S" if is_lat else "W"):
        return -x
    if hemi != ("N" if is_lat else "E"):
        raise Unparseable(hemi)
    return x


def time_of_day(s: str) -> float | None:
    """hhmmss[.ss] to seconds of the UTC day; None when empty."""
    if not s:
        return None
    if len(s) < 6 or not s[:4].isdigit():
        raise Unparseable(s)
    h, m = int(s[0:2]), int(s[2:4])
    sec = num(s[4:])
    assert sec is not None
    if h > 23 or m > 59 or not 0.0 <= sec <= 60.999:  # 60: a leap second
        raise Unparseable(s)
    return h * 3600.0 + m * 60.0 + sec


@lru_cache(maxsize=256)
def day_number(year: int, month: int, day: int) -> int:
    """Days since 1970-01-01 of a calendar date; Unparseable when it is no date."""
    try:
        return dt.date(year, month, day).toordinal() - _EPOCH_ORDINAL
    except (ValueError, OverflowError):  # OverflowError: a day of 20 digits (a ZDA seen in fuzzing)
        raise Unparseable(f"{year}-{month}-{day}") from None


def rmc_date(s: str) -> int | None:
    """RMC ddmmyy to a day number; two-digit years 80..99 are 19xx, 00..79 are 20xx (from memory)."""
    if not s:
        return None
    if len(s) != 6 or not s.isdigit():
        raise Unparseable(s)
    yy = int(s[4:6])
    return day_number(1900 + yy if yy >= 80 else 2000 + yy, int(s[2:4]), int(s[0:2]))


def _east(value: float | None, hemi: str) -> float | None:
    """A variation or deviation with E/W to east-positive degrees."""
    if value is None:
        return None
    if hemi == "W":
        return -value
    if hemi == "E":
        return value
    raise Unparseable(hemi)


def _fix(ex: Extract, lat: float | None, lon: float | None, sog: float | None = None, cog: float | None = None,
         hdop: float | None = None) -> None:
    if lat is None or lon is None:
        return
    if not (-LAT_MAX_DEG <= lat <= LAT_MAX_DEG and -LON_MAX_DEG <= lon <= LON_MAX_DEG):
        ex.drop()
        return
    ex.add(Fix, lat, lon, sog, cog, hdop)


def _sog(x: float | None) -> float | None | bool:
    if x is None:
        return None
    return x if 0.0 <= x < SOG_MAX_KN else False


# each parser's positions, resolved once
_RMC, _GGA, _GLL, _VTG, _ZDA = (positions(k) for k in ("RMC", "GGA", "GLL", "VTG", "ZDA"))
_HDG, _HDM, _HDT, _THS = (positions(k) for k in ("HDG", "HDM", "HDT", "THS"))
_VHW, _VBW, _MTW, _MDA, _XDR = (positions(k) for k in ("VHW", "VBW", "MTW", "MDA", "XDR"))
_MWV, _MWD, _DBT, _DPT = (positions(k) for k in ("MWV", "MWD", "DBT", "DPT"))
# VTG as talkers before NMEA 0183 v2.0 wrote it: four numbers, no unit letters (from memory)
_VTG_UNLABELLED = namedtuple("VTGUnlabelled", ("cog_true", "cog_magnetic", "sog_kn", "sog_kmh"))(0, 1, 2, 3)


def ext_rmc(f: list[str]) -> Extract:
    """NMEA 0183 v4.10 RMC: 0 time, 1 status A/V, 2-3 lat, 4-5 lon, 6 SOG kn, 7 COG true,
    8 date ddmmyy, 9-10 variation E/W, 11 mode indicator (v2.3+), 12 navigational status (v4.1)."""
    ex = Extract()
    if f[_RMC.status] != "A" or f[_RMC.mode] == "N":  # void, or mode N "data not valid" (v4.10 field 12)
        ex.drop()  # a void sentence's other fields are often junk (89 deg 60'): not looked at
        return ex
    tod, day = time_of_day(f[_RMC.time]), rmc_date(f[_RMC.date])
    lat = latlon(f[_RMC.lat], f[_RMC.lat_hemi], True)
    lon = latlon(f[_RMC.lon], f[_RMC.lon_hemi], False)
    sog, cog = _sog(num(f[_RMC.sog_kn])), direction(f[_RMC.cog_true])
    # a variation without E/W is no variation (some receivers send "0" and no hemisphere)
    var_text, var_hemi = f[_RMC.variation], f[_RMC.variation_hemi]
    var = _east(num(var_text), var_hemi) if var_text and var_hemi in ("E", "W") else None
    ex.tod_s, ex.day = tod, day
    if var is not None:
        if -VARIATION_MAX_DEG <= var <= VARIATION_MAX_DEG:
            ex.values.append(Variation(var))
        else:
            ex.drop()
    if sog is False or cog is False:
        ex.drop()
        return ex
    _fix(ex, lat, lon, sog=sog, cog=cog)
    return ex


_GGA_FIX_QUALITIES = frozenset("12345")  # 0 invalid, 6 estimated (DR), 7 manual, 8 simulator


def ext_gga(f: list[str]) -> Extract:
    """NMEA 0183 v4.10 GGA: 0 time, 1-2 lat, 3-4 lon, 5 quality, 6 satellites, 7 HDOP,
    8-9 altitude M, 10-11 geoid separation M, 12 age of differential data, 13 station."""
    ex = Extract()
    if f[_GGA.quality] not in _GGA_FIX_QUALITIES:
        ex.drop()
        return ex
    tod = time_of_day(f[_GGA.time])
    lat = latlon(f[_GGA.lat], f[_GGA.lat_hemi], True)
    lon = latlon(f[_GGA.lon], f[_GGA.lon_hemi], False)
    hdop = num(f[_GGA.hdop])
    ex.tod_s = tod
    if hdop is not None and not 0.0 <= hdop <= HDOP_MAX:
        hdop = None  # 99.9 and the like mean "unknown", not a bad fix
    _fix(ex, lat, lon, hdop=hdop)
    return ex


def ext_gll(f: list[str]) -> Extract:
    """NMEA 0183 v4.10 GLL: 0-1 lat, 2-3 lon, 4 time, 5 status A/V, 6 mode (v2.3+).
    Older layouts without status (v1.5: four fields) are taken as valid positions."""
    ex = Extract()
    status = f[_GLL.status]
    if status not in ("A", "") or f[_GLL.mode] == "N":
        ex.drop()
        return ex
    lat = latlon(f[_GLL.lat], f[_GLL.lat_hemi], True)
    lon = latlon(f[_GLL.lon], f[_GLL.lon_hemi], False)
    tod = time_of_day(f[_GLL.time])
    if status == "A":
        ex.tod_s = tod
    _fix(ex, lat, lon)
    return ex


def ext_vtg(f: list[str]) -> Extract:
    """NMEA 0183 v4.10 VTG: 0 COG true, 1 T, 2 COG magnetic, 3 M, 4 SOG kn, 5 N, 6 SOG km/h, 7 K,
    8 mode (v2.3+). The old layout without unit letters (COG T, COG M, SOG kn, SOG km/h) too."""
    ex = Extract()
    if f[_VTG.true_mark] not in ("T", ""):  # old layout: four numbers
        old = _VTG_UNLABELLED
        cog, kn, kmh, mode = direction(f[old.cog_true]), num(f[old.sog_kn]), num(f[old.sog_kmh]), ""
    else:
        cog, kn, kmh = direction(f[_VTG.cog_true]), num(f[_VTG.sog_kn]), num(f[_VTG.sog_kmh])
        mode = f[_VTG.mode]
    if mode == "N":
        ex.drop()
        return ex
    sog = _sog(kn if kn is not None else (kmh * KMH_TO_KN if kmh is not None else None))
    if sog is None:
        return ex
    if sog is False or cog is False:
        ex.drop()
        return ex
    ex.add(GroundVelocity, sog, cog)
    return ex


def ext_zda(f: list[str]) -> Extract:
    """NMEA 0183 v4.10 ZDA: 0 time, 1 day, 2 month, 3 year (four digits), 4-5 local zone."""
    ex = Extract()
    tod = time_of_day(f[_ZDA.time])
    d, m, y = f[_ZDA.day], f[_ZDA.month], f[_ZDA.year]
    if not (d and m and y):
        return ex
    if not (d.isdigit() and m.isdigit() and y.isdigit() and len(y) == 4):
        raise Unparseable(f"{d}/{m}/{y}")
    ex.tod_s, ex.day = tod, day_number(int(y), int(m), int(d))
    return ex


def _heading(ex: Extract, s: str, ref: str) -> None:
    deg = direction(s)
    if deg is False:
        ex.drop()
    elif deg is not None:
        ex.values.append(LabelledHeading(deg, ref))


def ext_hdt(f: list[str]) -> Extract:
    """NMEA 0183 v4.10 HDT: 0 heading, 1 T."""
    ex = Extract()
    _heading(ex, f[_HDT.heading], "T")
    return ex


def ext_hdm(f: list[str]) -> Extract:
    """NMEA 0183 v4.10 HDM: 0 heading, 1 M."""
    ex = Extract()
    _heading(ex, f[_HDM.heading], "M")
    return ex


def ext_ths(f: list[str]) -> Extract:
    """NMEA 0183 v4.10 THS: 0 true heading, 1 mode: A autonomous, E estimated (dead reckoning),
    M manual, S simulator, V not valid. Only A and E are headings of this boat now."""
    ex = Extract()
    deg = direction(f[_THS.heading])
    if deg is None:
        return ex
    if deg is False or f[_THS.mode] not in ("A", "E"):
        ex.drop()
        return ex
    ex.values.append(LabelledHeading(deg, "T"))
    return ex


def ext_hdg(f: list[str]) -> Extract:
    """NMEA 0183 v4.10 HDG: 0 magnetic sensor heading, 1-2 deviation E/W, 3-4 variation E/W.
    Magnetic heading = sensor + deviation (E positive); true = magnetic + variation."""
    ex = Extract()
    deg = direction(f[_HDG.heading])
    dev_text, var_text = f[_HDG.deviation], f[_HDG.variation]
    dev = _east(num(dev_text), f[_HDG.deviation_hemi]) if dev_text else None
    var = _east(num(var_text), f[_HDG.variation_hemi]) if var_text else None
    if var is not None:
        if -VARIATION_MAX_DEG <= var <= VARIATION_MAX_DEG:
            ex.values.append(Variation(var))
        else:
            ex.drop()
    if deg is False or (dev is not None and not -VARIATION_MAX_DEG <= dev <= VARIATION_MAX_DEG):
        ex.drop()
    elif deg is not None:
        ex.values.append(SensorHeading(deg, dev))
    return ex


def _stw(ex: Extract, kn: float | None, kmh: float | None) -> None:
    speed = kn if kn is not None else (kmh * KMH_TO_KN if kmh is not None else None)
    if speed is None:
        return
    if 0.0 <= speed < STW_MAX_KN:
        ex.add(WaterSpeed, speed)
    else:
        ex.drop()


def ext_vhw(f: list[str]) -> Extract:
    """NMEA 0183 v4.10 VHW: 0 heading true, 1 T, 2 heading magnetic, 3 M, 4 STW kn, 5 N,
    6 STW km/h, 7 K. (Headings here are not used: HDx/THS carry them.)"""
    ex = Extract()
    _stw(ex, num(f[_VHW.stw_kn]), num(f[_VHW.stw_kmh]))
    return ex


def ext_vbw(f: list[str]) -> Extract:
    """NMEA 0183 v4.10 VBW: 0 longitudinal water speed kn, 1 transverse water speed, 2 status
    A/V, 3 longitudinal ground speed, 4 transverse ground speed, 5 status, 6-9 stern speeds."""
    ex = Extract()
    kn = num(f[_VBW.water_long_kn])
    if kn is None:
        return ex
    if f[_VBW.water_status] != "A":
        ex.drop()
        return ex
    _stw(ex, kn, None)
    return ex


def _temp(ex: Extract, value: float | None, cls: type, lo_hi: tuple[float, float]) -> None:
    if value is None:
        return
    if lo_hi[0] <= value <= lo_hi[1]:
        ex.add(cls, value)
    else:
        ex.drop()


def _pressure(ex: Extract, hpa: float | None) -> None:
    if hpa is None:
        return
    if PRESSURE_HPA[0] <= hpa <= PRESSURE_HPA[1]:
        ex.add(Pressure, hpa)
    else:
        ex.drop()


def ext_mtw(f: list[str]) -> Extract:
    """NMEA 0183 v4.10 MTW: 0 water temperature, 1 C."""
    ex = Extract()
    unit = f[_MTW.temp_unit]
    if unit not in ("C", ""):
        raise Unparseable(unit)
    _temp(ex, num(f[_MTW.temp]), SeaTemperature, SEA_TEMP_C)
    return ex


def _unit_value(f: list[str], i: int, unit: str) -> float | None:
    """The number at field i when field i+1 is the given unit letter."""
    return num(f[i]) if f[i + 1] == unit else None


def ext_mda(f: list[str]) -> Extract:
    """NMEA 0183 v4.10 MDA: 0-1 pressure inHg I, 2-3 pressure bar B, 4-5 air temp C,
    6-7 water temp C, 8 relative humidity, 9 absolute humidity, 10-11 dew point C,
    12-13 wind from true T, 14-15 wind from magnetic M, 16-17 wind kn N, 18-19 wind m/s M.
    Each value is taken only where its unit letter stands beside it (devices leave
    out what they do not measure, some stop after the pressure).
    The wind here is not used: MWV/MWD carry it with a clear reference."""
    ex = Extract()
    bar, inhg = _unit_value(f, _MDA.bar, "B"), _unit_value(f, _MDA.inhg, "I")
    _pressure(ex, bar * 1000.0 if bar is not None else (inhg * INHG_TO_HPA if inhg is not None else None))
    _temp(ex, _unit_value(f, _MDA.air_temp, "C"), AirTemperature, AIR_TEMP_C)
    _temp(ex, _unit_value(f, _MDA.water_temp, "C"), SeaTemperature, SEA_TEMP_C)
    return ex


_WATER_NAMES = ("WATER", "SEA", "WTEMP", "WTMP")
_ROLL_NAMES = ("ROLL", "HEEL")
_PITCH_NAMES = ("PITCH", "PTCH")


def ext_xdr(f: list[str]) -> Extract:
    """NMEA 0183 v4.10 XDR: groups of four fields: type, value, unit, transducer name.
    Used: P pressure (unit B bar or P pascal), C temperature (unit C; a name with
    WATER/SEA is sea temperature, any other name air temperature), A angle (unit D;
    a name with ROLL/HEEL is heel, positive to starboard; PITCH/PTCH pitch, bow up).
    The names are the installer's choice; these are the common ones (from memory)."""
    ex = Extract()
    heel = pitch = None
    group = len(_XDR)
    for i in range(0, len(f) - 2, group):
        kind, value, unit = f[i + _XDR.type], num(f[i + _XDR.value]), f[i + _XDR.unit]
        name = _get(f, i + _XDR.name).upper()
        if value is None:
            continue
        if kind == "P" and unit in ("B", "P"):
            _pressure(ex, value * 1000.0 if unit == "B" else value / 100.0)
        elif kind == "C" and unit == "C":
            water = any(w in name for w in _WATER_NAMES)
            _temp(ex, value, SeaTemperature if water else AirTemperature, SEA_TEMP_C if water else AIR_TEMP_C)
        elif kind == "A" and unit == "D":
            is_roll, is_pitch = any(w in name for w in _ROLL_NAMES), any(w in name for w in _PITCH_NAMES)
            if not (is_roll or is_pitch):
                continue
            if not -ATTITUDE_MAX_DEG <= value <= ATTITUDE_MAX_DEG:
                ex.drop()
            elif is_roll:
                heel = value
            else:
                pitch = value
    if heel is not None or pitch is not None:
        ex.add(Attitude, heel, pitch)
    return ex


_WIND_UNITS = {"N": 1.0, "M": MPS_TO_KN, "K": KMH_TO_KN, "S": MPH_TO_KN}


def ext_mwv(f: list[str]) -> Extract:
    """NMEA 0183 v4.10 MWV: 0 wind angle 0..360 off the bow, 1 reference R relative /
    T theoretical, 2 speed, 3 unit K/M/N/S, 4 status A/V."""
    ex = Extract()
    angle, speed, ref = direction(f[_MWV.angle]), num(f[_MWV.speed]), f[_MWV.reference]
    if angle is None or speed is None:
        return ex
    factor = _WIND_UNITS.get(f[_MWV.speed_unit])
    if factor is None or ref not in ("R", "T"):
        raise Unparseable(",".join(f[:4]))
    kn = speed * factor
    if f[_MWV.status] != "A" or angle is False or not 0.0 <= kn <= WIND_MAX_KN:
        ex.drop()
        return ex
    if ref == "R":
        ex.add(ApparentWind, angle, kn)
    else:
        ex.values.append(WindOffBow(angle, kn))
    return ex


def ext_mwd(f: list[str]) -> Extract:
    """NMEA 0183 v4.10 MWD: 0 wind from, true, 1 T, 2 from, magnetic, 3 M, 4 speed kn, 5 N,
    6 speed m/s, 7 M."""
    ex = Extract()
    true, mag = direction(f[_MWD.from_true]), direction(f[_MWD.from_magnetic])
    kn, mps = num(f[_MWD.speed_kn]), num(f[_MWD.speed_mps])
    speed = kn if kn is not None else (mps * MPS_TO_KN if mps is not None else None)
    if speed is None or (true is None and mag is None):
        return ex
    if true is False or mag is False or not 0.0 <= speed <= WIND_MAX_KN:
        ex.drop()
    elif true is not None:
        ex.add(WaterWind, speed, true, None)
    else:
        ex.values.append(WindFromMagnetic(mag, speed))
    return ex


def _depth(ex: Extract, metres: float | None) -> None:
    if metres is None:
        return
    if 0.0 <= metres <= DEPTH_MAX_M:
        ex.add(Depth, metres)
    else:
        ex.drop()


def ext_dbt(f: list[str]) -> Extract:
    """NMEA 0183 v4.10 DBT: depth below transducer: 0-1 feet f, 2-3 metres M, 4-5 fathoms F."""
    ex = Extract()
    m, ft = _unit_value(f, _DBT.depth_m, "M"), _unit_value(f, _DBT.depth_ft, "f")
    fa = _unit_value(f, _DBT.depth_fathoms, "F")
    _depth(ex, m if m is not None else ft * FT_TO_M if ft is not None else fa * FATHOM_TO_M if fa is not None else None)
    return ex


def ext_dpt(f: list[str]) -> Extract:
    """NMEA 0183 v4.10 DPT: 0 depth below transducer m, 1 offset m (positive: transducer to
    waterline, added; negative: transducer to keel, not added), 2 maximum range (v3.0+)."""
    ex = Extract()
    d, off = num(f[_DPT.depth_m]), num(f[_DPT.offset_m])
    if d is not None and off is not None and off > 0 and math.isfinite(off):
        d += off
    _depth(ex, d)
    return ex


EXTRACTORS = {
    "RMC": ext_rmc, "GGA": ext_gga, "GLL": ext_gll, "VTG": ext_vtg, "ZDA": ext_zda,
    "HDG": ext_hdg, "HDM": ext_hdm, "HDT": ext_hdt, "THS": ext_ths,
    "VHW": ext_vhw, "VBW": ext_vbw, "MTW": ext_mtw, "MDA": ext_mda, "XDR": ext_xdr,
    "MWV": ext_mwv, "MWD": ext_mwd, "DBT": ext_dbt, "DPT": ext_dpt,
}
TIME_SENTENCES = frozenset({"RMC", "GGA", "GLL", "ZDA"})

# The approved sentence formatters of NMEA 0183 (v4.10 and earlier, from memory): the
# types a well-behaved talker may send. Any other three letters are made up (or a
# corrupted address); counters give those a bounded number of rows of their own.
STANDARD_FORMATTERS = frozenset(EXTRACTORS) | frozenset("""
    AAM ABK ABM ACA ACK ACS AIR AKD ALA ALC ALF ALM ALR APA APB ARC BBM BEC BOD BWC BWR BWW CUR
    DBK DBS DCN DDC DOR DSC DSE DSI DSR DTM ETL EVE FIR FSI GBS GEN GFA GLC GMP GNS GRS GSA GST GSV
    GTD HBT HDG HMR HMS HSC HTC HTD LCD LRF LRI LR1 LR2 LR3 MLA MSK MSS MWH NRM NRX OLN OSD RLM RMA
    RMB ROO ROR ROT RPM RSA RSD RTE SFI SSD STN TDS TFI TLB TLL TPC TPR TPT TRF TTD TTM TUT TXT VDM
    VDO VDR VLW VPW VSD VTA VWR VWT WCV WDC WDR WNC WPL XTE XTR ZDL ZFO ZTG
""".split())


# Each sentence's fields, as its extractor reads them: a talker leaves off the fields after its last
# (an older layout, a device that does not measure the rest), so they are padded with empty ones and the
# extractors index them directly. XDR is read group by group as far as it goes: never padded.
_FIELD_COUNTS = {key: 0 if key == "XDR" else len(LAYOUTS[key]) for key in EXTRACTORS}


def extract(key: str, fields: list[str]) -> Extract | None:
    """Typed values of an understood sentence; None when a field is unparseable."""
    short = _FIELD_COUNTS[key] - len(fields)
    if short > 0:
        fields = fields + [""] * short  # a new list: the caller's fields stay as they came
    try:
        return EXTRACTORS[key](fields)
    except Unparseable:
        return None
