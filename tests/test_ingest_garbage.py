"""Every kind of bad input through a real file and Ingest: counted, skipped, never fatal, chunking-proof."""

from __future__ import annotations

import json

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from daemon.intake.counters import Counters
from daemon.intake.ingest import Ingest
from daemon.core.readings import RawLine, Reading
from estimators.samples import Fix, Heading, SeaTemperature
from tests.helpers import StandInVariation, nmea_checksum as xor_hex, sentence as s

RMC1 = s("GPRMC,120000,A,3747.772,N,12220.041,W,5.2,218.2,100520,013.2,E,A")
RMC2 = s("GPRMC,120010,A,3747.782,N,12220.031,W,5.2,218.2,100520,013.2,E,A")
TAG = "c:1589112005,s:gps1"

# (bytes, what it should count) in file order
CASES: list[tuple[bytes, str]] = [
    (b"\x00" * 200, "framer bad_bytes"),  # NUL run, glued to the next line
    (RMC1.encode() + b"\r\n", "good RMC"),
    (b"# a logger comment\n", "not_sentence"),
    (b"$APHDT,340.5,T*30\r\n", "bad_checksum HDT"),
    (b"$APHDT,340.5,T\r\n", "no_checksum HDT"),
    (s("PGRME,15.0,M,45.0,M,25.0,M").encode() + b"\n", "proprietary"),
    (b"!AIVDM,1,1,,A,B3KLehP0B@LTN6`Vl;rrBE063P06,0*5A\n", "ais"),
    (s("GPGSV,1,1,00").encode() + b"\r", "unknown GSV (CR only)"),
    ("$IIMTW,1\ufffd2.5,C*00\n".encode(), "framer bad_bytes (U+FFFD)"),
    (b"$" + b"A" * 2000 + b"\n", "framer overlong"),
    (s("IIMTW,016,C").encode() + b"\n", "good MTW"),
    (s("IIMTW,99.0,C").encode() + b"\n", "implausible MTW"),
    (s("GPRMC,120005,A,45x0.000,N,00100.000,E,5.0,10.0,100520,,").encode() + b"\n", "unparseable RMC"),
    (f"\\{TAG}*00\\".encode() + b"$APHDT,340.5,T*31\n", "bad_checksum TAG"),
    (b"$APHDT,340.5,T*31\n", "good HDT"),
    (s("APHDM,327.5,M").encode() + b"\n", "good HDM (variation from RMC)"),
    (RMC2.encode() + b"\n", "good RMC"),
    (b"$GPRMC,120011,A,37", "truncated at the end"),
]


def write_garbage(tmp_path):
    path = tmp_path / "garbage.nmea"
    path.write_bytes(b"".join(b for b, _ in CASES))
    return path


def replay(data: bytes, chunk: int | None = None):
    counters = Counters()
    ing = Ingest("g", counters=counters, variation=StandInVariation(), live=False)
    out = []
    if chunk is None:
        out += ing.feed(data, None)
    else:
        for i in range(0, len(data), chunk):
            out += ing.feed(data[i:i + chunk], None)
    out += ing.flush()
    counters.take(out)
    return out, counters


def test_every_garbage_case_is_counted_and_nothing_is_fatal(tmp_path):
    out, counters = replay(write_garbage(tmp_path).read_bytes())
    c = counters.snapshot()["g"]
    sentences = c["sentences"]
    assert c["framer"] == {"bad_bytes": 2, "overlong": 1}
    assert sentences["RMC"]["good"] == 2 and sentences["RMC"]["unparseable"] == 1
    assert sentences["RMC"]["no_checksum"] == 1  # the truncated last line, released by flush()
    assert sentences["HDT"]["bad_checksum"] == 1 and sentences["HDT"]["no_checksum"] == 1
    assert sentences["HDT"]["good"] == 1
    assert sentences["TAG"]["bad_checksum"] == 1
    assert sentences["PGRME"]["proprietary"] == 1 and sentences["VDM"]["ais"] == 1
    assert sentences["GSV"]["unknown"] == 1 and sentences["-"]["not_sentence"] == 1
    assert sentences["MTW"]["good"] == 2 and sentences["MTW"]["implausible"] == 1
    readings = [x.sample for x in out if isinstance(x, Reading)]
    assert [type(r) for r in readings] == [Fix, SeaTemperature, Heading, Heading, Fix]
    assert readings[3].true_deg == pytest.approx(340.7)  # HDM 327.5 + variation 13.2 E from RMC
    # RawLine for every line that passed framing: all cases but the three the framer dropped
    assert sum(isinstance(x, RawLine) for x in out) == len(CASES) - 3
    # ready for JSON, keys sorted at every level
    text = json.dumps(counters.snapshot())
    assert text == json.dumps(counters.snapshot(), sort_keys=True)


@pytest.mark.parametrize("chunk", [1, 2, 7, 64, 4096])
def test_feeding_byte_by_byte_or_in_any_chunks_gives_the_same_output(tmp_path, chunk):
    data = write_garbage(tmp_path).read_bytes()
    at_once, c1 = replay(data)
    chunked, c2 = replay(data, chunk)
    assert chunked == at_once
    assert c2.snapshot() == c1.snapshot()


def test_the_same_input_twice_gives_the_same_output(tmp_path):
    data = write_garbage(tmp_path).read_bytes()
    a, ca = replay(data)
    b, cb = replay(data)
    assert a == b and ca.snapshot() == cb.snapshot()


def test_no_checksum_allowed_for_a_source_that_sends_none():
    ing = Ingest("old", counters=Counters(), variation=StandInVariation(), live=True, allow_no_checksum=True)
    out = ing.feed(b"$IIMTW,12.5,C\r\n$IIMTW,12.6,C*" + xor_hex("IIMTW,12.6,C").encode() + b"\r\n", 5.0)
    temps = [x.sample.temp_c for x in out if isinstance(x, Reading)]
    assert temps == [12.5, 12.6]


FRAGMENTS = [b for b, _ in CASES] + [b"\r", b"\n", b"$", b"*", b",", b"\\", b"!", b"\x00", b"\xff"]


@settings(max_examples=150, deadline=None)
@given(st.lists(st.one_of(st.sampled_from(FRAGMENTS), st.binary(max_size=40)), max_size=60))
def test_any_mix_of_garbage_is_never_fatal_and_every_line_is_counted_once(parts):
    data = b"".join(parts)
    out, counters = replay(data)
    totals = counters.snapshot().get("g", {}).get("totals", {})
    line_counts = ("good", "bad_checksum", "no_checksum", "unparseable", "unknown", "proprietary", "ais",
                   "not_sentence")
    assert sum(totals.get(k, 0) for k in line_counts) == sum(isinstance(x, RawLine) for x in out)
    times = [x.t_s if isinstance(x, RawLine) else x.sample.t_s for x in out]
    assert all(a <= b for a, b in zip(times, times[1:]))


def test_live_flush_of_a_cut_off_line_uses_the_last_receive_time():
    # GIVEN a live source whose last sentence was cut off by the stop (no line ending)
    ing = Ingest("cut", counters=Counters(), variation=StandInVariation(), live=True)
    ing.feed(b"$IIMTW,12.5,C*" + xor_hex("IIMTW,12.5,C").encode(), 42.0)
    # WHEN the stream ends
    out = ing.flush()
    # THEN the line is handed on, stamped with when its bytes arrived
    assert [x.t_s for x in out if isinstance(x, RawLine)] == [42.0]
