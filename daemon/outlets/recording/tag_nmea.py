"""A recording's raw sentences as TAG-block NMEA 0183 text, and such text read back as raw lines."""

from __future__ import annotations

import math
from collections.abc import Iterator
from pathlib import Path

from daemon.core.readings import RawLine
from daemon.errors import OutputError
from daemon.intake.crew import REPLAYERS as CREW_SOURCES
from daemon.nmea0183.codec import has_tag_block, split_tag, tag_block
from daemon.outlets.recording.reading import iter_raw


def export_tag_nmea(db_path: str | Path, out_path: str | Path) -> int:
    """Write the raw sentences as TAG-block NMEA text (CRLF lines); returns the lines written.

    A line that already carries a TAG block is written as stored, byte for
    byte (so a recording of a TAG-block file exports as that file). Every other
    line gets ``\\c:<ms>,s:<source>*hh\\`` in front: the data time to the
    millisecond and the source, the stored line unchanged after it. What the crew said over MQTT
    (``daemon.intake.crew``: JSON, not NMEA) is left out: it stays in the recording.
    """
    n = 0
    try:
        with open(out_path, "w", encoding="utf-8", errors="surrogateescape", newline="") as out:
            for line in iter_raw(db_path):
                if line.source in CREW_SOURCES:
                    continue
                if has_tag_block(line.text):
                    out.write(line.text + "\r\n")
                else:
                    out.write(tag_block(line.t_s, line.source) + line.text + "\r\n")
                n += 1
    except OSError as exc:
        raise OutputError(f"cannot write {out_path}: {exc}") from exc
    return n


def parse_tag_line(line: str) -> RawLine:
    """One TAG-block line split: c: gives the time, s: the source, the rest after the block is the text.

    A line without a well-formed TAG block (or with a wrong TAG checksum) comes
    back whole as the text, with NaN time and an empty source.
    """
    status, t, source, rest = split_tag(line)
    if status != "ok" or rest is line:
        return RawLine(source="", t_s=math.nan, recv_utc=math.nan, text=line)
    t_s = math.nan if t is None else t
    return RawLine(source=source or "", t_s=t_s, recv_utc=t_s, text=rest)


def read_tag_nmea(path: str | Path) -> Iterator[RawLine]:
    """The lines of a TAG-block NMEA file (CRLF or LF), each through ``parse_tag_line``."""
    with open(path, "r", encoding="utf-8", errors="surrogateescape", newline="") as f:
        text = f.read()
    lines = text.replace("\r\n", "\n").split("\n")
    if lines[-1] == "":
        lines.pop()
    for line in lines:
        yield parse_tag_line(line)
