"""The simulator's NMEA writer against an independent parser (pynmea2) and the standard.

Outside checks: pynmea2's parser and its own checksum routine (an independent
implementation) for every sentence the writer makes; NMEA 0183 version 2.3/3.01
field layouts; NMEA 0183 version 4.10 for TAG blocks; 1 inHg = 33.8638866667
hPa (NIST SP 811); 1 kn = 1.852 km/h (exact).
"""

from __future__ import annotations

import gzip
from dataclasses import replace
from datetime import date, time
from decimal import Decimal

import pynmea2
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from daemon.nmea0183.codec import checksum_hex
from tools.simulator import nmea_writer as nw
from tools.simulator import scenarios, simulate
from estimators.samples import (
    AirTemperature, ApparentWind, Attitude, Depth, Fix, Heading, Pressure, SeaTemperature, WaterSpeed, WaterWind,
)

T = scenarios.utc(2026, 5, 4, 6, 30, 15) + 0.25  # 06:30:15.25 UTC, 4 May 2026


def parse(line: str) -> pynmea2.NMEASentence:
    return pynmea2.parse(line, check=True)  # check=True: a missing or wrong checksum raises


def plain(value):
    """pynmea2 gives Decimals and zone-aware times: compare them as floats and naive times."""
    if isinstance(value, Decimal):
        return float(value)
    if isinstance(value, time) and value.tzinfo is not None:
        return value.replace(tzinfo=None)
    return value


FIX = Fix(T, -41.2345678, 172.8765432, 6.42, 135.7, 0.9)

# (sentence text, sentence type, {pynmea2 attribute: expected value})
ROUND_TRIP = [
    (nw.rmc(FIX, -9.5), "RMC", {"status": "A", "latitude": pytest.approx(-41.2345678, abs=1e-7),
                               "longitude": pytest.approx(172.8765432, abs=1e-7), "spd_over_grnd": 6.42,
                               "true_course": 135.7, "datestamp": date(2026, 5, 4), "mag_variation": "9.5",
                               "mag_var_dir": "W", "timestamp": time(6, 30, 15, 250000)}),
    (nw.rmc_void(T), "RMC", {"status": "V", "latitude": 0.0, "datestamp": date(2026, 5, 4)}),
    (nw.gga(FIX, 2.5), "GGA", {"gps_qual": 1, "latitude": pytest.approx(-41.2345678, abs=1e-7),
                               "horizontal_dil": "0.9", "altitude": 2.5, "timestamp": time(6, 30, 15, 250000)}),
    (nw.gga_void(T), "GGA", {"gps_qual": 0}),
    (nw.vtg(FIX), "VTG", {"true_track": 135.7, "spd_over_grnd_kts": 6.42,
                          "spd_over_grnd_kmph": pytest.approx(6.42 * 1.852, abs=0.005), "faa_mode": "A"}),
    (nw.zda(T), "ZDA", {"day": 4, "month": 5, "year": 2026, "timestamp": time(6, 30, 15, 250000)}),
    (nw.hdg(Heading(T, 3.0), -9.5), "HDG", {"heading": 12.5, "variation": 9.5, "var_dir": "W"}),
    (nw.hdg(Heading(T, 355.0), 7.0), "HDG", {"heading": 348.0, "variation": 7.0, "var_dir": "E"}),
    (nw.hdt(Heading(T, 359.97)), "HDT", {"heading": 0.0, "hdg_true": "T"}),
    (nw.hdm(Heading(T, 3.0), -9.5), "HDM", {"heading": 12.5, "magnetic": "M"}),
    (nw.vhw(WaterSpeed(T, 5.87)), "VHW", {"water_speed_knots": 5.87,
                                          "water_speed_km": pytest.approx(5.87 * 1.852, abs=0.005)}),
    (nw.mtw(SeaTemperature(T, 17.35)), "MTW", {"temperature": 17.35, "units": "C"}),
    (nw.mda(Pressure(T, 1013.2), AirTemperature(T, 14.2)), "MDA",
     {"b_pressure_bar": pytest.approx(1.0132), "b_pressure_inch": pytest.approx(1013.2 / 33.8638866667, abs=5e-5),
      "air_temp": 14.2}),
    (nw.xdr_pressure(Pressure(T, 1008.7)), "XDR", {"type": "P", "value": "1.00870", "units": "B", "id": "BARO"}),
    (nw.mwv(285.4, "R", 14.04), "MWV", {"wind_angle": 285.4, "reference": "R", "wind_speed": 14.0, "status": "A"}),
    (nw.mwv(-10.0, "T", 9.0), "MWV", {"wind_angle": 350.0, "reference": "T"}),
    (nw.dpt(Depth(T, 80.02), 0.5), "DPT", {"depth": 79.52, "offset": 0.5}),
    (nw.xdr_heel(Attitude(T, -12.3)), "XDR", {"type": "A", "value": "-12.3", "units": "D", "id": "HEEL"}),
]


@pytest.mark.parametrize("text,kind,expected", ROUND_TRIP, ids=[f"{r[1]}-{i}" for i, r in enumerate(ROUND_TRIP)])
def test_each_sentence_round_trips_through_pynmea2(text, kind, expected):
    # GIVEN a sentence the writer made; WHEN pynmea2 parses it with the checksum checked
    msg = parse(text)
    # THEN it is the right type, its checksum agrees with pynmea2's own, and every field reads back
    assert msg.sentence_type == kind
    body = text[1:text.index("*")]
    assert text[-2:] == f"{pynmea2.NMEASentence.checksum(body):02X}" == checksum_hex(body)
    for attr, value in expected.items():
        assert plain(getattr(msg, attr)) == value, attr


def test_sentences_obey_the_standard_frame():
    # NMEA 0183: '$', printable ASCII, at most 82 characters with <CR><LF>, '*hh' at the end
    for text, _, _ in ROUND_TRIP:
        assert text.startswith("$") and text[-3] == "*"
        assert len(text) + 2 <= 82
        assert all(32 <= ord(c) < 127 for c in text)


@settings(max_examples=200, deadline=None)
@given(st.floats(-89.999999, 89.999999), st.floats(-179.999999, 179.999999))
def test_positions_round_trip_to_a_centimetre(lat, lon):
    msg = parse(nw.rmc(Fix(T, lat, lon, 1.0, 10.0), 0.0))
    # five decimals of a minute: 1.852 cm at most (1e-5 min = 1e-5 nm)
    assert msg.latitude == pytest.approx(lat, abs=2e-7)
    assert msg.longitude == pytest.approx(lon, abs=2e-7)


def test_tag_block_checksum_and_milliseconds():
    tag = nw.tag_block(1777876215.25, "gnss")
    assert tag.startswith("\\c:1777876215250,s:gnss*") and tag.endswith("\\")
    body = tag[1:tag.index("*")]
    assert tag[-3:-1] == f"{pynmea2.NMEASentence.checksum(body):02X}"
    # the interface reads c: above 10^11 as milliseconds
    assert int(body.split(",")[0][2:]) > 10**11


@pytest.fixture(scope="module")
def short_run():
    # GIVEN twenty minutes of the demo's instruments, with a two-minute outage and a few spoiled lines
    s = scenarios.demo_passage(heading_hz=2.0)
    t0 = s.start_utc
    sensors = replace(s.sensors, gnss_outages=((t0 + 600.0, t0 + 720.0),))
    return simulate(replace(s, duration_s=1200.0, sensors=sensors), seed=8)


def _split(line: str) -> tuple[str, str]:
    if line.startswith("\\"):
        end = line.index("\\", 1)
        return line[1:end], line[end + 1:]
    return "", line


def test_every_line_of_a_run_parses_and_carries_a_valid_tag(short_run):
    lines = list(nw.run_lines(short_run, nw.WriterOptions(heading_sentences=("HDG", "HDT"),
                                                           pressure_sentences=("MDA", "XDR"))))
    kinds: dict[str, int] = {}
    last_c = 0
    for line in lines:
        tag, text = _split(line)
        body, cs = tag.rsplit("*", 1)
        assert cs == f"{pynmea2.NMEASentence.checksum(body):02X}"
        c = int(body.split(",")[0][2:])
        assert c >= last_c  # time order
        last_c = c
        msg = parse(text)
        kinds[msg.sentence_type] = kinds.get(msg.sentence_type, 0) + 1
    assert set(kinds) == {"RMC", "GGA", "VTG", "ZDA", "HDG", "HDT", "VHW", "MTW", "MDA", "XDR", "MWV", "DPT"}
    # one RMC and one GGA a second, fix or none; a heading sentence of each kind per heading sample
    assert kinds["RMC"] == kinds["GGA"] == pytest.approx(1201, abs=3)
    n_heading = len([s for s in short_run.samples if isinstance(s, Heading)])
    assert kinds["HDG"] == kinds["HDT"] == n_heading


def test_outage_seconds_send_void_rmc_and_no_position(short_run):
    t0 = short_run.scenario.start_utc
    voids = []
    for line in nw.run_lines(short_run):
        tag, text = _split(line)
        if "RMC" in text[:7]:
            msg = parse(text)
            c = int(tag.split(",")[0][2:]) / 1000.0
            if msg.status == "V":
                voids.append(c)
                assert msg.lat == "" and msg.lon == ""
    assert voids[0] == t0 + 600.0 and voids[-1] == t0 + 719.0 and len(voids) == 120


def test_headings_read_back_true_through_the_variation(short_run):
    # the daemon's true heading = HDG magnetic + variation: it must give back the sample to 0.1°
    var = short_run.variation_deg
    heads = [s for s in short_run.samples if isinstance(s, Heading)][:200]
    for h in heads:
        msg = parse(nw.hdg(h, var))
        sign = 1.0 if msg.var_dir == "E" else -1.0
        back = (float(msg.heading) + sign * float(msg.variation)) % 360.0
        assert abs((back - h.true_deg + 180.0) % 360.0 - 180.0) <= 0.1


def test_spoiled_lines_fail_exactly_as_intended(short_run):
    t0 = short_run.scenario.start_utc
    opt = nw.WriterOptions(tag_blocks=False, malformed=((t0 + 100.0, "bad_checksum"), (t0 + 200.0, "truncated"),
                                                          (t0 + 300.0, "garbage")))
    failed = []
    for line in nw.run_lines(short_run, opt):
        try:
            parse(line)
        except pynmea2.ParseError:  # ChecksumError is a ParseError
            failed.append(line)
    # THEN exactly three lines fail: one with a wrong checksum, one cut before it, one with noise in front
    assert len(failed) == 3
    bad_checksum, truncated, garbage = failed
    body, cs = bad_checksum[1:].rsplit("*", 1)
    assert cs != checksum_hex(body)
    assert "*" not in truncated and truncated.startswith("$")
    assert garbage.startswith("#")
    with pytest.raises(ValueError, match="unknown malformation"):
        list(nw.run_lines(short_run, nw.WriterOptions(malformed=((t0, "nonsense"),))))


def test_gzip_output_is_the_same_byte_for_byte(short_run, tmp_path):
    a, b = tmp_path / "a.nmea.gz", tmp_path / "b.nmea.gz"
    n = nw.write_nmea(short_run, a)
    nw.write_nmea(short_run, b)
    assert a.read_bytes() == b.read_bytes()
    text = gzip.decompress(a.read_bytes()).decode("ascii")
    assert text.count("\r\n") == n and text.endswith("\r\n")


def test_truth_csv_has_the_fields_and_iso_times(short_run, tmp_path):
    p = tmp_path / "t.csv"
    rows = nw.write_truth_csv(short_run, p, every_s=10.0)
    lines = p.read_text().splitlines()
    assert lines[0].split(",")[:4] == ["time_utc", "t_s", "lat", "lon"]
    assert len(lines) == rows + 1 == 122
    assert lines[1].startswith("2026-05-04T04:00:00.000Z,1777867200.0,")
