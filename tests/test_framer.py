"""The byte framer: line endings, garbage, overlong lines, any chunking gives the same lines."""

from __future__ import annotations

from hypothesis import given, settings
from hypothesis import strategies as st

from daemon.intake.framer import MAX_LINE, LineFramer

RMC = b"$GPRMC,190105.41,A,3747.772,N,12220.041,W,5.2,218.2,100520,013.2,E,D*20"
HDT = b"$APHDT,340.5,T*31"

# Garbage of every kind the captures show, around two good sentences.
GARBAGE_STREAM = (
    b"\x00" * 248 + HDT + b"\r\n"  # a NUL run glued to a sentence (start of a capture)
    + b"#  a logger comment\n"
    + b"$GPRMC,050248,A,3806.969,N,1994.\xef\xbf\xbd\x18\xef\xbf\xbd3|\n"  # U+FFFD spliced in
    + b"\xb5b\x01\x07\x5c\x00" + RMC + b"\r"  # binary (a UBX header) then a sentence, CR only
    + b"x" * 3000  # no line ending for 3000 bytes
    + b"$APHDT,340.7,T*33\n\n\r\n"
    + b"\\c:1577648032,s:GP01*5B\\" + HDT + b"\r\n"
    + b"$WIMWV,36.8,R,8.3,N,A*"  # cut, no ending
)


def frame_at_once(data: bytes) -> tuple[list[bytes], int, int]:
    f = LineFramer()
    lines = f.feed(data) + f.flush()
    return lines, f.overlong, f.bad_bytes


def frame_in_chunks(data: bytes, cuts: list[int]) -> tuple[list[bytes], int, int]:
    f = LineFramer()
    lines: list[bytes] = []
    prev = 0
    for cut in sorted(cuts) + [len(data)]:
        lines += f.feed(data[prev:cut])
        prev = cut
    lines += f.flush()
    return lines, f.overlong, f.bad_bytes


def test_cr_lf_and_crlf_all_end_a_line_and_empty_lines_are_not_returned():
    # NMEA 0183 v4.10 §5.3: a sentence ends with <CR><LF>; CR alone and LF alone are common in practice.
    f = LineFramer()
    assert f.feed(b"$A*41\r\n$B*42\r$C*43\n\r\n\n$D") == [b"$A*41", b"$B*42", b"$C*43"]
    assert f.feed(b"*44\r") == [b"$D*44"]
    assert (f.overlong, f.bad_bytes) == (0, 0)


def test_garbage_stream_gives_the_good_lines_and_counts_the_dropped_ones():
    lines, overlong, bad = frame_at_once(GARBAGE_STREAM)
    assert lines == [
        HDT,
        b"#  a logger comment",
        RMC,
        b"$APHDT,340.7,T*33",
        b"\\c:1577648032,s:GP01*5B\\" + HDT,
        b"$WIMWV,36.8,R,8.3,N,A*",
    ]
    # one NUL run, one spliced RMC (its tail is skipped with it), and two in the binary run:
    # its byte 0x5C is a backslash (a TAG start), so the framer resyncs there and drops again at 0x00
    assert bad == 4
    # the 3000 x's start right after the RMC's CR, so they are one line of their own: dropped once
    assert overlong == 1


def test_byte_by_byte_equals_all_at_once_on_the_garbage_stream(tmp_path):
    path = tmp_path / "garbage.nmea"
    path.write_bytes(GARBAGE_STREAM)
    data = path.read_bytes()
    f = LineFramer()
    lines: list[bytes] = []
    with path.open("rb") as fh:
        while byte := fh.read(1):
            lines += f.feed(byte)
    lines += f.flush()
    assert (lines, f.overlong, f.bad_bytes) == frame_at_once(data)


@settings(max_examples=200, deadline=None)
@given(st.lists(st.integers(min_value=0, max_value=len(GARBAGE_STREAM)), max_size=40))
def test_any_chunking_gives_the_same_lines_and_counts(cuts):
    assert frame_in_chunks(GARBAGE_STREAM, cuts) == frame_at_once(GARBAGE_STREAM)


@settings(max_examples=200, deadline=None)
@given(st.binary(max_size=3000), st.lists(st.integers(min_value=0, max_value=3000), max_size=20))
def test_random_bytes_any_chunking_same_result_and_lines_are_clean(data, cuts):
    cuts = [c for c in cuts if c <= len(data)]
    at_once = frame_at_once(data)
    assert frame_in_chunks(data, cuts) == at_once
    for line in at_once[0]:
        assert 0 < len(line) <= MAX_LINE
        assert all(0x20 <= b <= 0x7E for b in line)


def test_a_stream_without_newlines_cannot_grow_memory_and_resyncs_at_a_start_char():
    f = LineFramer()
    for _ in range(100):
        assert f.feed(b"0123456789" * 100) == []
        assert f.pending_bytes <= MAX_LINE
    assert f.overlong == 1  # one endless line, dropped once, then skipped
    assert f.feed(b"garbage!AIVDM,1,1,,A,B3KLehP0B@LTN6`Vl;rrBE063P06,0*5A\n") == [
        b"!AIVDM,1,1,,A,B3KLehP0B@LTN6`Vl;rrBE063P06,0*5A"]


def test_a_line_of_exactly_max_line_passes_one_more_byte_drops_it():
    body = b"$" + b"A" * (MAX_LINE - 1)
    f = LineFramer()
    assert f.feed(body + b"\n") == [body]
    assert f.feed(body + b"B\n") == []
    assert f.overlong == 1


def test_resync_after_an_overlong_line_starts_at_the_byte_that_overflowed():
    # The overflowing byte is a start character: it begins the next line.
    f = LineFramer()
    assert f.feed(b"x" * MAX_LINE + b"$GPHDT,1.0,T*00\n") == [b"$GPHDT,1.0,T*00"]
    assert f.overlong == 1


def test_nul_and_non_ascii_bytes_drop_the_line_they_are_in():
    f = LineFramer()
    assert f.feed(b"$GPHDT,1\x00.0,T*00\r\n" + HDT + b"\r\n") == [HDT]
    assert f.feed("$GPMTW,12.5,C*°\n".encode()) == []
    assert f.feed(b"$GPMTW,12.5\tC*00\n") == []  # a control byte (TAB) too
    assert f.bad_bytes == 3


def test_a_line_ending_ends_a_dropped_line():
    # A dropped line does not swallow the next line when that one does not start with "$".
    f = LineFramer()
    assert f.feed(b"\xff\xfe junk\n# comment\n") == [b"# comment"]
    assert f.bad_bytes == 1


def test_only_cr_and_lf_end_a_line_other_breaks_are_bad_bytes():
    # NMEA 0183 v4.10 §5.3: only CR and LF end a sentence. The bytes Python's str.splitlines also takes
    # for line breaks (VT, FF, FS, GS, RS, NEL; the Python documentation of str.splitlines) are control
    # or non-ASCII bytes here: each drops the line it is in, and none of them ends one.
    for brk in (b"\x0b", b"\x0c", b"\x1c", b"\x1d", b"\x1e", b"\x85"):
        f = LineFramer()
        assert f.feed(HDT + brk + RMC + b"\r\n" + HDT + b"\r\n") == [RMC, HDT], brk
        assert f.bad_bytes == 1
