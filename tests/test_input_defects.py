"""Inputs that once killed, hung or grew the service: each one here, so it cannot come back.

Every line received is data: a sentence whose numbers break a helper, a TAG block
from another century, a logger clock that jumps, a flood of made-up sentence
types. Each is counted and said, never fatal, never unbounded.
"""

from __future__ import annotations

import math

import pytest

from daemon.core.pipeline import Pipeline
from daemon.core.readings import RawLine, Reading
from daemon.intake.counters import OTHER_SENTENCES, Counters
from daemon.intake.framer import MAX_LINE
from daemon.intake.ingest import SENTENCES_KEPT, Ingest
from daemon.nmea0183 import codec
from daemon.nmea0183.codec import checksum_hex, parse_line, parse_tag_block
from estimators.limits import DATA_TIME_S
from estimators.samples import Pressure
from tests.helpers import FakeAlerts, StandInVariation, sentence

T0 = 1778918400.0  # 2026-05-16T08:00:00Z


def tagged(t_s: float, body: str, unit_ms: bool = True) -> str:
    c = f"c:{round(t_s * 1000) if unit_ms else t_s}"
    return f"\\{c}*{checksum_hex(c)}\\" + sentence(body)


def run_lines(lines: list[str], live: bool = False) -> tuple[list, Counters, Ingest]:
    counters = Counters()
    ing = Ingest("src", counters=counters, variation=StandInVariation(), live=live)
    data = "".join(x + "\r\n" for x in lines).encode()
    out = ing.feed(data, T0 if live else None) + ing.flush()
    counters.take(out)
    return out, counters, ing


MTW = "IIMTW,16.5,C"


# --- 1. one well-formed sentence killed run and replay ---------------------------------

def test_a_zda_with_an_absurd_day_is_counted_unparseable_not_fatal():
    # GIVEN the ZDA that raised OverflowError (issue 13, item 1), between two good lines
    zda = "$GPZDA,040000.00,99999999999999999999,05,2026,00,00*61"
    assert parse_line(zda).status == "ok"  # its frame is sound: the trouble is in a field
    # WHEN it is replayed
    out, counters, _ = run_lines([sentence(MTW), zda, sentence(MTW)])
    # THEN it is one unparseable ZDA and both good lines still come through
    assert counters.get("src", "ZDA", "unparseable") == 1
    assert counters.get("src", "MTW", "good") == 2
    assert sum(isinstance(x, RawLine) for x in out) == 3


def test_any_exception_while_parsing_one_line_is_counted_and_the_stream_goes_on(monkeypatch):
    # GIVEN an extractor with a bug we have not found yet (any exception at all)
    def broken(fields):
        raise ZeroDivisionError("a bug in a parser")

    monkeypatch.setitem(codec.EXTRACTORS, "MTW", broken)
    # WHEN a line reaches it, live and in replay
    for live in (False, True):
        out, counters, _ = run_lines([sentence(MTW), sentence("APHDT,10.0,T")], live=live)
        # THEN the line is unparseable and the next line is still read
        assert counters.get("src", "MTW", "unparseable") == 1
        assert counters.get("src", "HDT", "good") == 1
        assert [x.sentence for x in out if isinstance(x, RawLine)] == ["MTW", "HDT"]


# --- 2. TAG times out of range crashed or hung a replay ------------------------------

@pytest.mark.parametrize("c", ["300000000000000", "1e19", "-5", "inf", "nan", "1e400"])
def test_a_tag_time_outside_any_possible_date_is_a_bad_tag_block(c):
    # GIVEN a TAG c: no clock of a working receiver or logger can give (issue 13, item 2)
    body = f"c:{c}"
    # THEN the TAG block is unparseable and gives no time
    assert parse_tag_block(body + "*" + checksum_hex(body)) == ("unparseable", None, None)
    out, counters, _ = run_lines([f"\\{body}*{checksum_hex(body)}\\" + sentence(MTW)])
    assert counters.get("src", "TAG", "unparseable") == 1
    assert all(DATA_TIME_S[0] <= x.t_s <= DATA_TIME_S[1] or x.t_s == 0.0 for x in out if isinstance(x, RawLine))


def test_the_tag_time_range_is_the_gnss_epoch_to_2100():
    # GPS epoch 1980-01-06T00:00:00Z = UNIX 315964800 (IS-GPS-200 time origin; from memory)
    lo, hi = DATA_TIME_S
    assert parse_tag_block(f"c:{int(lo)}*" + checksum_hex(f"c:{int(lo)}"))[1] == lo
    assert parse_tag_block(f"c:{int(lo) - 1}*" + checksum_hex(f"c:{int(lo) - 1}"))[0] == "unparseable"
    assert parse_tag_block(f"c:{int(hi) + 1}*" + checksum_hex(f"c:{int(hi) + 1}"))[0] == "unparseable"


def test_the_pipeline_ignores_a_time_no_second_can_be_added_to():
    # GIVEN a pipeline (no estimators) and a reading stamped 1e19 s, where t + 1 == t
    pipe = Pipeline([], [], FakeAlerts())
    pipe.feed(Reading("src", Pressure(T0, 1013.0), T0, "MDA", None))
    # WHEN a reading with that time arrives THEN it returns (it hung in the tick loop)
    pipe.feed(Reading("src", Pressure(1e19, 1013.0), T0, "MDA", None))
    assert pipe.now_s == T0


# --- 3. a TAG time that jumps collapsed the rest of the replay into one instant ------

def _tag_times(lines: list[str]) -> tuple[list[float], dict[str, int]]:
    out, _, ing = run_lines(lines)
    return [x.t_s for x in out if isinstance(x, RawLine)], ing.time_events


def test_one_tag_time_a_day_ahead_is_an_outlier_and_the_rest_keep_their_times():
    # GIVEN 1 Hz tagged lines, one of them stamped a day ahead
    times = [T0 + i for i in range(20)]
    lines = [tagged(t, MTW) for t in times]
    lines[5] = tagged(T0 + 5 + 86400.0, MTW)
    # WHEN replayed
    out, events = _tag_times(lines)
    # THEN that line is an outlier, held at the time before it; the others keep theirs
    assert events.get("outlier") == 1 and "segment" not in events and "gap" not in events
    assert out[5] == times[4]
    assert out[:5] == times[:5] and out[6:] == times[6:]


def test_a_tag_clock_stepped_back_an_hour_is_a_new_segment_and_the_passage_keeps_its_length():
    # GIVEN three hours of lines every 10 s whose logger clock steps back an hour at 1 h
    n = 3 * 360
    true_times = [T0 + 10.0 * i for i in range(n)]
    stamps = [t - (3600.0 if i >= 360 else 0.0) for i, t in enumerate(true_times)]
    # WHEN replayed
    out, events = _tag_times([tagged(t, MTW) for t in stamps])
    # THEN one segment, time never goes back, and the passage still spans about three hours
    assert events.get("segment") == 1 and "outlier" not in events
    assert all(b >= a for a, b in zip(out, out[1:]))
    assert out[-1] - out[0] == pytest.approx(true_times[-1] - true_times[0], abs=20.0)
    assert len(set(out)) >= n - 2


def test_a_tag_clock_that_leaps_ahead_and_stays_is_a_gap_taken_as_it_is():
    # GIVEN the logger off for two hours: its times resume two hours later
    stamps = [T0 + i for i in range(10)] + [T0 + 7200.0 + i for i in range(10)]
    out, events = _tag_times([tagged(t, MTW) for t in stamps])
    # THEN a gap, counted, and every line at its own time
    assert events.get("gap") == 1 and "outlier" not in events
    assert out == stamps


def test_untagged_lines_between_jump_candidates_stay_in_order():
    # GIVEN a tagged stream with untagged lines among the lines that confirm a backward step
    lines = []
    for i in range(6):
        lines.append(tagged(T0 + i, MTW))
    for i in range(6):
        lines.append(tagged(T0 - 600.0 + i, MTW))
        lines.append(sentence("APHDT,10.0,T"))
    out, events = _tag_times(lines)
    assert events.get("segment") == 1
    assert all(b >= a for a, b in zip(out, out[1:]))
    assert len(out) == len(lines)


# --- 4. distinct unknown sentence types grew memory and the status -------------------

def test_made_up_sentence_types_end_in_one_other_bucket():
    # GIVEN 3000 well-formed sentences of 3000 made-up types (issue 13, item 4) and a GSV
    lines = [sentence(f"GPK{i}X,1") for i in range(3000)] + [sentence("GPGSV,1,1,00")]
    _, counters, _ = run_lines(lines, live=True)
    snap = counters.snapshot()["src"]
    # THEN the status stays small: a bounded number of named types, the rest in "other"
    named = set(snap["sentences"]) - {OTHER_SENTENCES}
    assert len(named) <= Counters.MAX_OTHER_TYPES + 1
    assert "GSV" in named  # a standard NMEA 0183 type keeps its own row (NMEA 0183 v4.10 GSV)
    unknown = sum(row["unknown"] for row in snap["sentences"].values())
    assert unknown == 3001  # nothing lost: every line is still counted
    assert snap["sentences"][OTHER_SENTENCES]["unknown"] == 3000 - Counters.MAX_OTHER_TYPES
    assert snap["totals"]["unknown"] == 3001


def test_made_up_proprietary_addresses_are_bounded_too():
    lines = [sentence(f"PQX{i:05d}") for i in range(500)]
    _, counters, _ = run_lines(lines, live=True)
    snap = counters.snapshot()["src"]
    assert len(snap["sentences"]) <= Counters.MAX_OTHER_TYPES + 1
    assert snap["totals"]["proprietary"] == 500
    assert math.isclose(sum(r["proprietary"] for r in snap["sentences"].values()), 500)


# --- 5. a sentence's reading is kept for its repeats: each repeat still counts, and what is kept is bounded ---

def test_a_repeated_sentence_counts_every_time_it_comes():
    # GIVEN an implausible temperature (dropped and counted) and a good one, each sent ten times
    lines = [sentence("IIMTW,99.0,C"), sentence(MTW)] * 10
    # WHEN replayed: every repeat is read from what the Ingest kept of the first
    out, counters, ing = run_lines(lines)
    # THEN each repeat counts as the first did and each good one gives its reading
    assert counters.get("src", "MTW", "implausible") == 10
    assert counters.get("src", "MTW", "good") == 20
    assert sum(isinstance(x, Reading) for x in out) == 10
    assert ing._read_sentence.cache_info().hits == 18


def test_the_readings_kept_are_bounded():
    # GIVEN more distinct sentences than an Ingest keeps the readings of
    lines = [sentence(f"IIMTW,{10 + i / 100:.2f},C") for i in range(SENTENCES_KEPT + 100)]
    # WHEN replayed THEN each is read and counted, and no more than SENTENCES_KEPT are kept
    _, counters, ing = run_lines(lines)
    assert counters.get("src", "MTW", "good") == len(lines)
    assert ing._read_sentence.cache_info().currsize == SENTENCES_KEPT


def test_a_line_whose_extractor_fails_keeps_its_tag_time(monkeypatch):
    # GIVEN an extractor with a bug, between tagged lines one second apart
    def broken(fields):
        raise ZeroDivisionError("a bug in a parser")

    monkeypatch.setitem(codec.EXTRACTORS, "MTW", broken)
    lines = [tagged(T0 + i, body) for i, body in enumerate(("APHDT,10.0,T", MTW, "APHDT,11.0,T"))]
    # WHEN replayed THEN the broken line is unparseable under its own type and keeps its TAG time
    out, counters, _ = run_lines(lines)
    assert counters.get("src", "MTW", "unparseable") == 1
    assert [(x.sentence, x.t_s) for x in out if isinstance(x, RawLine)] == [
        ("HDT", T0), ("MTW", T0 + 1), ("HDT", T0 + 2)]


def test_an_overlong_recorded_line_is_read_but_not_kept():
    # GIVEN a foreign recording's line far longer than any framed line (the framer drops those live)
    ing = Ingest("src", counters=Counters(), variation=StandInVariation(), live=False)
    long_line = sentence("IIMTW,16.5,C" + "," * (4 * MAX_LINE))
    # WHEN it comes twice, as a recording's line comes
    for _ in range(2):
        out = ing.feed_timed_line(long_line, T0, T0)
    # THEN it is read and counted each time, and nothing of it is kept: what is kept stays bounded in bytes
    assert [x.counts for x in out if isinstance(x, RawLine)] == [(("good", 1),)]
    assert ing._read_sentence.cache_info().currsize == 0
