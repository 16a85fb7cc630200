"""The recording's SQLite schema, the one way to open a recording, and the block codec: how a block's
lines are encoded, compressed and read back (the format itself is written out in the package's doc)."""

from __future__ import annotations

import json
import lzma
import math
import sqlite3
import zlib
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from daemon.core.payloads import json_default, json_encoder
from daemon.errors import InputError, OutputError

SCHEMA_VERSION = 2
SQLITE_MAGIC = b"SQLite format 3\x00"  # the SQLite file format's 16-byte header string


# --------------------------------------------------------------------------- connection

def connect(path: str | Path) -> sqlite3.Connection:
    """Open a recording database the one way offwatch does: WAL, synchronous=FULL, autocommit.

    ``synchronous`` is per connection (SQLite keeps no memory of it), so every
    reader and writer comes through here.
    """
    try:
        conn = sqlite3.connect(str(path), isolation_level=None, timeout=10.0)
        mode = conn.execute("PRAGMA journal_mode=WAL").fetchone()[0]
        conn.execute("PRAGMA synchronous=FULL")
    except sqlite3.Error as exc:
        raise OutputError(f"cannot open recording {path}: {exc}") from exc
    if str(mode).lower() != "wal":
        conn.close()
        raise OutputError(f"recording {path}: the file system refuses WAL mode (got {mode!r}); "
                          "put the recordings on a local disk")
    return conn


def connection_pragmas(conn: sqlite3.Connection) -> dict[str, Any]:
    """The journal mode and synchronous level a connection really runs with (FULL is 2)."""
    return {"journal_mode": conn.execute("PRAGMA journal_mode").fetchone()[0],
            "synchronous": conn.execute("PRAGMA synchronous").fetchone()[0]}


SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS raw_block (
    id INTEGER PRIMARY KEY, seq_first INTEGER NOT NULL UNIQUE, n_lines INTEGER NOT NULL,
    t_first REAL, t_last REAL, names TEXT NOT NULL, codec TEXT NOT NULL, data BLOB NOT NULL);
CREATE INDEX IF NOT EXISTS raw_block_t ON raw_block (t_first);
CREATE TABLE IF NOT EXISTS message_block (
    id INTEGER PRIMARY KEY, seq_first INTEGER NOT NULL UNIQUE, n_lines INTEGER NOT NULL,
    t_first REAL, t_last REAL, names TEXT NOT NULL, codec TEXT NOT NULL, data BLOB NOT NULL);
CREATE INDEX IF NOT EXISTS message_block_t ON message_block (t_first);
CREATE TABLE IF NOT EXISTS alert (
    id INTEGER PRIMARY KEY, t REAL NOT NULL, alert_id TEXT NOT NULL, priority TEXT,
    state TEXT, text TEXT, since TEXT, topic TEXT NOT NULL, payload TEXT NOT NULL);
CREATE INDEX IF NOT EXISTS alert_t ON alert (t);
CREATE TABLE IF NOT EXISTS gap (
    id INTEGER PRIMARY KEY, stream TEXT NOT NULL, seq_first INTEGER NOT NULL, n_lost INTEGER NOT NULL,
    t_first REAL, t_last REAL, wall_utc REAL NOT NULL, reason TEXT NOT NULL);
"""


# --------------------------------------------------------------------------- block codec

_TICK = 4194304  # 2**22 ticks a second: every double in [2**30, 2**32) s (years 2004-2106) is whole ticks


def _ticks(t: float) -> int | None:
    """``t`` in whole ticks of 2**-22 s when exactly so (and small enough to stay exact), else None."""
    scaled = t * _TICK  # exact: a power of two
    return int(scaled) if scaled.is_integer() and abs(scaled) < 2 ** 53 else None


def _encode_time(t: float, prev: tuple[int, int | None]) -> tuple[int | str | float, tuple[int, int | None]]:
    """A line's time as (field, new state); the state is (ms, ticks) of the previous line.

    An int is a step in whole ms; a string is a step in ticks of 2**-22 s; a
    float is the exact time itself. All three give the time back exactly.
    """
    prev_ms, prev_ticks = prev
    if isinstance(t, float) and not math.isfinite(t):
        return t, prev
    ms = round(t * 1000)
    ticks = _ticks(float(t))
    if ms / 1000 == t:
        return ms - prev_ms, (ms, ticks)
    if ticks is not None and prev_ticks is not None:
        return str(ticks - prev_ticks), (ms, ticks)
    return float(t), (ms, ticks)


def decode_time(value: int | str | float, prev: tuple[int, float]) -> tuple[float, tuple[int, float]]:
    """A line's time from its field and the state (ms, time) of the previous line.

    The previous line's tick count is worked out only for a step in ticks
    (rare): a reader of millions of whole-ms steps does not pay for it.
    """
    prev_ms, prev_t = prev
    if isinstance(value, int):
        ms = prev_ms + value
        return ms / 1000, (ms, ms / 1000)  # round((ms / 1000) * 1000) == ms: the error is far below 0.5
    if isinstance(value, str):
        t = (_ticks(prev_t) + int(value)) / _TICK  # the writer steps in ticks only from a whole tick count
    elif not math.isfinite(value):
        return value, prev
    else:
        t = value
    return t, (round(t * 1000), t)


def _encode_recv(recv: float, t: float, t_ms: int) -> int | float | None:
    if recv == t:
        return None
    ms = round(recv * 1000) if math.isfinite(recv) else None
    if ms is not None and ms / 1000 == recv:
        return ms - t_ms
    return float(recv)


def decode_recv(value: int | float | None, t: float, t_ms: int) -> float:
    if value is None:
        return t
    if isinstance(value, int):
        return (t_ms + value) / 1000
    return value


compact_ascii_json = json_encoder(ensure_ascii=True, separators=(",", ":"), default=json_default)


_CODECS: dict[str, tuple[Callable[[bytes], bytes], Callable[[bytes], bytes]]] = {
    "zlib": (lambda b: zlib.compress(b, 6), zlib.decompress),
    "lzma": (lambda b: lzma.compress(b, preset=6), lzma.decompress),
}


@dataclass(slots=True)
class BlockLine:
    """One line of a block before encoding: its time and the JSON fields after the time."""

    t: float
    name: str
    fields: tuple[Any, ...]  # raw: (recv, text); message: (retain, qos, kind, payload as ASCII JSON text)


def pack(items: list[BlockLine], codec: str) -> tuple[str, bytes, float | None, float | None]:
    """Encode items into (names JSON, compressed data, t_first, t_last)."""
    names: dict[str, int] = {}
    rows, prev = [], (0, 0)
    finite = [it.t for it in items if math.isfinite(it.t)]
    for it in items:
        index = names.setdefault(it.name, len(names))
        t_field, prev = _encode_time(it.t, prev)
        if len(it.fields) == 2:  # raw line: recv relative to its own time
            recv, text = it.fields
            rows.append(compact_ascii_json([t_field, _encode_recv(recv, it.t, prev[0]), index, text]))
        else:  # the payload's JSON is the message's own text (made once, shared with MQTT), spliced in
            retain, qos, kind, payload_text = it.fields
            rows.append(f"{compact_ascii_json([t_field, index, retain, qos, kind])[:-1]},{payload_text}]")
    data = _CODECS[codec][0]("\n".join(rows).encode("ascii"))
    return (compact_ascii_json(list(names)), data, min(finite) if finite else None,
            max(finite) if finite else None)


def open_block(codec: str, names_json: str, data: bytes) -> tuple[list, str]:
    """A block's names and its decompressed text; an InputError when it cannot be decoded."""
    try:
        return json.loads(names_json), _CODECS[codec][1](data).decode("ascii")
    except (KeyError, ValueError, zlib.error, lzma.LZMAError) as exc:
        raise InputError(f"a recording block cannot be decoded ({codec}): {exc}") from exc


def unpack_rows(codec: str, names_json: str, data: bytes) -> Iterator[tuple[float, int, str, list]]:
    """Decode one block into (time, ms, name, remaining fields) in order."""
    names, text = open_block(codec, names_json, data)
    prev: tuple[int, float] = (0, 0.0)
    for line in text.split("\n"):
        row = json.loads(line)
        t, prev = decode_time(row[0], prev)
        if len(row) == 4:  # raw: [t, recv, index, text]
            yield t, prev[0], names[row[2]], [row[1], row[3]]
        else:  # message: [t, index, retain, qos, kind, payload]
            yield t, prev[0], names[row[1]], row[2:]
