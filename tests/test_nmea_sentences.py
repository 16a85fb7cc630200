"""Sentence by sentence against the NMEA 0183 field layouts, checksums, TAG blocks, plausibility.

Layouts: NMEA 0183 v4.10 (field numbers counted from 1 after the address, as the
standard's tables do, and named so beside each check). The standard's text was
not at hand while writing these: the field layouts are from memory of v4.10,
and are confirmed in practice by the real device lines used beside them (from
the shared captures: their checksums are the devices' own). Details beyond the
layouts that are from memory say so.
"""

from __future__ import annotations

import datetime as dt
import math

import pytest

from daemon.intake.counters import Counters
from daemon.errors import ConfigError
from daemon.intake.ingest import Ingest
from daemon.nmea0183.codec import (
    LabelledHeading, Measured, Variation, extract, parse_line, parse_tag_block,
)
from daemon.core.readings import RawLine, Reading
from estimators.samples import (
    AirTemperature, ApparentWind, Attitude, Depth, Fix, GroundVelocity, Heading, Pressure,
    SeaTemperature, WaterSpeed, WaterWind,
)
from tests.helpers import StandInVariation, nmea_checksum as xor_hex, sentence as s


def values(sentence: str):
    line = parse_line(sentence)
    assert line.status == "ok", (sentence, line.status)
    return extract(line.key, line.fields)


def samples_of(*sentences: str, variation=None, heading_sensor="auto", counters=None):
    """Feed sentences through a live Ingest (time = receive time 1000 s); the samples it made."""
    counters = counters or Counters()
    ing = Ingest("nav", counters=counters, variation=variation or StandInVariation(), live=True,
                 heading_sensor=heading_sensor)
    data = "".join(x + "\r\n" for x in sentences).encode()
    items = ing.feed(data, 1000.0)
    counters.take(items)
    return [r.sample for r in items if isinstance(r, Reading)], counters


# --- checksums and framing of a sentence --------------------------------------------------------

@pytest.mark.parametrize("sentence", [
    # written by real devices (the checksum is the device's own), from the shared captures:
    "$APHDM,340.6,M*32",
    "$IIMTW,016,C*3A",
    "$GNTHS,244.28,A*11",
    "$GPRMC,190105.41,A,3747.772,N,12220.041,W,5.2,218.2,100520,013.2,E,D*20",
    # the GGA example printed in many NMEA references (from memory):
    "$GPGGA,123519,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,*47",
])
def test_device_checksums_verify(sentence):
    body, hh = sentence[1:].split("*")
    assert xor_hex(body) == hh  # the independent loop agrees with the device
    assert parse_line(sentence).status == "ok"


def test_checksum_hex_in_lower_case_is_accepted_and_a_wrong_one_is_not():
    # NMEA 0183 v4.10 §5.3.1: two hex characters; lower case is seen in the field (accepted).
    assert parse_line("$GNTHS,244.28,A*11".replace("*11", "*11".lower())).status == "ok"
    assert parse_line("$IIMTW,016,C*3a").status == "ok"
    assert parse_line("$IIMTW,016,C*3B").status == "bad_checksum"
    assert parse_line("$IIMTW,016,C*3").status == "bad_checksum"  # one digit
    assert parse_line("$IIMTW,016,C*").status == "bad_checksum"  # cut after the star
    assert parse_line("$IIMTW,016,C*3G").status == "bad_checksum"


def test_a_sentence_without_checksum_is_rejected_unless_the_source_allows_it():
    assert parse_line("$IIMTW,016,C").status == "no_checksum"
    line = parse_line("$IIMTW,016,C", allow_no_checksum=True)
    assert line.status == "ok" and line.key == "MTW" and line.fields == ["016", "C"]


@pytest.mark.parametrize("talker", ["GP", "GN", "II", "HC", "WI", "YX", "SD", "AP", "EC", "VW", "GA", "BD", "QZ"])
def test_any_talker_is_accepted(talker):
    line = parse_line(s(f"{talker}HDT,12.5,T"))
    assert (line.status, line.key, line.talker) == ("ok", "HDT", talker)


def test_proprietary_ais_unknown_and_non_sentences_are_sorted_into_their_counters():
    assert (parse_line(s("PGRME,15.0,M,45.0,M,25.0,M")).status, parse_line(s("PGRME,1")).key) == (
        "proprietary", "PGRME")
    ais = parse_line(  # a real AIS line from the gpsd corpus (ais-18-27)
        "!AIVDM,1,1,,A,B3KLehP0B@LTN6`Vl;rrBE063P06,0*5A")
    assert (ais.status, ais.key) == ("ais", "VDM")
    assert (parse_line(s("GPGSV,1,1,00")).status, parse_line(s("GPGSV,1,1,00")).key) == ("unknown", "GSV")
    assert parse_line("# Name: a receiver").status == "not_sentence"
    assert parse_line("** $SDDPT,,*57").status == "not_sentence"
    assert parse_line(s("gprmc,1")).status == "unparseable"  # lower-case address


# --- TAG blocks (NMEA 0183 v4.10 §7, from memory: code:value pairs, *hh over them) -----------

def test_tag_block_time_in_seconds_and_source():
    tag = "c:1577648032,s:GP01"
    line = parse_line(f"\\{tag}*{xor_hex(tag)}\\" + s("GPHDT,12.5,T"))
    assert (line.status, line.key, line.tag_time, line.tag_source) == ("ok", "HDT", 1577648032.0, "GP01")


def test_tag_block_time_in_milliseconds_above_1e11():
    # interface.md: c: is UNIX seconds, or milliseconds when larger than 10^11
    tag = "s:logger,c:1754284333420"
    assert parse_tag_block(f"{tag}*{xor_hex(tag)}") == ("ok", pytest.approx(1754284333.420), "logger")
    # just below the threshold it is seconds: year 5138, no logger's clock (estimators.limits.DATA_TIME_S)
    assert parse_tag_block("c:99999999999*" + xor_hex("c:99999999999"))[0] == "unparseable"


def test_tag_block_checksum_is_its_own():
    tag = "c:1577648032"
    bad = parse_line(f"\\{tag}*00\\" + s("GPHDT,12.5,T"))
    assert (bad.status, bad.key) == ("bad_checksum", "TAG")
    assert parse_line(f"\\{tag}\\" + s("GPHDT,12.5,T")).status == "no_checksum"
    assert parse_line(f"\\{tag}*{xor_hex(tag)}" + s("GPHDT,12.5,T")).status == "unparseable"  # no closing \


# --- position, course, time ----------------------------------------------------------------------

def test_rmc_fields_v410():
    ex = values("$GPRMC,190105.41,A,3747.772,N,12220.041,W,5.2,218.2,100520,013.2,E,D*20")
    kinds = {v.kind: v.args for v in ex.values if isinstance(v, Measured)}
    lat, lon, sog, cog, hdop = kinds[Fix]
    assert lat == pytest.approx(37 + 47.772 / 60)  # RMC fields 3-4: ddmm.mmm N
    assert lon == pytest.approx(-(122 + 20.041 / 60))  # fields 5-6: dddmm.mmm W is negative
    assert (sog, cog, hdop) == (5.2, 218.2, None)  # fields 7 (kn) and 8 (deg true)
    assert ex.tod_s == pytest.approx(19 * 3600 + 1 * 60 + 5.41)  # field 1 hhmmss.ss
    assert ex.day == (dt.date(2020, 5, 10) - dt.date(1970, 1, 1)).days  # field 9 ddmmyy
    assert Variation(13.2) in ex.values  # fields 10-11 variation 13.2 E, east positive


def test_rmc_status_v_and_mode_n_are_void_and_counted():
    # NMEA 0183 v4.10 RMC field 2 status V = void; field 12 mode indicator N = data not valid
    # (pynmea2's is_valid looks at the status only).
    body_a = "GPRMC,120000,A,3747.772,N,12220.041,W,5.2,218.2,100520,013.2,E,N,V"
    for body in (body_a, body_a.replace(",A,", ",V,", 1)):
        ex = values(s(body))
        assert ex.values == [] and ex.implausible == 1 and ex.tod_s is None


def test_rmc_empty_position_is_missing_not_zero():
    # pynmea2 gives 0.0, 0.0 for empty lat/lon; an empty field is no position at all.
    samples, counters = samples_of(s("GPRMC,120000,A,,,,,0.0,,100520,,,A"))
    assert samples == []
    assert counters.get("nav", "RMC", "good") == 1


def test_rmc_old_layout_without_mode_and_southern_eastern_hemispheres():
    ex = values(s("GPRMC,081836,A,3751.65,S,14507.36,E,000.0,360.0,130998,011.3,E"))
    fix = next(v.args for v in ex.values if isinstance(v, Measured))
    assert fix[0] == pytest.approx(-(37 + 51.65 / 60)) and fix[1] == pytest.approx(145 + 7.36 / 60)
    assert fix[3] == 0.0  # COG 360.0 is north, kept as 0
    assert ex.day == (dt.date(1998, 9, 13) - dt.date(1970, 1, 1)).days  # yy 98 -> 1998 (pivot 80, from memory)


def test_gga_fields_and_fix_quality():
    # NMEA 0183 v4.10 GGA: field 6 quality (0 invalid, 1 GPS, 2 DGPS, ..., 6 estimated), field 8 HDOP
    ex = values("$GPGGA,123519,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,*47")
    fix = next(v.args for v in ex.values if isinstance(v, Measured))
    assert fix[0] == pytest.approx(48 + 7.038 / 60) and fix[1] == pytest.approx(11 + 31.0 / 60)
    assert fix[4] == 0.9 and ex.tod_s == 12 * 3600 + 35 * 60 + 19 and ex.day is None
    for quality in ("0", "6", ""):
        void = values(s(f"GPGGA,123519,4807.038,N,01131.000,E,{quality},08,0.9,545.4,M,46.9,M,,"))
        assert void.values == [] and void.implausible == 1 and void.tod_s is None


def test_gll_new_and_old_layouts():
    # v4.10 GLL: 1-2 lat, 3-4 lon, 5 time, 6 status, 7 mode; v1.5 had only the position
    new = values(s("GPGLL,3747.772,N,12220.041,W,190105.41,A,D"))
    assert new.tod_s == pytest.approx(68465.41) and new.values[0].kind is Fix
    old = values(s("GPGLL,3747.772,N,12220.041,W"))
    assert old.tod_s is None and old.values[0].args[:2] == new.values[0].args[:2]
    assert values(s("GPGLL,3747.772,N,12220.041,W,190105.41,V,N")).implausible == 1


def test_vtg_layouts():
    # v4.10 VTG: 1 COG true, 3 COG magnetic, 5 SOG kn, 7 SOG km/h, 9 mode
    ex = values("$GPVTG,218.2,T,205.0,M,5.2,N,9.6,K,D*20")
    assert ex.values == [Measured(GroundVelocity, (5.2, 218.2))]
    kmh_only = values(s("GPVTG,218.2,T,,M,,N,9.63,K,A"))
    assert kmh_only.values[0].args[0] == pytest.approx(9.63 / 1.852)
    no_course = values("$IIVTG,,T,312,M,0.0,N,,*0C")  # a real instrument's, empty true course
    assert no_course.values == [Measured(GroundVelocity, (0.0, None))]
    old = values(s("GPVTG,054.7,034.4,005.5,010.2"))  # pre-2.0 layout without unit letters (from memory)
    assert old.values == [Measured(GroundVelocity, (5.5, 54.7))]


def test_zda_date_and_empty_zone():
    ex = values("$GPZDA,190105.66,10,05,2020,,*6E")  # real, with empty local-zone fields 5-6
    assert ex.tod_s == pytest.approx(68465.66)
    assert ex.day == (dt.date(2020, 5, 10) - dt.date(1970, 1, 1)).days


# --- heading -------------------------------------------------------------------------------------

def test_hdt_and_ths_are_true():
    samples, _ = samples_of("$APHDT,340.5,T*31", "$GNTHS,244.28,A*11")
    assert samples == [Heading(1000.0, 340.5), Heading(1000.0, 244.28)]


def test_ths_mode_other_than_autonomous_or_estimated_is_dropped():
    # v4.10 THS field 2: A autonomous, E estimated, M manual, S simulator, V not valid
    samples, counters = samples_of(s("GNTHS,10.0,E"), s("GNTHS,11.0,V"), s("GNTHS,12.0,S"))
    assert samples == [Heading(1000.0, 10.0)]
    assert counters.get("nav", "THS", "implausible") == 2


def test_hdm_needs_a_variation_else_counted_and_dropped():
    samples, counters = samples_of("$APHDM,340.6,M*32")
    assert samples == [] and counters.get("nav", "HDM", "no_variation") == 1
    samples, _ = samples_of("$APHDM,340.6,M*32", variation=StandInVariation(13.0))
    assert samples[0].true_deg == pytest.approx(353.6)


def test_hdg_applies_its_deviation_and_gives_its_variation_to_the_provider():
    # v4.10 HDG: 1 sensor heading, 2-3 deviation E/W, 4-5 variation E/W (east positive, from memory)
    var = StandInVariation()
    samples, _ = samples_of(s("HCHDG,350.0,2.0,W,13.0,E"), variation=var)
    assert var.noted == [(13.0, 1000.0)]
    assert samples == [Heading(1000.0, pytest.approx(1.0))]  # 350 - 2 + 13 = 361 -> 1


def test_the_real_autopilot_hdg_agrees_with_its_hdt():
    # Consecutive real lines (two-receiver capture): HDG 220.9 with variation 13.0 E, then HDT 233.5,
    # sampled a moment apart: 220.9 + 13.0 = 233.9, within half a degree of the HDT.
    var = StandInVariation()
    samples, _ = samples_of("$APHDG,220.9,,,13.0,E*08", "$APHDT,233.5,T*34", variation=var)
    assert samples[0].true_deg == pytest.approx(233.9) and samples[1].true_deg == 233.5
    assert var.noted == [(13.0, 1000.0)]


def test_heading_sensor_true_takes_magnetic_labelled_sentences_as_true():
    var = StandInVariation(13.0)
    samples, _ = samples_of(s("GPHDG,100.0,2.0,E,5.0,W"), "$APHDM,340.6,M*32", variation=var, heading_sensor="true")
    assert samples == [Heading(1000.0, 100.0), Heading(1000.0, 340.6)]
    assert var.noted == []  # a compass that relabels its sentences is no variation source


def test_heading_sensor_magnetic_converts_hdt_too():
    samples, _ = samples_of("$APHDT,340.5,T*31", variation=StandInVariation(13.0), heading_sensor="magnetic")
    assert samples[0].true_deg == pytest.approx(353.5)


def test_unknown_heading_sensor_setting_names_the_key():
    with pytest.raises(ConfigError, match="heading_sensor"):
        Ingest("nav", counters=Counters(), variation=StandInVariation(), live=True, heading_sensor="gyro")


# --- water speed, temperature, pressure -----------------------------------------------------------

def test_vhw_real_dead_log_reads_zero_and_the_t_k_less_layout():
    # v4.10 VHW: 1 heading true, 3 heading magnetic, 5 STW kn, 7 STW km/h
    assert values("$VWVHW,233.7,T,220.5,M,0.00,N,0.0,K*64").values == [Measured(WaterSpeed, (0.0,))]
    assert values("$IIVHW,,,347,M,0.00,N,,*64").values == [Measured(WaterSpeed, (0.0,))]
    kmh = values(s("IIVHW,,T,,M,,N,11.112,K")).values[0].args[0]
    assert kmh == pytest.approx(6.0)  # 11.112 km/h / 1.852 = 6 kn exactly


def test_vbw_longitudinal_water_speed_when_valid():
    # v4.10 VBW: 1 longitudinal water speed, 2 transverse, 3 status, 4-6 ground speeds and status
    assert values(s("IIVBW,5.5,0.1,A,5.9,0.2,A")).values == [Measured(WaterSpeed, (5.5,))]
    assert values(s("IIVBW,5.5,0.1,V,5.9,0.2,A")).implausible == 1


def test_mtw_integer_with_leading_zero():
    assert values("$IIMTW,016,C*3A").values == [Measured(SeaTemperature, (16.0,))]


def test_mda_pressure_bar_air_and_water_temperature():
    # v4.10 MDA: 1-2 inHg I, 3-4 bar B, 5-6 air C, 7-8 water C, ... (real berth capture line)
    ex = values("$WIMDA,29.9345,I,1.0137,B,18.9,C,,,,,,,225.0,T,210.3,M,5.1,N,2.6,M*2B")
    assert Measured(Pressure, (pytest.approx(1013.7),)) in ex.values
    assert Measured(AirTemperature, (18.9,)) in ex.values
    assert len(ex.values) == 2  # no water temperature given
    inhg_only = values(s("WIMDA,29.92,I,,,,,15.5,C")).values
    # 29.92 inHg = 1013.2 hPa (the standard atmosphere, from memory)
    assert inhg_only == [Measured(Pressure, (pytest.approx(1013.2, abs=0.05),)), Measured(SeaTemperature, (15.5,))]


def test_xdr_pressure_temperature_and_attitude():
    # v4.10 XDR: groups of type, value, unit, name. P bar/pascal, C celsius, A degrees (from memory).
    ex = values(s("IIXDR,P,1.0132,B,Barometer,C,21.5,C,AirTemp,C,17.0,C,WaterTemp"))
    assert ex.values == [Measured(Pressure, (pytest.approx(1013.2),)), Measured(AirTemperature, (21.5,)),
                         Measured(SeaTemperature, (17.0,))]
    assert values(s("IIXDR,P,101320,P,BARO")).values == [Measured(Pressure, (pytest.approx(1013.2),))]
    assert values(s("YXXDR,A,-5.2,D,ROLL,A,1.5,D,PITCH")).values == [Measured(Attitude, (-5.2, 1.5))]


def test_real_compass_xdr_with_impossible_pitch():
    # From the gpsd corpus (tnt-revolution): pitch 171 deg cannot be a boat's: dropped, roll kept.
    ex = values("$HCXDR,A,171,D,PITCH,A,-37,D,ROLL,G,367,,MAGX,G,2420,,MAGY,G,-8984,,MAGZ*41")
    assert ex.values == [Measured(Attitude, (-37.0, None))] and ex.implausible == 1


# --- wind, depth ---------------------------------------------------------------------------------

def test_mwv_relative_is_apparent_wind_and_units_convert():
    # v4.10 MWV: 1 angle, 2 R/T, 3 speed, 4 unit K/M/N/S, 5 status
    assert values("$WIMWV,19.9,R,5.2,N,A*15").values == [Measured(ApparentWind, (19.9, 5.2))]
    mps = values(s("WIMWV,90,R,10.0,M,A")).values[0].args[1]
    assert mps == pytest.approx(19.438, abs=1e-3)  # 10 m/s x 3600 / 1852
    assert values(s("WIMWV,90,R,10.0,N,V")).implausible == 1


def test_mwv_theoretical_becomes_a_direction_with_the_latest_true_heading():
    samples, _ = samples_of(s("IIMWV,30.0,T,12.0,N,A"))
    assert samples == [WaterWind(1000.0, 12.0, None, 30.0)]
    samples, _ = samples_of("$APHDT,340.5,T*31", s("IIMWV,30.0,T,12.0,N,A"))
    assert samples[1] == WaterWind(1000.0, 12.0, pytest.approx(10.5), 30.0)


def test_mwd_true_and_magnetic_only():
    # v4.10 MWD: 1 from true, 3 from magnetic, 5 kn, 7 m/s
    assert values(s("IIMWD,258.0,T,245.0,M,24.6,N,12.6,M")).values == [Measured(WaterWind, (24.6, 258.0, None))]
    samples, counters = samples_of("$IIMWD,,T,258,M,24.6,N,12.6,M*7E")  # real: true left empty
    assert samples == [] and counters.get("nav", "MWD", "no_variation") == 1
    samples, _ = samples_of("$IIMWD,,T,258,M,24.6,N,12.6,M*7E", variation=StandInVariation(-10.0))
    assert samples == [WaterWind(1000.0, 24.6, 248.0, None)]


def test_dbt_and_dpt_offsets():
    # v4.10 DBT: 1-2 feet, 3-4 metres, 5-6 fathoms; DPT: 1 depth m, 2 offset (+ to waterline)
    assert values("$APDBT,9.2,f,2.8,M,1.5,F*05").values == [Measured(Depth, (2.8,))]
    assert values(s("SDDBT,10.0,f,,M,,F")).values == [Measured(Depth, (pytest.approx(3.048),))]
    assert values(s("SDDPT,2.5,0.4")).values == [Measured(Depth, (pytest.approx(2.9),))]
    assert values("$GPDPT,2.8,-0.8*78").values == [Measured(Depth, (2.8,))]  # keel offset: not added
    assert values("$SDDPT,2.5,*7E").values == [Measured(Depth, (2.5,))]
    assert values(s("SDDPT,,")).values == []


# --- plausibility ---------------------------------------------------------------------------------

@pytest.mark.parametrize("sentence", [
    s("GPRMC,120000,A,9130.000,N,00100.000,E,5.0,10.0,100520,,"),  # latitude 91.5
    s("GPRMC,120000,A,4530.000,N,18100.000,E,5.0,10.0,100520,,"),  # longitude 181
    s("GPRMC,120000,A,4530.000,N,00100.000,E,60.0,10.0,100520,,"),  # SOG 60 kn
    s("GPVTG,10.0,T,,M,nan,N,,K,A"),
    s("IIVHW,,T,,M,40.0,N,,K"),  # STW 40 kn
    s("IIVHW,,T,,M,inf,N,,K"),
    s("WIMDA,,I,0.869,B"),  # 869 hPa
    s("WIMDA,,I,1.086,B"),  # 1086 hPa
    s("IIMTW,40.1,C"),
    s("IIMTW,-3.1,C"),
    s("IIXDR,C,-60.5,C,AIR"),
    s("IIXDR,C,60.5,C,AIR"),
    s("APHDT,360.1,T"),
    s("APHDT,-0.1,T"),
    s("SDDBT,,f,-0.5,M,,F"),
    s("SDDPT,NaN,"),
])
def test_implausible_values_are_counted_and_dropped(sentence):
    ex = values(sentence)
    assert ex.implausible == 1 and not [v for v in ex.values if isinstance(v, (Measured, LabelledHeading))]


def test_plausible_edges_pass():
    assert values(s("WIMDA,,I,0.870,B")).values[0].args[0] == pytest.approx(870.0)
    assert values(s("IIMTW,-3.0,C")).values == [Measured(SeaTemperature, (-3.0,))]
    assert values(s("APHDT,360.0,T")).values == [LabelledHeading(0.0, "T")]
    assert values(s("SDDPT,0.0,")).values == [Measured(Depth, (0.0,))]


def test_unparseable_fields():
    for sentence in (s("GPRMC,120000,A,45x0.000,N,00100.000,E,5.0,10.0,100520,,"),
                     s("GPRMC,120000,A,4560.000,N,00100.000,E,5.0,10.0,100520,,"),  # 60 minutes
                     s("GPRMC,120000,A,4530.000,Q,00100.000,E,5.0,10.0,100520,,"),  # hemisphere Q
                     s("GPRMC,250000,A,4530.000,N,00100.000,E,5.0,10.0,100520,,"),  # hour 25
                     s("GPRMC,120000,A,4530.000,N,00100.000,E,5.0,10.0,310220,,"),  # 31 Feb
                     s("WIMWV,10,R,5.0,X,A")):
        line = parse_line(sentence)
        assert extract(line.key, line.fields) is None, sentence


def test_counters_per_source_and_type_in_the_snapshot():
    counters = Counters()
    samples_of("$APHDT,340.5,T*31", "$APHDT,340.5,T*30", "$APHDM,340.6,M*32", s("PGRME,1"),
               "!AIVDM,1,1,,A,B3KLehP0B@LTN6`Vl;rrBE063P06,0*5A", counters=counters)
    snap = counters.snapshot()["nav"]
    assert snap["sentences"]["HDT"]["good"] == 1 and snap["sentences"]["HDT"]["bad_checksum"] == 1
    assert snap["sentences"]["HDT"]["last_seen"] == 1000.0
    assert snap["sentences"]["HDM"]["no_variation"] == 1
    assert snap["sentences"]["PGRME"]["proprietary"] == 1 and snap["sentences"]["VDM"]["ais"] == 1
    assert list(snap["sentences"]) == sorted(snap["sentences"])
    assert snap["totals"]["good"] == 2  # HDT and HDM were well-formed
    assert snap["framer"] == {"bad_bytes": 0, "overlong": 0}


def test_live_readings_keep_the_sentences_own_gnss_time():
    ing = Ingest("gnss", counters=Counters(), variation=StandInVariation(), live=True)
    out = ing.feed(b"$GPRMC,190105.41,A,3747.772,N,12220.041,W,5.2,218.2,100520,013.2,E,D*20\r\n", 1589137300.0)
    raw, reading = out
    assert isinstance(raw, RawLine) and raw.t_s == 1589137300.0
    assert reading.sample.t_s == 1589137300.0  # live: data time is the receive time
    gnss = dt.datetime(2020, 5, 10, 19, 1, 5, 410000, tzinfo=dt.timezone.utc).timestamp()
    assert reading.gnss_utc == pytest.approx(gnss)
    assert math.isclose(reading.recv_utc, 1589137300.0)
    with pytest.raises(ValueError):
        ing.feed(b"$APHDT,340.5,T*31\r\n", None)


def test_real_receiver_quirks_from_the_gpsd_corpus():
    # motorola-t805: a void RMC with 89 deg 60' (junk) is void, not unparseable
    void = values("$GPRMC,071733.929,V,8960.0000,N,00000.0000,E,0.00,0.00,111111,,,N*72")
    assert void.implausible == 1 and void.values == []
    # motorola-t805: variation "0" without its E/W: the fix is kept, no variation noted
    ex = values("$GPRMC,212614.879,A,4839.9488,N,00214.8863,E,0.56,344.41,181207,0,A*77")
    assert [v.kind for v in ex.values] == [Fix]
    # blumax-gps009: a proprietary text with spaces in its "address" is still proprietary
    line = parse_line("$PSRFTXTBaud rate: 57600 *51")
    assert (line.status, line.key) == ("proprietary", "PSRF")


def test_fields_a_talker_leaves_off_read_as_empty_ones():
    # A talker may stop after its last field with data (older layouts, an instrument that does not
    # measure the rest; common practice in real devices): what is left off reads as empty fields
    for key, fields in (("RMC", "040000.00,A,4112.00131,N,03229.99806,W,5.61,141.7,040526,9.5,W,A"),
                        ("GGA", "040000.00,4112.00131,N,03229.99806,W,1,09,0.9,2.5,M,,M,,"),
                        ("HDG", "147.6,1.5,E,9.5,W"), ("MWV", "285.4,R,14.0,N,A"),
                        ("MDA", "30.0349,I,1.0171,B,14.0,C,15.1,C"), ("DBT", "261.0,f,79.5,M,43.5,F")):
        full = fields.split(",")
        for n in range(len(full) + 1):
            short = extract(key, full[:n])
            padded = extract(key, full[:n] + [""] * (len(full) - n))
            assert (short is None) == (padded is None), (key, n)
            if short is not None:
                assert (repr(short.values), short.implausible, short.tod_s) == (
                    repr(padded.values), padded.implausible, padded.tod_s), (key, n)
