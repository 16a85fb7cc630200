"""Replay time: fix times, spreading, midnight, missing dates, jumps, week rollover, TAG times."""

from __future__ import annotations

import calendar
import datetime as dt

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from daemon.intake.counters import Counters
from daemon.intake.ingest import Ingest
from daemon.core.readings import RawLine, Reading
from daemon.intake.timing import GPS_WEEK_ROLLOVER_S, GnssDate, ReplayClock
from tests.helpers import StandInVariation, nmea_checksum as xor_hex, sentence as s


def utc(*args: int) -> float:
    return float(calendar.timegm(dt.datetime(*args).timetuple()))


def rmc(hhmmss: str, ddmmyy: str = "100520", lat: str = "3747.772") -> str:
    return s(f"GPRMC,{hhmmss},A,{lat},N,12220.041,W,5.2,218.2,{ddmmyy},013.2,E,A")


def gga(hhmmss: str) -> str:
    return s(f"GPGGA,{hhmmss},3747.772,N,12220.041,W,1,09,1.0,6.0,M,-30.0,M,,")


def zda(hhmmss: str, day: int, month: int, year: int) -> str:
    return s(f"GPZDA,{hhmmss},{day:02d},{month:02d},{year},,")


HDT = "$APHDT,340.5,T*31"


def replay(lines: list[str], **kw) -> tuple[list[RawLine], Ingest]:
    ing = Ingest("gnss", counters=Counters(), variation=StandInVariation(13.0), live=False, **kw)
    data = "".join(x + "\r\n" for x in lines).encode()
    out = ing.feed(data, None) + ing.flush()
    return [x for x in out if isinstance(x, RawLine)], ing


def times(lines: list[str], **kw) -> list[float]:
    return [r.t_s for r in replay(lines, **kw)[0]]


def test_lines_between_fixes_are_spread_evenly_over_the_interval():
    # GIVEN a fix, four more lines, then the next fix 10 s later
    t = times([rmc("120000"), HDT, HDT, HDT, HDT, rmc("120010"), HDT])
    t0 = utc(2020, 5, 10, 12, 0, 0)
    # THEN the five lines of the first interval are 2 s apart, the second fix at its own time
    assert t[:6] == pytest.approx([t0, t0 + 2, t0 + 4, t0 + 6, t0 + 8, t0 + 10])
    assert t[6] >= t[5]


def test_a_repeated_time_stamp_is_spread_so_the_track_replays_at_its_speed():
    # GIVEN a receiver whose time field advances only every 10 s, one RMC a second
    lines = [rmc("120000", lat=f"3747.{772 + i:03d}") for i in range(10)] + [rmc("120010", lat="3747.782")]
    t = times(lines)
    # THEN the ten RMCs of the first step are one second apart
    assert [b - a for a, b in zip(t, t[1:])] == pytest.approx([1.0] * 10)


def test_lines_before_the_first_time_take_the_first_fix_time():
    t = times([HDT, HDT, rmc("120000"), HDT, rmc("120001")])
    assert t[:3] == [utc(2020, 5, 10, 12, 0, 0)] * 3


def test_gga_before_any_date_is_held_until_a_date_arrives():
    # GIVEN GGA (time only) before the first RMC of the day
    t = times([gga("115958"), HDT, gga("115959"), rmc("120000"), HDT, rmc("120001")])
    # THEN once RMC has dated them, the GGAs keep their own times
    assert t[0] == utc(2020, 5, 10, 11, 59, 58)
    assert t[2] == utc(2020, 5, 10, 11, 59, 59)
    assert t[3] == utc(2020, 5, 10, 12, 0, 0)
    assert t == sorted(t)


def test_a_date_given_by_the_caller_dates_gga_without_any_rmc():
    t = times([gga("120000"), HDT, gga("120001")], default_date=dt.date(2024, 2, 29))
    t0 = utc(2024, 2, 29, 12, 0, 0)
    assert t == [t0, t0 + 0.5, t0 + 1.0]


def test_held_lines_are_bounded_and_released_untimed():
    dates = GnssDate()
    clock = ReplayClock(dates, max_hold=3)
    out = []
    for i in range(4):
        out += clock.push(i, None)
    assert out == [(None, 0), (None, 1), (None, 2), (None, 3)]
    assert dates.events["untimed"] == 4


def test_midnight_gga_before_the_rmc_of_the_new_date():
    # GIVEN RMC 23:59:59 on 10 May, then GGA 00:00:00 (no date) before RMC 00:00:00 of 11 May
    t = times([rmc("235959", "100520"), gga("000000"), rmc("000000", "110520"), gga("000001")])
    # THEN the GGA belongs to the new day, and time runs on over midnight
    assert t[1] == utc(2020, 5, 11, 0, 0, 0)
    assert t[2] == utc(2020, 5, 11, 0, 0, 0) + 0.5  # same time as the fix: spread within its second
    assert t[3] == utc(2020, 5, 11, 0, 0, 1)


def test_year_change_through_zda():
    t = times([zda("235959.50", 31, 12, 2023), HDT, zda("000000.50", 1, 1, 2024)])
    assert t[0] == utc(2023, 12, 31, 23, 59, 59) + 0.5 and t[2] == utc(2024, 1, 1, 0, 0, 0) + 0.5


def test_a_line_a_little_behind_belongs_to_the_current_fix():
    # GIVEN two receivers on one talker, one a few seconds behind the other
    lines, ing = replay([rmc("120005"), rmc("120000"), rmc("120007"), rmc("120000"), rmc("120009")])
    t = [r.t_s for r in lines]
    assert t == sorted(t)
    assert t[-1] == utc(2020, 5, 10, 12, 0, 9)
    assert ing.time_events["behind"] == 2


def test_a_single_stuck_foreign_time_never_moves_the_clock():
    # GIVEN a GLL stuck 13 minutes behind among RMCs (as in the berth capture)
    gll = s("APGLL,3806.9698,N,12137.4570,W,045959.00,A")
    lines = []
    for sec in range(0, 20):
        lines += [rmc(f"0512{sec:02d}", "191205"), gll]
    rows, ing = replay(lines)
    t = [r.t_s for r in rows]
    assert t == sorted(t)
    assert t[-2] == utc(2005, 12, 19, 5, 12, 19)
    assert ing.time_events["outlier"] == 20 and "segment" not in ing.time_events


def test_backward_reset_starts_a_segment_and_time_never_goes_back():
    # GIVEN a receiver that resets from 12:00:05 to 11:00:00 and runs on from there
    lines = [rmc(f"1200{i:02d}") for i in range(6)] + [rmc(f"1100{i:02d}") for i in range(6)]
    rows, ing = replay(lines)
    t = [r.t_s for r in rows]
    # THEN output time goes on from where it was, at the usual rate, and it was counted
    assert t == sorted(t)
    assert ing.time_events["segment"] == 1
    assert ing.time_events["outlier"] == 2  # the first two reset lines, before the third confirmed it
    assert t[-1] - t[5] == pytest.approx(6.0, abs=1.0)


def test_forward_jump_beyond_the_gap_limit_keeps_the_real_time_of_the_new_piece():
    # GIVEN a file of two pieces, 2 h 22 min apart (as in the two-receiver capture)
    lines = [rmc(f"1901{i:02d}") for i in range(5)] + [HDT] + [rmc(f"2123{40 + i:02d}") for i in range(5)]
    rows, ing = replay(lines)
    t = [r.t_s for r in rows]
    assert t == sorted(t)
    assert ing.time_events["segment"] == 1
    assert t[-1] == utc(2020, 5, 10, 21, 23, 44)
    # the lines before the jump stay near the first piece: they are not smeared across the gap
    assert t[5] - t[4] < 2.0


def test_a_gap_in_fixes_does_not_smear_the_lines_across_it():
    # GIVEN one fix a second with one line between, then 25 s without a fix and only two lines
    lines = []
    for sec in range(10):
        lines += [rmc(f"1200{sec:02d}"), HDT]
    lines += [rmc("120035"), HDT]
    t = times(lines)
    # THEN the two lines after 12:00:09 come at the usual spacing (0.5 s), not 12.5 s apart
    assert t[19] - t[18] == pytest.approx(0.5, abs=0.1)
    assert t[20] == utc(2020, 5, 10, 12, 0, 35)


def test_week_rollover_against_a_reference_date():
    # GIVEN the berth capture's receiver date 2005-12-19 and its file's epoch, 2025-08-04 (reference)
    reference = utc(2025, 8, 4, 5, 12, 13)
    rows, ing = replay([rmc("051214", "191205"), rmc("051215", "191205")], not_before_utc=reference)
    # THEN the date is 1024 weeks later (python's calendar, independently: 2005-12-19 + 1024 weeks)
    fixed = dt.datetime(2005, 12, 19, 5, 12, 14) + dt.timedelta(weeks=1024)
    assert fixed.date() == dt.date(2025, 8, 4)
    assert rows[0].t_s == utc(*fixed.timetuple()[:6])
    assert ing.time_events["week_rollover"] == 1
    assert GPS_WEEK_ROLLOVER_S == dt.timedelta(weeks=1024).total_seconds()


def test_an_honest_old_date_is_left_alone():
    # A 2019 passage replayed with a 2026 reference is 7 years old, not 19.6: no rollover.
    rows, ing = replay([rmc("193430", "291219")], not_before_utc=utc(2026, 12, 1))
    assert rows[0].t_s == utc(2019, 12, 29, 19, 34, 30) and "week_rollover" not in ing.time_events
    rows, _ = replay([rmc("051214", "191205")])  # no reference: taken as it comes
    assert rows[0].t_s == utc(2005, 12, 19, 5, 12, 14)


def test_tag_block_times_win_over_gnss_times():
    def tagged(c: str, sentence: str) -> str:
        tag = f"c:{c},s:gnss"
        return f"\\{tag}*{xor_hex(tag)}\\{sentence}"

    t = times([tagged("1577648032", rmc("120000")), HDT, tagged("1577648033500", HDT)])
    assert t == [1577648032.0, 1577648032.0, 1577648033.5]


def test_replay_is_deterministic():
    lines = [HDT, gga("115959"), rmc("120000")] + [rmc("120000"), HDT] * 5 + [rmc("120010"), "$IIMTW,016,C*3A"]
    a, _ = replay(lines)
    b, _ = replay(lines)
    assert a == b


def test_readings_carry_the_line_time_and_the_gnss_time():
    ing = Ingest("gnss", counters=Counters(), variation=StandInVariation(13.0), live=False)
    out = ing.feed(("\r\n".join([rmc("120000"), HDT, rmc("120010")]) + "\r\n").encode(), None) + ing.flush()
    readings = [x for x in out if isinstance(x, Reading)]
    fix = readings[0]
    assert fix.sample.t_s == utc(2020, 5, 10, 12, 0, 0) == fix.gnss_utc
    heading = next(r for r in readings if r.sentence == "HDT")
    assert heading.sample.t_s == utc(2020, 5, 10, 12, 0, 5) and heading.gnss_utc is None
    assert heading.recv_utc == heading.sample.t_s  # replay without receive times


def test_feed_timed_line_uses_the_given_time():
    ing = Ingest("gnss", counters=Counters(), variation=StandInVariation(13.0), live=False)
    out = ing.feed_timed_line(HDT, 1700000000.25, 1700000000.5)
    assert (out[0].source, out[0].t_s, out[0].recv_utc, out[0].text) == ("gnss", 1700000000.25, 1700000000.5, HDT)
    assert out[0].sentence == "HDT" and out[0].counts == (("good", 1),)
    assert out[1].sample.t_s == 1700000000.25 and out[1].recv_utc == 1700000000.5


# --- properties over any sequence of GNSS times ------------------------------------------------------

STEP = st.one_of(
    st.none(),  # a line without time
    st.just(0.0),  # the same time again
    st.floats(min_value=0.05, max_value=2.0),  # the next epoch
    st.floats(min_value=-20.0, max_value=-0.01),  # a second receiver a little behind
    st.floats(min_value=-90000.0, max_value=90000.0),  # jumps, resets, a day either way
)


@settings(max_examples=300, deadline=None)
@given(st.lists(STEP, max_size=120))
def test_any_gnss_time_sequence_gives_every_line_once_in_order_and_time_never_back(steps):
    # GIVEN lines with GNSS times wandering by the given steps (None: no time on that line)
    clock = ReplayClock(GnssDate(), max_pending=50, max_hold=30)
    t = 1_600_000_000.0
    out = []
    for i, step in enumerate(steps):
        if step is None:
            out += clock.push(i, None)
        else:
            t += step
            out += clock.push(i, t)
    out += clock.flush()
    # THEN every line comes out exactly once, in arrival order, with times that never go back
    assert [item for _, item in out] == list(range(len(steps)))
    times = [x for x, _ in out if x is not None]
    assert all(a <= b for a, b in zip(times, times[1:]))
