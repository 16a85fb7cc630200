"""The payload layer: time stamps, the decimals table, JSON cleaning, the advisory sentence.

Outside references named beside each check: ISO 8601 (UTC with ``Z``) and the
well-known UNIX time 1,000,000,000 = 2001-09-09 01:46:40 UTC; geographiclib's
geodesic on WGS84 (Karney 2013) for what a rounded position is worth on the
ground; RFC 8259 (JSON has no NaN and no infinities).
"""

from __future__ import annotations

import json
import random
from datetime import datetime, timezone

import pytest

from geographiclib.geodesic import Geodesic

from daemon.core.payloads import (ADVISORY, DEFAULT_DECIMALS, MAX_DEPTH, clean, decimals_for, encode_json, iso_utc,
                                  json_default, json_encoder, payload, rule_for, with_advisory)


def test_iso_utc_is_iso_8601_with_milliseconds_and_z():
    assert iso_utc(1_000_000_000.0) == "2001-09-09T01:46:40.000Z"  # the UNIX billennium
    assert iso_utc(1_000_000_000.0006) == "2001-09-09T01:46:40.001Z"  # rounded to the millisecond, not cut
    assert iso_utc(1_000_000_059.9996) == "2001-09-09T01:47:40.000Z"  # rounding carries into the seconds


def test_iso_utc_is_the_standard_librarys_utc_time_on_any_second():
    # the reference: datetime.fromtimestamp(..., timezone.utc) (Python's standard library), on random
    # seconds from 1938 to 2286 and on either side of midnights (the date is made once a day)
    rng = random.Random(7)
    seconds = rng.sample(range(-10**9, 10**10), 2000) + [d * 86400 + k for d in (-1, 0, 20577) for k in (-1, 0, 1)]
    for sec in seconds:
        want = datetime.fromtimestamp(sec, tz=timezone.utc).strftime("%Y-%m-%dT%H:%M:%S") + ".250Z"
        assert iso_utc(sec + 0.25) == want, sec


def test_a_rounded_position_is_within_a_metre_of_the_true_one():
    # GIVEN random positions from the equator to 80 deg: WHEN rounded by the table
    # THEN the geodesic distance to the unrounded one (geographiclib, WGS84) is under a metre
    rng, geod = random.Random(3), Geodesic.WGS84
    worst = 0.0
    for _ in range(500):
        lat, lon = rng.uniform(-80.0, 80.0), rng.uniform(-180.0, 180.0)
        p = clean({"lat": lat, "lon": lon})
        worst = max(worst, geod.Inverse(lat, lon, p["lat"], p["lon"])["s12"])
    assert 0.3 < worst < 1.0  # and not needlessly finer than a metre (7 decimals were 1 cm)


def test_each_field_gets_the_decimals_a_person_reads():
    p = clean({"msl_hpa": 1013.2499, "drift_kn": 1.23456, "set_deg": 123.456, "temp_c": 15.6789,
               "distance_run_nm": 20.82449, "sigma_m": 12.345, "rate_hpa_per_h": -1.23456,
               "gradient_c_per_nm": 5.6789, "last_fix_lat": 40.1234567, "stw_scale": 1.043219, "hdop": 0.94})
    assert p == {"msl_hpa": 1013.2, "drift_kn": 1.23, "set_deg": 123.5, "temp_c": 15.68, "distance_run_nm": 20.824,
                 "sigma_m": 12.3, "rate_hpa_per_h": -1.23, "gradient_c_per_nm": 5.679, "last_fix_lat": 40.12346,
                 "stw_scale": 1.0432, "hdop": 0.9}
    # the longest unit ending wins: a rate in hPa/h is not a pressure in hPa
    assert rule_for("rate_1h_se_hpa_per_h") == 2 and rule_for("fall_3h_hpa") == 1
    assert rule_for("quality") is None and decimals_for("quality") == DEFAULT_DECIMALS


def test_never_a_negative_zero():
    text = json.dumps(clean({"east_kn": -0.001, "north_kn": -0.0, "set_deg": -0.04}))
    assert "-0" not in text and json.loads(text) == {"east_kn": 0.0, "north_kn": 0.0, "set_deg": 0.0}


def test_a_value_seen_before_is_published_as_it_was_rounded_for_its_own_field():
    # the payload layer keeps what it rounded by value and field: the same value under another
    # field gets that field's decimals, a -0.0 after a 0.0 is still 0.0 (a NaN is still null)
    first = payload(1.0, {"drift_kn": 1.23456, "set_deg": 1.23456, "north_kn": 0.0, "x": float("nan")})
    again = payload(2.0, {"set_deg": 1.23456, "drift_kn": 1.23456, "north_kn": -0.0, "x": float("nan"),
                          "age_s": {"fix": 1.23456}})
    assert first == {"time": "1970-01-01T00:00:01.000Z", "drift_kn": 1.23, "set_deg": 1.2, "north_kn": 0.0, "x": None}
    assert again == {"time": "1970-01-01T00:00:02.000Z", "set_deg": 1.2, "drift_kn": 1.23, "north_kn": 0.0, "x": None,
                     "age_s": {"fix": 1.2}}
    assert repr(again["north_kn"]) == "0.0"  # not "-0.0"
    # and every field as round() gives it (Python's correctly rounded round, the reference), on random values
    rng = random.Random(5)
    values = [rng.uniform(-1e4, 1e4) for _ in range(300)] + [rng.randrange(-999, 999) / 8 for _ in range(300)]
    for name, decimals in (("msl_hpa", 1), ("drift_kn", 2), ("quality", DEFAULT_DECIMALS), ("lat", 5)):
        for _ in range(2):  # the second time from what was kept
            assert [repr(payload(0.0, {name: v})[name]) for v in values] == [repr(round(v, decimals) + 0.0)
                                                                             for v in values]


def test_nested_fields_without_a_rule_take_their_parents_and_own_rules_win():
    p = clean({"age_s": {"fix": 6.04321, "depth": 76.86}, "values": {"fall_3h_hpa": 1.3336825, "x": 0.123456}})
    assert p == {"age_s": {"fix": 6.0, "depth": 76.9}, "values": {"fall_3h_hpa": 1.3, "x": 0.123}}


def test_what_json_cannot_hold_is_made_safe_and_depth_is_bounded():
    p = clean({"a_kn": float("nan"), "b_kn": float("inf"), "c": (1, 2.00049), "d": b"\x00", 5: True})
    assert p == {"a_kn": None, "b_kn": None, "c": [1, 2.0], "d": "b'\\x00'", "5": True}
    json.dumps(p, allow_nan=False)  # RFC 8259: no NaN, no Infinity
    deep: dict = {}
    node = deep
    for _ in range(MAX_DEPTH + 5):
        node["k"] = {}
        node = node["k"]
    text = json.dumps(clean(deep))
    assert text.count("{") == MAX_DEPTH


def test_a_payload_has_time_first_and_its_own_time_field_is_ignored():
    p = payload(1_000_000_000.0, {"drift_kn": 0.12345, "time": "forged", "sensors": {"heading": 0.54}})
    assert list(p) == ["time", "drift_kn", "sensors"]
    assert p["time"] == "2001-09-09T01:46:40.000Z" and p["drift_kn"] == 0.12 and p["sensors"] == {"heading": 0.5}


def test_alert_texts_end_with_the_advisory_sentence():
    assert with_advisory("Pressure falling quickly.") == "Pressure falling quickly. " + ADVISORY
    assert with_advisory("") == ADVISORY and "not for navigation" in ADVISORY


def _float_fields(value, name: str = "", inherited: bool = False):
    """(field name, covered) for every float in a payload; nested fields may take their parent's rule."""
    if isinstance(value, dict):
        for k, v in value.items():
            yield from _float_fields(v, k, inherited or rule_for(name) is not None)
    elif isinstance(value, list):
        for v in value:
            yield from _float_fields(v, name, inherited)
    elif isinstance(value, float):
        yield name, inherited or rule_for(name) is not None


def test_every_float_the_service_publishes_has_a_rule_in_the_table(short_passage):
    # GIVEN the short simulated passage (every state topic, an event, alert changes) through replay
    from daemon.commands.replay import run_replay
    from daemon.core.config import load_config
    from tests.helpers import Keep

    sink = Keep()
    run_replay([str(short_passage["nmea"])], load_config(short_passage["cfg"]), progress=False, extra_sinks=[sink])
    # THEN each float field is rounded by a rule of the table (its own or its parent's), not by the default
    uncovered = {(m.topic.split("/", 1)[1].split("/")[0], name)
                 for m in sink.messages for name, covered in _float_fields(dict(m.payload)) if not covered}
    assert uncovered == set()
    assert {m.topic.split("/", 1)[1] for m in sink.messages} >= {"position", "current", "pressure", "status"}


def test_the_encoder_made_once_writes_the_standard_librarys_text():
    # the reference: json.JSONEncoder(...).encode (Python's standard library), with each set of options
    # the service writes with (JSONL, the MQTT payload, the recording's rows)
    rng = random.Random(11)
    values = [payload(rng.uniform(0, 2e9), {"set_deg": rng.uniform(-1e3, 1e3), "quality": "valid ±é\u2028",
                                            "health": {"fused": rng.randrange(99), "last_nis": None, "ok": True},
                                            "periods_s": [rng.uniform(0, 20) for _ in range(rng.randrange(4))]})
              for _ in range(200)] + [[1.5, "x", None], "a\"quote", 7, {}]
    for options in ({"ensure_ascii": False, "allow_nan": False},
                    {"ensure_ascii": False, "separators": (",", ":"), "allow_nan": False, "default": json_default},
                    {"ensure_ascii": True, "separators": (",", ":"), "default": json_default}):
        made_once, reference = json_encoder(**options), json.JSONEncoder(**options).encode
        assert [made_once(v) for v in values] == [reference(v) for v in values]
    assert json_encoder(allow_nan=True)([float("nan")]) == "[NaN]"
    with pytest.raises(ValueError):  # RFC 8259: no NaN
        json_encoder(allow_nan=False)({"a": float("inf")})


def test_a_payload_json_cannot_hold_is_cleaned_not_fatal():
    # a non-finite number or a cycle (the encoder made once looks for none): cleaned, the cycle cut at MAX_DEPTH
    assert encode_json({"drift_kn": float("nan")}) == '{"drift_kn":null}'
    loop: dict = {"a": 1}
    loop["self"] = loop
    text = encode_json(loop)
    assert text.startswith('{"a":1,"self":{"a":1,') and text.count("{") == MAX_DEPTH
