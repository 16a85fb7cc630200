"""The hand-written sentence parsers against an independent reader: pynmea2 as the oracle.

Every sentence of a hand-parsed type in the real captures and in the simulator's
demo passage is read by both. The fields must be the same strings, field by
field, and every value we extract must be what pynmea2's typed attributes say
(converted to our units), wherever pynmea2 reads the sentence at all.
"""

from __future__ import annotations

import gzip
import math
from decimal import Decimal
from pathlib import Path

import pynmea2
import pytest

from daemon.nmea0183.codec import (
    EXTRACTORS, LAYOUTS, KMH_TO_KN, MPS_TO_KN, MPH_TO_KN, LabelledHeading, Measured, SensorHeading, Variation,
    WindFromMagnetic, WindOffBow, extract, parse_line, place, positions,
)
from estimators.samples import (
    AirTemperature, ApparentWind, Depth, Fix, GroundVelocity, Pressure, SeaTemperature, WaterSpeed, WaterWind,
)
from tests.helpers import sentence
from tests.shared import REPO, shared_path

CAPTURES = ("berth-13min-mda-pressure.nmea", "sounder-survey-43min-dpt-mtw.nmea",
            "under-way-94min-hdg-hdt-rmc.nmea")
DEMO = REPO / "recorded_runs" / "tern-of-haldane.nmea.gz"
DEMO_LINES = 12000  # the first 20 min of the demo: every sentence type of the simulator, often


def _lines(path: Path, limit: int | None = None) -> list[str]:
    opener = gzip.open if path.suffix == ".gz" else open
    with opener(path, "rb") as f:
        raw = f.read()
    text = raw.decode("ascii", errors="replace").replace("\r", "\n").split("\n")
    # the framer drops non-ASCII lines before the parser sees them: so does this
    return [x.strip(" \x00") for x in text[:limit] if x.strip(" \x00") and x.isascii()]


def _understood(lines: list[str]):
    """(line, our parse, pynmea2's parse) for each hand-parsed sentence pynmea2 can read."""
    for text in lines:
        line = parse_line(text)
        if line.status != "ok" or line.key not in pynmea2.TalkerSentence.sentence_types:
            continue
        try:
            theirs = pynmea2.parse(line.sentence)
        except (pynmea2.ParseError, ValueError, AttributeError, TypeError):
            continue
        yield text, line, theirs


def _num(x) -> float | None:
    if x is None or x == "":
        return None
    return float(x) if isinstance(x, (int, float, Decimal)) else float(str(x))


def _deg(x) -> float | None:
    """A direction as we give it: 360 is 0."""
    v = _num(x)
    return None if v is None else v % 360.0


def _close(a: float | None, b: float | None, tol: float = 1e-9) -> bool:
    if a is None or b is None:
        return a is b
    return math.isclose(a, b, rel_tol=tol, abs_tol=tol)


def _measured(values, kind):
    return [v.args for v in values if isinstance(v, Measured) and v.kind is kind]


def _check_values(key: str, ours, m) -> None:  # noqa: C901 (one branch per sentence type, as the table)
    """Our extracted values against pynmea2's typed attributes of the same sentence."""
    vals = ours.values
    if key in ("RMC", "GGA", "GLL"):
        for lat, lon, sog, cog, _hdop in _measured(vals, Fix):
            assert _close(lat, m.latitude) and _close(lon, m.longitude)
            if key == "RMC":
                assert _close(sog, _num(m.spd_over_grnd)) and _close(cog, _deg(m.true_course))
    if key in ("RMC", "GGA") and ours.tod_s is not None and m.timestamp is not None:
        t = m.timestamp
        assert _close(ours.tod_s, t.hour * 3600 + t.minute * 60 + t.second + t.microsecond / 1e6, 1e-6)
    if key == "RMC" and ours.day is not None:
        assert ours.day == (m.datestamp - __import__("datetime").date(1970, 1, 1)).days
    if key == "ZDA" and ours.day is not None:
        import datetime as dt
        assert ours.day == (dt.date(int(m.year), int(m.month), int(m.day)) - dt.date(1970, 1, 1)).days
    if key in ("HDT", "HDM"):
        for v in vals:
            assert isinstance(v, LabelledHeading) and _close(v.deg, _deg(m.heading))
    if key == "HDG":
        for v in vals:
            if isinstance(v, SensorHeading):
                assert _close(v.deg, _deg(m.heading))
                dev = _num(m.deviation)
                if v.deviation_east_deg is not None:
                    assert _close(abs(v.deviation_east_deg), dev)
                    assert (v.deviation_east_deg < 0) == (m.dev_dir == "W" and dev != 0)
            elif isinstance(v, Variation):
                assert _close(abs(v.east_deg), _num(m.variation))
    if key == "VTG":
        for sog, cog in _measured(vals, GroundVelocity):
            kn, kmh = _num(m.spd_over_grnd_kts), _num(m.spd_over_grnd_kmph)
            assert _close(sog, kn if kn is not None else kmh * KMH_TO_KN)
    if key == "VHW":
        for (kn,) in _measured(vals, WaterSpeed):
            want = _num(m.water_speed_knots)
            assert _close(kn, want if want is not None else _num(m.water_speed_km) * KMH_TO_KN)
    if key == "VBW":
        for (kn,) in _measured(vals, WaterSpeed):
            assert _close(kn, _num(m.lon_water_spd))
    if key == "MTW":
        for (c,) in _measured(vals, SeaTemperature):
            assert _close(c, _num(m.temperature))
    if key == "MDA":
        for (hpa,) in _measured(vals, Pressure):
            bar = _num(m.b_pressure_bar) if m.bars == "B" else None
            assert _close(hpa, bar * 1000.0 if bar is not None else _num(m.b_pressure_inch) * 33.8639)
        for (c,) in _measured(vals, AirTemperature):
            assert _close(c, _num(m.air_temp))
        for (c,) in _measured(vals, SeaTemperature):
            assert _close(c, _num(m.water_temp))
    if key == "MWV":
        factor = {"N": 1.0, "M": MPS_TO_KN, "K": KMH_TO_KN, "S": MPH_TO_KN}.get(m.wind_speed_units)
        for angle, kn in _measured(vals, ApparentWind):
            assert m.reference == "R" and _close(angle, _deg(m.wind_angle))
            assert _close(kn, _num(m.wind_speed) * factor)
        for v in vals:
            if isinstance(v, WindOffBow):
                assert m.reference == "T" and _close(v.speed_kn, _num(m.wind_speed) * factor)
    if key == "MWD":
        for kn, from_deg, _angle in _measured(vals, WaterWind):
            assert _close(from_deg, _deg(m.direction_true))
            want = _num(m.wind_speed_knots)
            assert _close(kn, want if want is not None else _num(m.wind_speed_meters) * MPS_TO_KN)
        for v in vals:
            if isinstance(v, WindFromMagnetic):
                assert _close(v.from_magnetic_deg, _deg(m.direction_magnetic))
    if key == "DPT":
        for (metres,) in _measured(vals, Depth):
            off = _num(m.offset)
            assert _close(metres, _num(m.depth) + (off if off and off > 0 else 0.0))
    if key == "DBT":
        for (metres,) in _measured(vals, Depth):
            if m.unit_meters == "M" and m.depth_meters not in (None, ""):
                assert _close(metres, _num(m.depth_meters))


def _check_all(lines: list[str]) -> dict[str, int]:
    """Check every understood line; returns how many of each type were checked."""
    checked: dict[str, int] = {}
    for text, line, theirs in _understood(lines):
        assert line.fields == theirs.data, text
        ours = extract(line.key, line.fields)
        if ours is not None:
            _check_values(line.key, ours, theirs)
        checked[line.key] = checked.get(line.key, 0) + 1
    return checked


@pytest.mark.parametrize("name", CAPTURES)
def test_every_hand_parsed_sentence_of_a_real_capture_reads_as_pynmea2_reads_it(name):
    checked = _check_all(_lines(shared_path("real-captures", name)))
    assert sum(checked.values()) > 1000  # the captures are full of these types: the check really ran


def test_the_robustness_logs_read_as_pynmea2_reads_them():
    # dozens of receivers' own quirks (the gpsd and other corpora beside the captures)
    folder = shared_path("real-captures", "robustness")
    lines = [x for p in sorted(folder.rglob("*")) if p.is_file() for x in _lines(p)]
    checked = _check_all(lines)
    assert {"RMC", "GGA", "VTG", "ZDA"} <= set(checked)


def test_the_simulators_sentences_read_as_pynmea2_reads_them():
    checked = _check_all(_lines(DEMO, DEMO_LINES))
    # the simulator writes every hand-parsed type a boat sends, except THS (pynmea2 knows no THS)
    assert {"RMC", "GGA", "VTG", "ZDA", "HDG", "VHW", "MTW", "MDA", "XDR", "MWV", "DPT"} <= set(checked)


def test_every_hand_parsed_type_has_an_extractor():
    # issue 9: the sentences a boat sends most, parsed by hand
    assert set(EXTRACTORS) >= {"RMC", "GGA", "VTG", "ZDA", "HDG", "HDM", "HDT", "THS", "VHW", "VBW", "MTW",
                               "MDA", "XDR", "MWV", "MWD", "DPT", "DBT"}


# Our field name -> pynmea2's name for the same field (its sentence classes' ``fields``): an outside
# reader's positions for every field of the layout table. Our names where pynmea2 names a field alike.
PYNMEA2_NAMES = {
    "RMC": {"time": "timestamp", "sog_kn": "spd_over_grnd", "cog_true": "true_course", "date": "datestamp",
            "lat_hemi": "lat_dir", "lon_hemi": "lon_dir", "variation": "mag_variation",
            "variation_hemi": "mag_var_dir", "mode": "mode_indicator"},
    "GGA": {"time": "timestamp", "lat_hemi": "lat_dir", "lon_hemi": "lon_dir", "quality": "gps_qual",
            "satellites": "num_sats", "hdop": "horizontal_dil", "altitude_unit": "altitude_units",
            "geoid_sep": "geo_sep", "geoid_sep_unit": "geo_sep_units", "dgps_age": "age_gps_data",
            "dgps_station": "ref_station_id"},
    "GLL": {"lat_hemi": "lat_dir", "lon_hemi": "lon_dir", "time": "timestamp", "mode": "faa_mode"},
    "VTG": {"cog_true": "true_track", "true_mark": "true_track_sym", "cog_magnetic": "mag_track",
            "magnetic_mark": "mag_track_sym", "sog_kn": "spd_over_grnd_kts", "kn_unit": "spd_over_grnd_kts_sym",
            "sog_kmh": "spd_over_grnd_kmph", "kmh_unit": "spd_over_grnd_kmph_sym", "mode": "faa_mode"},
    "ZDA": {"time": "timestamp", "zone_hours": "local_zone", "zone_minutes": "local_zone_minutes"},
    "HDG": {"deviation_hemi": "dev_dir", "variation_hemi": "var_dir"},
    "HDM": {"magnetic_mark": "magnetic"},
    "HDT": {"true_mark": "hdg_true"},
    "VHW": {"true_mark": "true", "magnetic_mark": "magnetic", "stw_kn": "water_speed_knots", "kn_unit": "knots",
            "stw_kmh": "water_speed_km", "kmh_unit": "kilometers"},
    "VBW": {"water_long_kn": "lon_water_spd", "water_trans_kn": "trans_water_spd",
            "water_status": "data_validity_water_spd", "ground_long_kn": "lon_grnd_spd",
            "ground_trans_kn": "trans_grnd_spd", "ground_status": "data_validity_grnd_spd"},
    "MTW": {"temp": "temperature", "temp_unit": "units"},
    "MDA": {"inhg": "b_pressure_inch", "inhg_unit": "inches", "bar": "b_pressure_bar", "bar_unit": "bars",
            "air_temp_unit": "a_celsius", "water_temp_unit": "w_celsius", "dew_point_unit": "d_celsius",
            "wind_from_true": "direction_true", "true_mark": "true", "wind_from_magnetic": "direction_magnetic",
            "magnetic_mark": "magnetic", "wind_kn": "wind_speed_knots", "kn_unit": "knots",
            "wind_mps": "wind_speed_meters", "mps_unit": "meters"},
    "XDR": {"unit": "units", "name": "id"},
    "MWV": {"angle": "wind_angle", "speed": "wind_speed", "speed_unit": "wind_speed_units"},
    "MWD": {"from_true": "direction_true", "true_mark": "true", "from_magnetic": "direction_magnetic",
            "magnetic_mark": "magnetic", "speed_kn": "wind_speed_knots", "kn_unit": "knots",
            "speed_mps": "wind_speed_meters", "mps_unit": "meters"},
    "DBT": {"depth_ft": "depth_feet", "ft_unit": "unit_feet", "depth_m": "depth_meters", "m_unit": "unit_meters",
            "depth_fathoms": "depth_fathoms", "fathoms_unit": "unit_fathoms"},
    "DPT": {"depth_m": "depth", "offset_m": "offset", "max_range_m": "range"},
    "VDR": {"set_true": "deg_t", "true_mark": "true", "set_magnetic": "deg_m", "magnetic_mark": "magnetic",
            "drift_kn": "current", "kn_unit": "unit_kn"},
}
# pynmea2 has no THS or ALR class: their layouts rest on NMEA 0183 v4.10 alone (from memory)
NOT_IN_PYNMEA2 = {"THS", "ALR"}


def test_the_layout_table_has_every_hand_parsed_sentence():
    assert set(LAYOUTS) == set(EXTRACTORS) | {"VDR", "ALR"}  # and the two the NMEA output writes


@pytest.mark.parametrize("key", sorted(set(LAYOUTS) - NOT_IN_PYNMEA2))
def test_every_field_position_of_the_layout_table_is_pynmea2s(key):
    # pynmea2's sentence classes list their fields in order (``fields``: (description, name, ...)): the
    # position of each of our fields must be the position pynmea2 gives the same field
    theirs = [f[1] for f in pynmea2.TalkerSentence.sentence_types[key].fields]
    at = positions(key)
    names = PYNMEA2_NAMES.get(key, {})
    compared = 0
    for ours in LAYOUTS[key]:
        their_name = names.get(ours, ours)
        if their_name not in theirs:
            # only fields of later versions than pynmea2 knows: RMC's v4.1 navigational status and VBW's
            # stern speeds (v3.0) are at the end of the sentence, after every field pynmea2 has
            assert getattr(at, ours) >= len(theirs), f"{key}.{ours} is not in pynmea2's {theirs}"
            continue
        assert getattr(at, ours) == theirs.index(their_name), f"{key}.{ours}"
        compared += 1
    assert compared == len(theirs)  # every field pynmea2 knows has its name in the table


def test_place_puts_each_field_where_the_table_says_and_pynmea2_reads_it_there():
    # GIVEN an RMC made by name (as the simulator makes its sentences)
    fields = place("RMC", time="123519.00", status="A", lat="4807.038", lat_hemi="N", lon="01131.000",
                   lon_hemi="E", sog_kn="22.4", cog_true="84.4", date="230394", mode="A")
    # THEN pynmea2 reads each value under its own name, and the fields stop after the last one given
    m = pynmea2.parse(sentence("GPRMC," + ",".join(fields)))
    assert (m.status, m.lat, m.lon_dir, m.spd_over_grnd, m.true_course, m.mode_indicator) == \
        ("A", "4807.038", "E", 22.4, 84.4, "A")
    assert len(fields) == positions("RMC").mode + 1
    with pytest.raises(KeyError):
        place("RMC", speed="1.0")
