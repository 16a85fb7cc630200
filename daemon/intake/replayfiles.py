"""Replay inputs: NMEA text (TAG blocks or not), gzipped or not, and the program's own recordings.

The format is told by the first bytes, never by the name: gzip starts with
1f 8b (RFC 1952), an SQLite database with "SQLite format 3\\0" (the SQLite file
format's header string); anything else is read as NMEA 0183 text.

Each file gets its own Ingest (source name: the file name without ``.gz`` and
its last suffix), read in 64 KiB chunks, flushed at its end. A recording holds
the lines of several inputs: each stored source gets its own Ingest under its
stored name, fed line by line with the stored times, so replaying a recording
decides exactly as the run that made it; what the crew said over MQTT (swell
reports, acknowledgements: ``daemon.intake.crew``) becomes the same items again. The items of several files are
merged in data-time order; each file's own items keep the order its Ingest
gave them.
"""

from __future__ import annotations

import gzip
import heapq
import logging
import sqlite3
import sys
import time
import zlib
from collections.abc import Callable, Iterable, Iterator, Sequence
from itertools import chain
from pathlib import Path
from typing import IO, Any

from daemon.errors import InputError
from daemon.outlets.recording.reading import is_recording_header
from daemon.outlets.recording.schema import SQLITE_MAGIC
from daemon.core.readings import Acknowledgement, RawLine, Reading
from daemon.intake.crew import REPLAYERS

log = logging.getLogger(__name__)

CHUNK_BYTES = 64 * 1024
GZIP_MAGIC = b"\x1f\x8b"                  # RFC 1952, ID1 ID2
FILE_RECV_UTC = None  # a text file has no receive times: the Ingest takes data time instead

Item = RawLine | Reading | Acknowledgement
Progress = Callable[[int, int], None]


def item_time(item: Item) -> float:
    """Data time of an item, UNIX seconds."""
    return item.sample.t_s if isinstance(item, Reading) else item.t_s


def detect_format(path: str | Path) -> str:
    """``"gzip"``, ``"sqlite"`` or ``"nmea"`` from the file's first bytes; InputError when unreadable."""
    try:
        with open(path, "rb") as f:
            head = f.read(len(SQLITE_MAGIC))  # the longer of the two signatures
    except IsADirectoryError:
        raise InputError(f"replay file {path} is a directory, not a file") from None
    except FileNotFoundError:
        raise InputError(f"replay file {path} not found") from None
    except OSError as e:
        raise InputError(f"replay file {path} cannot be read: {e.strerror or e}") from None
    if head.startswith(GZIP_MAGIC):
        return "gzip"
    if is_recording_header(head):
        return "sqlite"
    return "nmea"


def source_names(paths: Sequence[str | Path]) -> list[str]:
    """One source name per file: its stem (``.gz`` removed first), made unique with ``-2``, ``-3``."""
    names: list[str] = []
    for p in paths:
        name = Path(p).name
        if name.lower().endswith(".gz"):
            name = name[:-3]
        base = Path(name).stem or name
        unique, n = base, 2
        while unique in names:
            unique, n = f"{base}-{n}", n + 1
        names.append(unique)
    return names


class _Tracker:
    """Bytes done over all files, reported to the progress callback."""

    def __init__(self, total: int, progress: Progress | None) -> None:
        self.total, self.progress = total, progress
        self.done_by_file: dict[int, int] = {}

    def set(self, index: int, done: int) -> None:
        self.done_by_file[index] = done
        if self.progress is not None:
            self.progress(min(sum(self.done_by_file.values()), self.total), self.total)


def iter_replay(paths: Sequence[str | Path], make_ingest: Callable[[str], Any],
                progress: Progress | None = None) -> Iterator[Item]:
    """All items of the files, merged in data-time order.

    Every file is checked before the first item (InputError naming a missing or
    unreadable one). ``progress(bytes_done, bytes_total)`` is called as the
    files are read (compressed bytes for gzip). When ``progress`` is a
    ProgressBar (or its ``update`` method) the bar also counts sentences.
    """
    paths = [Path(p) for p in paths]
    formats = [detect_format(p) for p in paths]
    sizes = [p.stat().st_size for p in paths]
    tracker = _Tracker(sum(sizes), progress)
    streams = [_iter_one(i, p, fmt, name, size, make_ingest, tracker)
               for i, (p, fmt, name, size) in enumerate(zip(paths, formats, source_names(paths), sizes))]
    if not streams:
        return iter(())
    merged = streams[0] if len(streams) == 1 else heapq.merge(*streams, key=item_time)
    bar = getattr(progress, "__self__", progress)
    if isinstance(bar, ProgressBar):
        return _counting(merged, bar)
    return merged


def _counting(items: Iterator[Item], bar: ProgressBar) -> Iterator[Item]:
    for item in items:
        if isinstance(item, RawLine):
            bar.count()
        yield item


def _iter_one(index: int, path: Path, fmt: str, name: str, size: int,
              make_ingest: Callable[[str], Any], tracker: _Tracker) -> Iterator[Item]:
    # the items come in lists (a chunk's, a recorded line's) and are handed on by chain in C: a generator
    # that yielded each item would be resumed once an item, through two frames
    if fmt == "sqlite":
        return chain.from_iterable(_recording_lists(index, path, size, make_ingest, tracker))
    return chain.from_iterable(_text_lists(index, path, fmt, name, size, make_ingest, tracker))


def _text_lists(index: int, path: Path, fmt: str, name: str, size: int,
                make_ingest: Callable[[str], Any], tracker: _Tracker) -> Iterator[list[Item]]:
    ingest = make_ingest(name)
    try:
        raw = open(path, "rb")
    except OSError as e:
        raise InputError(f"replay file {path} cannot be read: {e.strerror or e}") from None
    with raw:
        stream: IO[bytes] = gzip.GzipFile(fileobj=raw, mode="rb") if fmt == "gzip" else raw
        while True:
            data = _read_chunk(stream, path)
            if not data:
                break
            yield ingest.feed(data, FILE_RECV_UTC)
            tracker.set(index, raw.tell())
    yield ingest.flush()
    tracker.set(index, size)


def _read_chunk(stream: IO[bytes], path: Path) -> bytes:
    try:
        return stream.read(CHUNK_BYTES)
    except EOFError:
        log.warning("replay file %s: the gzip stream is cut short; replayed what was there", path)
    except (gzip.BadGzipFile, zlib.error) as e:
        raise InputError(f"replay file {path} is damaged gzip: {e}") from None
    except OSError as e:
        raise InputError(f"replay file {path} cannot be read: {e.strerror or e}") from None
    return b""


def _recording_lists(index: int, path: Path, size: int,
                     make_ingest: Callable[[str], Any], tracker: _Tracker) -> Iterator[Iterable[Item]]:
    from daemon.outlets.recording.reading import iter_raw  # only when a recording is replayed

    ingests: dict[str, Any] = {}
    n_total = _recorded_line_count(path)
    step = max(1, n_total // 200)
    try:
        for n, line in enumerate(iter_raw(path), start=1):
            crew = REPLAYERS.get(line.source)
            if crew is not None:  # the crew's swell report or acknowledgement: JSON, not NMEA (daemon.intake.crew)
                yield crew(line)
                continue
            ingest = ingests.get(line.source)
            if ingest is None:
                ingest = ingests[line.source] = make_ingest(line.source)
            yield ingest.feed_timed_line(line.text, line.t_s, line.recv_utc)
            if n_total and n % step == 0:
                tracker.set(index, min(size, size * n // n_total))
    except sqlite3.DatabaseError as e:
        raise InputError(f"replay file {path} is not a readable recording: {e}") from None
    for ingest in ingests.values():
        yield ingest.flush()
    tracker.set(index, size)


def _recorded_line_count(path: Path) -> int:
    """Lines in a recording (for progress only; 0 when it cannot be told)."""
    try:
        conn = sqlite3.connect(path.resolve().as_uri() + "?mode=ro", uri=True)
        try:
            return int(conn.execute("SELECT COALESCE(SUM(n_lines), 0) FROM raw_block").fetchone()[0])
        finally:
            conn.close()
    except sqlite3.Error:
        return 0


class ProgressBar:
    """One status line on a terminal: percent, sentences/s and time left. Silent when not a TTY."""

    def __init__(self, stream: IO[str] | None = None, min_interval_s: float = 0.25,
                 clock: Callable[[], float] = time.monotonic, label: str = "replay") -> None:
        self.stream = stream if stream is not None else sys.stderr
        self.label = label
        self.enabled = _is_tty(self.stream)
        self.min_interval_s = min_interval_s
        self.clock = clock
        self.started = clock()
        self.sentences = 0
        self.done = self.total = 0
        self._last_draw = float("-inf")
        self._drawn = False

    def count(self, n: int = 1) -> None:
        """``n`` more sentences replayed."""
        self.sentences += n

    def update(self, bytes_done: int, bytes_total: int) -> None:
        """Bytes read of all files; redraws at most every ``min_interval_s``."""
        self.done, self.total = bytes_done, bytes_total
        now = self.clock()
        if self.enabled and (now - self._last_draw >= self.min_interval_s or bytes_done >= bytes_total):
            self._last_draw = now
            self.stream.write("\r" + self.line(now) + "\x1b[K")
            self.stream.flush()
            self._drawn = True

    __call__ = update

    def line(self, now: float | None = None) -> str:
        """The status text, e.g. ``replay  42.0 %  18000 sentences/s  0:12 left``."""
        now = self.clock() if now is None else now
        elapsed = max(now - self.started, 1e-6)
        share = self.done / self.total if self.total else 1.0
        rate = self.sentences / elapsed
        left = elapsed * (1.0 - share) / share if share > 0 else None
        left_text = "--:--" if left is None else f"{int(left) // 60}:{int(left) % 60:02d}"
        rate_text = f"  {rate:8.0f} sentences/s" if self.sentences else ""
        return f"{self.label} {100.0 * share:5.1f} %{rate_text}  {left_text} left"

    def close(self) -> None:
        if self.enabled and self._drawn:
            self.stream.write("\n")
            self.stream.flush()


def _is_tty(stream: IO[str]) -> bool:
    try:
        return stream.isatty()
    except (AttributeError, ValueError):
        return False


__all__ = ["iter_replay", "detect_format", "source_names", "item_time", "ProgressBar",
           "CHUNK_BYTES"]
