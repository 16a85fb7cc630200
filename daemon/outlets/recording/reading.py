"""Reading a recording back: its raw lines and messages in order, times exact, its gaps and its meta."""

from __future__ import annotations

import json
import sqlite3
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from daemon.core.readings import Message, RawLine
from daemon.errors import InputError, OutputError
from daemon.outlets.recording.schema import (SCHEMA_VERSION, SQLITE_MAGIC, connect, decode_recv, decode_time,
                                             open_block, unpack_rows)


def is_recording_header(head: bytes) -> bool:
    """True for the first bytes of an SQLite database (the program's own recording format)."""
    return head[:len(SQLITE_MAGIC)] == SQLITE_MAGIC


def is_recording(path: str | Path) -> bool:
    """True when the file is an SQLite database (the program's own recording format)."""
    try:
        with open(path, "rb") as f:
            return is_recording_header(f.read(len(SQLITE_MAGIC)))
    except OSError:
        return False


def _open_for_reading(path: str | Path) -> sqlite3.Connection:
    if not is_recording(path):
        raise InputError(f"{path} is not an offwatch recording (no SQLite database there)")
    try:
        conn = connect(path)
    except OutputError as exc:
        raise InputError(str(exc)) from exc
    try:
        found = conn.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
    except sqlite3.Error as exc:
        conn.close()
        raise InputError(f"{path} is an SQLite database but not an offwatch recording: {exc}") from exc
    if found is None or int(found[0]) > SCHEMA_VERSION:
        conn.close()
        raise InputError(f"{path}: recording schema version {found and found[0]} is not readable by "
                         f"this offwatch (reads up to {SCHEMA_VERSION})")
    return conn


def _iter_block_rows(path: str | Path, table: str) -> Iterator[tuple[float, int, str, list]]:
    conn = _open_for_reading(path)
    try:
        for codec, names, data in conn.execute(f"SELECT codec, names, data FROM {table} ORDER BY seq_first"):
            yield from unpack_rows(codec, names, data)
    finally:
        conn.close()


def iter_raw(path: str | Path) -> Iterator[RawLine]:
    """The raw sentences of a recording in the order they were recorded, times exact."""
    for t, t_ms, source, (recv, text) in _iter_block_rows(path, "raw_block"):
        yield RawLine(source=source, t_s=t, recv_utc=decode_recv(recv, t, t_ms), text=text)


def iter_messages(path: str | Path) -> Iterator[Message]:
    """The published messages of a recording in the order they were published."""
    for block in iter_message_blocks(path):
        yield from block


def iter_message_blocks(path: str | Path, keep: Callable[[str, float], bool] | None = None, *,
                        lazy: bool = False) -> Iterator[list[Message]]:
    """The published messages a block at a time (about a minute of data each), in order.

    ``keep(topic, t)`` (optional) is asked for each message before its payload
    is decoded: a long recording read for a plot skips most of its JSON.
    ``lazy``: each payload stays JSON text until it is first read (a
    ``LazyPayload``): a reader that looks at few of the messages it is handed
    (an export's track point a minute out of a fix a second) decodes only those.
    """
    conn = _open_for_reading(path)
    try:
        for codec, names, data in conn.execute("SELECT codec, names, data FROM message_block ORDER BY seq_first"):
            if keep is None and not lazy:
                yield [Message(t_s=t, topic=topic, payload=payload, retain=bool(retain), qos=qos, kind=kind)
                       for t, _, topic, (retain, qos, kind, payload) in unpack_rows(codec, names, data)]
            else:
                yield list(_unpack_messages(codec, names, data, keep, lazy))
    finally:
        conn.close()


def _unpack_messages(codec: str, names_json: str, data: bytes, keep: Callable[[str, float], bool] | None,
                     lazy: bool) -> Iterator[Message]:
    """A message block's messages, reading only the time and topic of a line ``keep`` refuses.

    A message line starts ``[<time>,<topic index>,``: both are plain JSON
    numbers or a string of digits, never holding a comma.
    """
    names, text = open_block(codec, names_json, data)
    prev: tuple[int, float] = (0, 0.0)
    for line in text.split("\n"):
        t_text, index_text, rest = line[1:].split(",", 2)
        # mostly a step in whole ms: int() reads it far faster than json.loads
        t, prev = decode_time(int(t_text) if t_text.lstrip("-").isdigit() else json.loads(t_text), prev)
        topic = names[int(index_text)]
        if keep is None or keep(topic, t):
            retain, qos, kind, payload = _message_fields(rest, lazy)
            yield Message(t_s=t, topic=topic, payload=payload, retain=bool(retain), qos=qos, kind=kind)


# the message kinds as the writer puts them (readings.Message.kind); any other is decoded the slow way
_KIND_TEXT = {f'"{k}"': k for k in ("state", "event", "alert", "status")}


def _message_fields(rest: str, lazy: bool) -> tuple[Any, Any, Any, Any]:
    """(retain, qos, kind, payload) from a message line after its topic index: ``retain,qos,"kind",{...}]``.

    Lazily, the payload is cut out as text: retain is ``1``/``0``, qos
    digits and kind one of the known words, so the first three commas end
    them; a line of any other shape is decoded whole.
    """
    if lazy:
        head = rest.split(",", 3)
        if len(head) == 4:
            retain, qos, kind, payload = head
            if retain in ("1", "0") and qos.isdigit() and kind in _KIND_TEXT and payload.endswith("]"):
                return retain == "1", int(qos), _KIND_TEXT[kind], LazyPayload(payload[:-1])
    return tuple(json.loads("[" + rest))  # type: ignore[return-value]


class LazyPayload(Mapping):
    """A recorded payload kept as its JSON text and decoded on first reading (then kept decoded)."""

    __slots__ = ("_text", "_value")

    def __init__(self, text: str) -> None:
        self._text = text
        self._value: dict[str, Any] | None = None

    def _decoded(self) -> dict[str, Any]:
        if self._value is None:
            try:
                value = json.loads(self._text)
            except ValueError as exc:
                raise InputError(f"a recorded message's payload cannot be decoded: {exc}") from None
            if not isinstance(value, dict):
                raise InputError("a recorded message's payload is not a JSON object")
            self._value = value
        return self._value

    def __getitem__(self, key: str) -> Any:
        return self._decoded()[key]

    def get(self, key: str, default: Any = None) -> Any:
        return self._decoded().get(key, default)

    def __iter__(self) -> Iterator[str]:
        return iter(self._decoded())

    def __len__(self) -> int:
        return len(self._decoded())

    def __repr__(self) -> str:
        return f"LazyPayload({self._decoded()!r})"


def message_time_span(path: str | Path) -> tuple[float, float] | None:
    """(first, last) data time of a recording's messages from the block index, without decoding a block."""
    conn = _open_for_reading(path)
    try:
        first, last = conn.execute("SELECT MIN(t_first), MAX(t_last) FROM message_block").fetchone()
    finally:
        conn.close()
    return None if first is None else (float(first), float(last))


def count_message_blocks(path: str | Path) -> int:
    """How many message blocks a recording holds (for a progress bar)."""
    conn = _open_for_reading(path)
    try:
        return int(conn.execute("SELECT COUNT(*) FROM message_block").fetchone()[0])
    finally:
        conn.close()


@dataclass(frozen=True, slots=True)
class Gap:
    """Lines a recording lost: from its ``gap`` rows, or a hole in the block numbering."""

    stream: str             # "raw" or "message"
    seq_first: int
    n_lost: int
    t_first: float | None   # data time span, s (from the blocks around a hole when no row tells)
    t_last: float | None
    reason: str


def recording_gaps(path: str | Path) -> list[Gap]:
    """Every gap of a recording, in order per stream: the rows the writer left, and any hole in
    the numbering no row covers (a gap whose row could not be written before the file ended)."""
    conn = _open_for_reading(path)
    try:
        has_table = conn.execute("SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = 'gap'").fetchone()
        rows = conn.execute("SELECT stream, seq_first, n_lost, t_first, t_last, reason FROM gap "
                            "ORDER BY stream, seq_first").fetchall() if has_table else []
        gaps = [Gap(*row) for row in rows]
        for stream, table in (("raw", "raw_block"), ("message", "message_block")):
            covered = {(g.seq_first, g.seq_first + g.n_lost) for g in gaps if g.stream == stream}
            expected, t_before = 0, None
            for seq_first, n_lines, t_first, t_last in conn.execute(
                    f"SELECT seq_first, n_lines, t_first, t_last FROM {table} ORDER BY seq_first"):
                if seq_first > expected and not _covered(covered, expected, seq_first):
                    gaps.append(Gap(stream, expected, seq_first - expected, t_before, t_first,
                                    "lines missing (no gap row: the writer could not record it)"))
                expected, t_before = seq_first + n_lines, t_last
    finally:
        conn.close()
    return sorted(gaps, key=lambda g: (g.stream, g.seq_first))


def _covered(spans: set[tuple[int, int]], start: int, end: int) -> bool:
    """Whether the rows' spans cover [start, end) (contiguous gap rows may split one hole)."""
    at = start
    for first, stop in sorted(spans):
        if first <= at < stop:
            at = stop
    return at >= end


def read_meta(path: str | Path) -> dict[str, Any]:
    """The meta table: schema_version as int, config parsed from JSON, the rest as text."""
    conn = _open_for_reading(path)
    try:
        meta: dict[str, Any] = dict(conn.execute("SELECT key, value FROM meta").fetchall())
    finally:
        conn.close()
    meta["schema_version"] = int(meta["schema_version"])
    if "config" in meta:
        meta["config"] = json.loads(meta["config"])
    return meta
