"""Every real capture through Ingest: no exception, time never backwards, counts checked independently.

The expected numbers come from two places outside daemon/: the captures'
description (real-captures/SOURCES.md: sentence counts per type, dates, ranges)
and small independent counts over the raw bytes made here (a regex and a plain
XOR loop), so a change in the framer or the parser that loses or invents a line
fails here.
"""

from __future__ import annotations

import calendar
import datetime as dt
import re
import statistics
from collections import Counter
from functools import lru_cache
from pathlib import Path

import pytest
from geographiclib.geodesic import Geodesic

from daemon.intake.counters import SENTENCE_COUNTS, Counters
from daemon.intake.ingest import Ingest
from daemon.core.readings import RawLine, Reading
from estimators.samples import Depth, Fix, Pressure, SeaTemperature, WaterSpeed
from tests.shared import SHARED, shared_path
from tests.helpers import StandInVariation

CAPTURES = "real-captures"
LINE_COUNTS = ("good", "bad_checksum", "no_checksum", "unparseable", "unknown", "proprietary", "ais", "not_sentence")


def capture_names() -> list[str]:
    root = SHARED / CAPTURES
    if not root.exists():
        return ["(absent)"]
    files = [p for p in root.rglob("*") if p.is_file() and p.suffix in (".nmea", ".log")]
    return sorted(str(p.relative_to(root)) for p in files)


@lru_cache(maxsize=None)
def run(name: str, not_before_utc: float | None = None):
    """(items, counters, ingest) of one capture replayed in one feed."""
    path = shared_path(CAPTURES, *Path(name).parts)
    counters = Counters()
    ing = Ingest("cap", counters=counters, variation=StandInVariation(), live=False, not_before_utc=not_before_utc)
    items = ing.feed(path.read_bytes(), None) + ing.flush()
    counters.take(items)
    return items, counters, ing


def item_time(x: RawLine | Reading) -> float:
    return x.t_s if isinstance(x, RawLine) else x.sample.t_s


# --- independent counts over the raw bytes ---------------------------------------------------------

def physical_lines(name: str) -> list[bytes]:
    data = shared_path(CAPTURES, *Path(name).parts).read_bytes()
    return [x for x in re.split(rb"\r\n|\r|\n", data) if x]


def has_bad_byte(line: bytes) -> bool:
    return any(b < 0x20 or b > 0x7E for b in line)


def xor(data: bytes) -> int:
    x = 0
    for b in data:
        x ^= b
    return x


def independent_checksum_counts(name: str) -> Counter:
    """Over the clean (printable ASCII) lines: checksum right, wrong, or missing."""
    c: Counter = Counter()
    for line in physical_lines(name):
        if has_bad_byte(line):
            continue
        m = re.fullmatch(rb"(?:\\[^\\]*\\)?[$!]([^*]*)(\*(.*))?", line)
        if m is None:
            continue
        body, star, hh = m.group(1), m.group(2), m.group(3)
        if star is None:
            c["no_checksum"] += 1
        elif re.fullmatch(rb"[0-9A-Fa-f]{2}", hh) and xor(body) == int(hh, 16):
            c["ok"] += 1
        else:
            c["bad_checksum"] += 1
    return c


def independent_type_counts(name: str) -> Counter:
    """Sentence formatters of clean, correctly checksummed lines (talker stripped).

    A NUL run glued to the front of a line (the start of some captures) is stripped first.
    """
    c: Counter = Counter()
    for line in physical_lines(name):
        line = line.lstrip(b"\x00")
        m = re.fullmatch(rb"\$([A-Z]{2})([A-Z]{3}),([^*]*)\*([0-9A-F]{2})", line)
        if m and xor(line[1:line.rindex(b"*")]) == int(m.group(4), 16):
            c[m.group(2).decode()] += 1
    return c


def utc(*args: int) -> float:
    return float(calendar.timegm(dt.datetime(*args).timetuple()))


# --- every capture ---------------------------------------------------------------------------------

@pytest.mark.parametrize("name", capture_names())
def test_every_capture_replays_with_sensible_counters(name):
    items, counters, ing = run(name)
    raws = [x for x in items if isinstance(x, RawLine)]
    # time never goes backwards in the output
    t = [item_time(x) for x in items]
    assert all(a <= b for a, b in zip(t, t[1:]))
    # every framed line is counted exactly once as what it was
    snap = counters.snapshot()["cap"]
    assert sum(snap["totals"][k] for k in LINE_COUNTS) == len(raws)
    assert set(snap["totals"]) == set(SENTENCE_COUNTS)
    # framer drops: at least one per line with a bad byte (more where it resynced inside one)
    bad_lines = sum(has_bad_byte(x) for x in physical_lines(name))
    assert snap["framer"]["bad_bytes"] >= bad_lines
    if bad_lines == 0:
        assert snap["framer"]["bad_bytes"] == 0
        clean = independent_checksum_counts(name)
        # on clean files the checksum verdicts agree line for line with the independent loop
        assert snap["totals"]["bad_checksum"] == clean["bad_checksum"]
        assert snap["totals"]["no_checksum"] == clean["no_checksum"]
    # readings only from good sentences; none of them out of its plausible range
    readings = [x for x in items if isinstance(x, Reading)]
    assert all(counters.get("cap", r.sentence, "good") > 0 for r in readings)


def test_gpsd_corpus_bad_checksums_all_counted():
    shared_path(CAPTURES, "robustness", "gpsd")  # skips without ../shared (fails under CI)
    names = [n for n in capture_names() if n.startswith("robustness/gpsd/")]
    mine = independent = 0
    for name in names:
        counters = run(name)[1]
        got = counters.total("cap", "bad_checksum")
        want = independent_checksum_counts(name)["bad_checksum"]
        resynced = counters.framer("cap")["bad_bytes"] > sum(has_bad_byte(x) for x in physical_lines(name))
        if resynced:  # binary mixed in: a "$" inside it starts a fragment that fails its checksum too
            assert got >= want, name
        else:
            assert got == want, name
        mine += got
        independent += want
    # SOURCES.md counts 112 bad checksums in the corpus; the independent loop over clean lines finds
    # 115 (it also counts a "*" with one or no digit), all of them counted by the ingest
    assert independent == 115
    assert mine >= independent


# --- the long passage: throughput case, repeated time stamps ----------------------------------------

UNDER_WAY = "under-way-94min-hdg-hdt-rmc.nmea"


def test_under_way_counts_match_the_description_and_the_file():
    items, counters, _ = run(UNDER_WAY)
    # SOURCES.md: GPVTG 10046, APRSA 5141, APHDG 5082, APHDM 5082, APHDT 5047, GPRMC 5023,
    # GPGLL 5022, ECBWC 2276, 42 719 in all, no bad checksums, starts with 248 NUL bytes
    described = {"VTG": 10046, "HDG": 5082, "HDM": 5082, "HDT": 5047, "RMC": 5023, "GLL": 5022}
    independent = independent_type_counts(UNDER_WAY)
    for key, n in described.items():
        assert counters.get("cap", key, "good") == n == independent[key]
    assert counters.get("cap", "RSA", "unknown") == 5141 and counters.get("cap", "BWC", "unknown") == 2276
    assert sum(isinstance(x, RawLine) for x in items) == 42719
    assert counters.framer("cap") == {"bad_bytes": 1, "overlong": 0}
    assert counters.total("cap", "bad_checksum") == 0


def test_under_way_time_comes_from_arrival_order_and_replays_at_sog():
    items, counters, ing = run(UNDER_WAY)
    fixes = [r for r in items if isinstance(r, Reading) and isinstance(r.sample, Fix) and r.sentence == "RMC"]
    t = [f.sample.t_s for f in fixes]
    # SOURCES.md: 2019-12-29 19:34:30 - 21:08:50 UTC
    assert t[0] == utc(2019, 12, 29, 19, 34, 30)
    assert utc(2019, 12, 29, 21, 8, 50) <= t[-1] <= utc(2019, 12, 29, 21, 9, 0)
    # the RMC time field repeats for 10 s; output times are strictly increasing all the same
    assert all(a < b for a, b in zip(t, t[1:]))
    # GIVEN 60-s windows while under way on a steady course
    # THEN the distance made good over the window (geographiclib, WGS84) over its replayed
    # duration equals the mean SOG the receiver reported
    geod = Geodesic.WGS84
    ratios = []
    i = 0
    while i < len(fixes):
        j = i
        while j + 1 < len(fixes) and fixes[j + 1].sample.t_s - fixes[i].sample.t_s <= 60.0:
            j += 1
        win = [f.sample for f in fixes[i:j + 1]]
        if len(win) > 20:
            sogs = [w.sog_kn for w in win]
            cogs = [w.cog_deg for w in win]
            steady = max(cogs) - min(cogs) < 20.0
            if min(sogs) > 3.0 and steady:
                g = geod.Inverse(win[0].lat_deg, win[0].lon_deg, win[-1].lat_deg, win[-1].lon_deg)
                speed_kn = g["s12"] / (win[-1].t_s - win[0].t_s) * 3600 / 1852
                ratios.append(speed_kn / statistics.mean(sogs))
        i = j + 1
    assert len(ratios) > 20
    assert statistics.median(ratios) == pytest.approx(1.0, abs=0.05)


# --- the berth: week rollover, garbage, pressure --------------------------------------------------

BERTH = "berth-13min-mda-pressure.nmea"
BERTH_FILE_EPOCH = 1754284333.420  # the logger's epoch-ms in the original file name (SOURCES.md)


def test_berth_garbage_and_checksums():
    items, counters, _ = run(BERTH)
    # 17 physical lines carry U+FFFD/control bytes (counted here from the bytes); each is dropped once
    assert sum(has_bad_byte(x) for x in physical_lines(BERTH)) == 17
    assert counters.framer("cap")["bad_bytes"] == 17
    # the one clean line with a wrong checksum field: the last one, cut after "*". SOURCES.md's
    # "2 bad checksums, 2 without" are lines spliced with garbage: the framer drops those first.
    assert independent_checksum_counts(BERTH)["bad_checksum"] == 1
    assert counters.get("cap", "MWV", "bad_checksum") == 1 and counters.total("cap", "bad_checksum") == 1
    # SOURCES.md: PSMDCN 3554 and PFEC 162 proprietary
    assert counters.total("cap", "proprietary") == 3554 + 162


def test_berth_week_rollover_with_the_files_epoch_as_reference():
    # SOURCES.md: the GNSS says 19 Dec 2005, exactly 1024 weeks before the file's 2025-08-04
    items, counters, ing = run(BERTH, BERTH_FILE_EPOCH)
    assert ing.time_events["week_rollover"] == 1
    t = [item_time(x) for x in items]
    assert utc(2025, 8, 4, 5, 12, 14) <= t[0] and t[-1] <= utc(2025, 8, 4, 5, 25, 32)
    # the APGLL stuck at 04:59:59 (SOURCES.md) never moves the clock: counted as outliers
    assert ing.time_events["outlier"] == counters.get("cap", "GLL", "good") == independent_type_counts(BERTH)["GLL"]
    # without a reference the receiver's date stands (the rule needs one; see daemon/intake/timing.py)
    first, _, plain = run(BERTH)
    assert "week_rollover" not in plain.time_events and item_time(first[0]) < utc(2006, 1, 1)


def test_berth_mda_pressure_and_range():
    items, counters, _ = run(BERTH)
    hpa = [r.sample.station_hpa for r in items if isinstance(r, Reading) and isinstance(r.sample, Pressure)]
    # SOURCES.md: WIMDA 453, pressure 1.0129-1.0141 bar
    assert len(hpa) == counters.get("cap", "MDA", "good") == independent_type_counts(BERTH)["MDA"]
    assert len(hpa) >= 450
    assert min(hpa) == pytest.approx(1012.9) and max(hpa) == pytest.approx(1014.1)


# --- two receivers, dead log, garbage, truncated ----------------------------------------------------

TWO_GPS = "robustness/nmea-reader/two-gps-dead-log-garbage-truncated.nmea"


def test_two_gps_counts():
    items, counters, ing = run(TWO_GPS)
    # six physical lines with NUL/U+FFFD bytes (two NUL runs, four of serial garbage)
    assert sum(has_bad_byte(x) for x in physical_lines(TWO_GPS)) == 6 == counters.framer("cap")["bad_bytes"]
    # one clean line with a wrong checksum (a GLL spliced into an RMC), two without one: an RMC cut
    # short, and the file's last line, cut at 24 KiB. SOURCES.md's second bad checksum is a GGA
    # behind serial garbage: dropped by the framer.
    clean = independent_checksum_counts(TWO_GPS)
    assert (clean["bad_checksum"], clean["no_checksum"]) == (1, 2)
    assert counters.total("cap", "bad_checksum") == 1 and counters.total("cap", "no_checksum") == 2


def test_two_gps_dead_log_reads_zero_through_the_water():
    items, counters, _ = run(TWO_GPS)
    stw = [r.sample.speed_kn for r in items if isinstance(r, Reading) and isinstance(r.sample, WaterSpeed)]
    assert stw == [0.0] * 26  # SOURCES.md: 26 VWVHW, all 0.00 kn while SOG is 5 kn
    temps = [r.sample.temp_c for r in items if isinstance(r, Reading) and isinstance(r.sample, SeaTemperature)]
    assert len(temps) == 26 and min(temps) == 18.5 and max(temps) == 20.0  # SOURCES.md: 18.5-20.0 C


def test_two_gps_time_runs_forward_through_both_receivers_and_both_pieces():
    items, counters, ing = run(TWO_GPS)
    t = [item_time(x) for x in items]
    assert all(a <= b for a, b in zip(t, t[1:]))
    ev = ing.time_events
    # the receiver with its time stuck on 10-s steps is behind the other: its lines join the other's fix
    assert ev["behind"] > 50
    # the jump from 19:01:51 to 21:23:40 (SOURCES.md) is one new segment, real time kept
    assert ev["segment"] == 1
    assert t[0] >= utc(2020, 5, 10, 19, 1, 0) and utc(2020, 5, 10, 21, 23, 40) <= t[-1] <= utc(2020, 5, 10, 21, 24, 0)
    first_piece = [x for x in t if x < utc(2020, 5, 10, 20, 0, 0)]
    assert max(first_piece) <= utc(2020, 5, 10, 19, 1, 55)  # not smeared across the gap


# --- survey, instrument cycles, handheld -----------------------------------------------------------

SOUNDER = "sounder-survey-43min-dpt-mtw.nmea"


def test_sounder_survey_depths_temperatures_and_markers():
    items, counters, _ = run(SOUNDER)
    # SOURCES.md: exactly 10 000 lines; a comment first; five "** $SDDPT,,*57" marker lines
    assert sum(isinstance(x, RawLine) for x in items) == 10000
    assert counters.total("cap", "not_sentence") == 6
    temps = [r.sample.temp_c for r in items if isinstance(r, Reading) and isinstance(r.sample, SeaTemperature)]
    assert len(temps) == 1249 and 20.5 <= min(temps) and max(temps) <= 21.5  # SDMTW 1249, 20.5-21.5 C
    depths = [r.sample.depth_m for r in items if isinstance(r, Reading) and isinstance(r.sample, Depth)]
    # SDDPT 1255, 10 empty (five of them behind the marker): 1245 depths, 0.49-40.3 m
    assert len(depths) == 1245 and min(depths) == pytest.approx(0.49) and max(depths) == pytest.approx(40.3)
    assert counters.get("cap", "DPT", "empty") == 5
    assert counters.total("cap", "proprietary") == 3 * 1249  # PGRME, PGRMZ, PGRMM


def test_instrument_cycles_without_any_time():
    name = "robustness/marine-api/instrument-cycles-at-berth.nmea"
    items, counters, ing = run(name)
    assert sum(isinstance(x, RawLine) for x in items) == 44  # the last line has no line ending
    assert ing.time_events["untimed"] == 44
    temps = [r.sample.temp_c for r in items if isinstance(r, Reading) and isinstance(r.sample, SeaTemperature)]
    assert temps == [16.0] * 3  # "016" (SOURCES.md)
    # HDM and MWD (magnetic only) with no variation anywhere in the file: 3 cycles each
    assert counters.get("cap", "HDM", "no_variation") == 3 and counters.get("cap", "MWD", "no_variation") == 3


def test_handheld_cr_only_endings_are_framed():
    name = "robustness/marine-api/handheld-route-cr-endings.nmea"
    data = shared_path(CAPTURES, *Path(name).parts).read_bytes()
    assert b"\n" not in data  # CR only
    items, counters, _ = run(name)
    assert sum(isinstance(x, RawLine) for x in items) == 101  # SOURCES.md: 101 sentences
    assert counters.get("cap", "RMC", "good") == 7 and counters.total("cap", "proprietary") == 8 + 8 + 7
    t = [item_time(x) for x in items]
    # SOURCES.md: 2010-06-03 09:41:42-09:41:54 UTC
    assert utc(2010, 6, 3, 9, 41, 40) <= t[0] and t[-1] <= utc(2010, 6, 3, 9, 41, 56)
