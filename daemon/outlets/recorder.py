r"""The passage recording: every raw sentence and every published message, in SQLite.

The pipeline hands each raw line and each message to ``Recorder`` (a Sink),
which only puts it on a bounded queue (a full queue drops and counts, it never
waits). One writer thread owns the one connection: it commits about once a
second, so a power cut loses at most the last second, and SD-card writes stay
few. Every connection runs in WAL mode with ``synchronous=FULL``: with NORMAL
a power cut may take everything since the last checkpoint.

Raw sentences and messages are kept in compressed blocks: each commit writes
what arrived since the last one as a small zlib block; once the small blocks
span about a minute of data (or 60 commits, or many lines) they are replaced,
in the same transaction, by one lzma block. Alert changes are also kept in a
plain table for plain SQL.

## Recording file format (schema version 2)

One SQLite file per recording, named by its UTC start time,
`offwatch-YYYYMMDDTHHMMSSZ.sqlite`. Times are UNIX seconds (UTC).

| table | column | meaning |
| --- | --- | --- |
| `meta` | `key`, `value` | text pairs: `schema_version` (`2`), `created_utc` (ISO 8601), `software` (`offwatch <version>`), `config` (the effective configuration as JSON, rewritten by each `record_config`), `config_utc` |
| `raw_block` | `seq_first` | recording-wide number (from 0) of the block's first line; the numbers of lines that were lost (a full disk, a full queue) are skipped, never reused, so a hole in the numbering is a gap even where no `gap` row could be written |
| | `n_lines` | lines in the block |
| | `t_first`, `t_last` | earliest and latest data time in the block, s |
| | `names` | JSON array of the source names; each line gives an index into it |
| | `codec` | `zlib` (one commit's lines) or `lzma` (merged, about a minute) |
| | `data` | the compressed lines |
| `message_block` | as `raw_block` | `names` holds the full topics |
| `gap` | `stream` | `raw` or `message`: which block table lost lines (version 2) |
| | `seq_first`, `n_lost` | the numbers the lost lines would have had |
| | `t_first`, `t_last` | their data times, s (null when unknown) |
| | `wall_utc` | when it was noticed (UNIX s) |
| | `reason` | e.g. `database or disk is full`, `queue full` |
| `alert` | `t` | data time of the change, s |
| | `alert_id`, `priority`, `state`, `text`, `since` | as published on `offwatch/alerts/<id>` (`since` is ISO 8601 UTC) |
| | `topic`, `payload` | the full topic and the payload as JSON |

Indexes: `raw_block(t_first)`, `message_block(t_first)`, `alert(t)`; each
block table is unique on `seq_first` (the order to read in). A gap's row is
written with the first commit that works again; a gap at the very end of a
recording, when the disk never freed, is the one a file cannot hold: the
process says it (replay's exit status, run's ``recording_fault`` alert).
Version 1 files (no `gap` table, no skipped numbers) are read as before, and
appending to one upgrades it to version 2 (the table is added).

A block decompresses (`zlib.decompress` or `lzma.decompress`) to ASCII JSON
arrays, one line each, in arrival order:
- raw: `[time, recv, name_index, text]`
- message: `[time, name_index, retain, qos, kind, payload]`

`time` is exact, in one of three forms: an integer is the step in whole
milliseconds from the previous line's time (the first line steps from 0, so
it gives the whole time in ms); a string of digits is the step in ticks of
2^-22 s (every double time from 2004 to 2106 is a whole number of them) from
the previous line's tick count; a number with a fraction is the time itself.
`recv` is `null` (same as the data time), an integer (ms after the data time)
or the exact receive time. Decoding one raw block in Python:

```python
import json, lzma, sqlite3, zlib
db = sqlite3.connect("offwatch-20260504T063000Z.sqlite")
for codec, names, data in db.execute(
        "SELECT codec, names, data FROM raw_block ORDER BY seq_first"):
    names, ms, ticks = json.loads(names), 0, 0
    text = (zlib if codec == "zlib" else lzma).decompress(data).decode("ascii")
    for line in text.split("\n"):
        t, recv, i, sentence = json.loads(line)
        if isinstance(t, int):
            t = (ms + t) / 1000
        elif isinstance(t, str):
            t = (ticks + int(t)) / 2**22
        ms, ticks = round(t * 1000), int(t * 2**22)
        recv = t if recv is None else (ms + recv) / 1000 if isinstance(recv, int) else recv
        print(t, recv, names[i], sentence)
```

(`offwatch` itself reads them with `daemon.outlets.recorder.iter_raw` and
`iter_messages`.)

Plain SQL for the alerts: `SELECT datetime(t, 'unixepoch'), alert_id, state,
text FROM alert ORDER BY t`.
"""

from __future__ import annotations

import dataclasses
import json
import logging
import lzma
import math
import re
import shutil
import sqlite3
import threading
import time
import zlib
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from daemon import __version__
from daemon.errors import InputError, OutputError
from daemon.nmea0183.codec import has_tag_block, split_tag, tag_block
from daemon.core.payloads import ascii_json, json_default, json_encoder
from daemon.core.readings import Message, RawLine
from daemon.intake.crew import REPLAYERS as CREW_SOURCES
from estimators.params import param

log = logging.getLogger("offwatch.recorder")

SCHEMA_VERSION = 2
NAME_PREFIX = "offwatch-"
NAME_SUFFIX = ".sqlite"
SQLITE_MAGIC = b"SQLite format 3\x00"  # the SQLite file format's 16-byte header string
_MB = 1024 * 1024


@dataclass(frozen=True, slots=True)
class RecordingParams:
    """The [recording] section: where recordings go, when a new one starts, how much is kept."""

    directory: str = param("", doc="directory holding the recordings (empty: recordings/ in the state directory)")
    per: str = param("day", choices=("start", "day"),
                     doc="a new recording on each start, or one per UTC day (continued after a restart)")
    max_total_mb: float = param(2000.0, "MB", 0.1, 10_000_000.0,
                                doc="all recordings together; the oldest go first, never the current one")
    min_free_mb: float = param(200.0, "MB", 0.0, 10_000_000.0,
                               doc="free disk space to keep; below it the oldest recordings are removed")
    commit_interval_s: float = param(1.0, "s", 0.05, 10.0,
                                     doc="commit period: a power cut loses at most about this much")
    block_span_s: float = param(60.0, "s", 1.0, 3600.0,
                                doc="data time one merged compressed block covers")
    queue_size: int = param(20000, "items", 100, 1_000_000,
                            doc="items waiting for the writer; beyond it new items are dropped and counted")


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


_SCHEMA = """
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


def _decode_time(value: int | str | float, prev: tuple[int, float]) -> tuple[float, tuple[int, float]]:
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


def _decode_recv(value: int | float | None, t: float, t_ms: int) -> float:
    if value is None:
        return t
    if isinstance(value, int):
        return (t_ms + value) / 1000
    return value


_dumps = json_encoder(ensure_ascii=True, separators=(",", ":"), default=json_default)


_CODECS: dict[str, tuple[Callable[[bytes], bytes], Callable[[bytes], bytes]]] = {
    "zlib": (lambda b: zlib.compress(b, 6), zlib.decompress),
    "lzma": (lambda b: lzma.compress(b, preset=6), lzma.decompress),
}


@dataclass(slots=True)
class _Item:
    """One line of a block before encoding: its time and the JSON fields after the time."""

    t: float
    name: str
    fields: tuple[Any, ...]  # raw: (recv, text); message: (retain, qos, kind, payload as ASCII JSON text)


def _pack(items: list[_Item], codec: str) -> tuple[str, bytes, float | None, float | None]:
    """Encode items into (names JSON, compressed data, t_first, t_last)."""
    names: dict[str, int] = {}
    rows, prev = [], (0, 0)
    finite = [it.t for it in items if math.isfinite(it.t)]
    for it in items:
        index = names.setdefault(it.name, len(names))
        t_field, prev = _encode_time(it.t, prev)
        if len(it.fields) == 2:  # raw line: recv relative to its own time
            recv, text = it.fields
            rows.append(_dumps([t_field, _encode_recv(recv, it.t, prev[0]), index, text]))
        else:  # the payload's JSON is the message's own text (made once, shared with MQTT), spliced in
            retain, qos, kind, payload_text = it.fields
            rows.append(f"{_dumps([t_field, index, retain, qos, kind])[:-1]},{payload_text}]")
    data = _CODECS[codec][0]("\n".join(rows).encode("ascii"))
    return (_dumps(list(names)), data, min(finite) if finite else None,
            max(finite) if finite else None)


def _open_block(codec: str, names_json: str, data: bytes) -> tuple[list, str]:
    """A block's names and its decompressed text; an InputError when it cannot be decoded."""
    try:
        return json.loads(names_json), _CODECS[codec][1](data).decode("ascii")
    except (KeyError, ValueError, zlib.error, lzma.LZMAError) as exc:
        raise InputError(f"a recording block cannot be decoded ({codec}): {exc}") from exc


def _unpack_rows(codec: str, names_json: str, data: bytes) -> Iterator[tuple[float, int, str, list]]:
    """Decode one block into (time, ms, name, remaining fields) in order."""
    names, text = _open_block(codec, names_json, data)
    prev: tuple[int, float] = (0, 0.0)
    for line in text.split("\n"):
        row = json.loads(line)
        t, prev = _decode_time(row[0], prev)
        if len(row) == 4:  # raw: [t, recv, index, text]
            yield t, prev[0], names[row[2]], [row[1], row[3]]
        else:  # message: [t, index, retain, qos, kind, payload]
            yield t, prev[0], names[row[1]], row[2:]


# --------------------------------------------------------------------------- synchronous writer

class _Stream:
    """One block table: lines waiting for the next commit and committed small blocks to merge."""

    def __init__(self, table: str, next_seq: int):
        self.table = table
        self.next_seq = next_seq
        self.pending: list[_Item] = []
        self.small: list[tuple[int, list[_Item]]] = []  # (seq_first, items) of committed zlib blocks

    def write(self, conn: sqlite3.Connection, span_s: float, max_small: int, max_lines: int,
              final: bool) -> int:
        """Insert this commit's block, merging the small ones when due. Returns blocks merged away."""
        if not self.pending and not (final and len(self.small) > 1):
            return 0
        merge_items = [it for _, items in self.small for it in items] + self.pending
        times = [it.t for it in merge_items if math.isfinite(it.t)]
        span = (max(times) - min(times)) if times else 0.0
        due = final or span >= span_s or len(self.small) + 1 >= max_small or len(merge_items) >= max_lines
        if not due:
            self._insert(conn, self.next_seq, self.pending, "zlib")
            self.small.append((self.next_seq, self.pending))
            self.next_seq += len(self.pending)
            self.pending = []
            return 0
        merged = len(self.small)
        if self.small:
            conn.execute(f"DELETE FROM {self.table} WHERE seq_first >= ?", (self.small[0][0],))
        seq = self.small[0][0] if self.small else self.next_seq
        for start in range(0, len(merge_items), max_lines):
            chunk = merge_items[start:start + max_lines]
            self._insert(conn, seq, chunk, "lzma")
            seq += len(chunk)
        self.next_seq = seq
        self.pending, self.small = [], []
        return merged

    def rollback(self, small_before: list[tuple[int, list[_Item]]], seq_before: int,
                 pending_before: list[_Item]) -> None:
        self.small, self.next_seq, self.pending = small_before, seq_before, pending_before

    def lose_pending(self) -> tuple[int, int, float | None, float | None]:
        """The pending lines could not be written: skip their numbers (a visible hole) and seal the
        committed small blocks, which a later merge would otherwise renumber across the hole.
        Returns (seq_first, n_lost, t_first, t_last)."""
        times = [it.t for it in self.pending if math.isfinite(it.t)]
        lost = (self.next_seq, len(self.pending), min(times, default=None), max(times, default=None))
        self.next_seq += len(self.pending)
        self.pending, self.small = [], []
        return lost

    def skip(self, n: int) -> int:
        """``n`` lines never reached the writer (a full queue): skip their numbers; returns the first."""
        first = self.next_seq
        self.next_seq += n
        self.small = []
        return first

    def _insert(self, conn: sqlite3.Connection, seq: int, items: list[_Item], codec: str) -> None:
        names, data, t_first, t_last = _pack(items, codec)
        conn.execute(f"INSERT INTO {self.table} (seq_first, n_lines, t_first, t_last, names, codec, data) "
                     "VALUES (?, ?, ?, ?, ?, ?, ?)", (seq, len(items), t_first, t_last, names, codec, data))


@dataclass
class RecorderStats:
    """Counters of a Recorder (a snapshot is handed out; the writer thread owns the live one)."""

    enqueued: int = 0
    dropped: int = 0          # items refused because the queue was full
    raw_lines: int = 0        # committed raw lines (this process)
    messages: int = 0         # committed messages
    alerts: int = 0           # committed alert rows
    commits: int = 0
    blocks_merged: int = 0    # small blocks replaced by merged ones
    write_errors: int = 0     # commits that failed (their lines are lost)
    lost_raw: int = 0         # raw lines lost (failed commits and a full queue), this process
    lost_messages: int = 0    # messages lost likewise
    gaps: int = 0             # gaps opened (a run of losses counts once)
    gaps_unwritten: int = 0   # gaps whose row is not in the file yet (the disk is still failing)
    failing: bool = False     # the latest commit failed
    loss_t_first: float | None = None  # data time span of everything lost
    loss_t_last: float | None = None
    last_error: str = ""
    removed_recordings: int = 0
    last_commit_s: float = 0.0  # wall time the last commit took
    path: str = ""
    pragmas: dict[str, Any] = field(default_factory=dict)


def _text_or_none(value: Any) -> str | None:
    """A payload's value for a text column: a string as it is, anything else nothing (it stays in the JSON)."""
    return value if isinstance(value, str) else None


class RecordingWriter:
    """One recording file and its one connection, driven by one thread (no locking here).

    ``add_*`` collect in memory; ``commit()`` writes them in one transaction.
    """

    def __init__(self, path: str | Path, *, block_span_s: float = 60.0, max_small_blocks: int = 60,
                 max_block_lines: int = 6000, now_utc: float | None = None):
        self.path = Path(path)
        self.block_span_s = block_span_s
        self.max_small_blocks = max_small_blocks
        self.max_block_lines = max_block_lines
        self.conn = connect(self.path)
        try:
            self._prepare(now_utc if now_utc is not None else time.time())
        except sqlite3.Error as exc:
            self.conn.close()
            raise OutputError(f"recording {self.path} cannot be prepared: {exc}") from exc
        self.raw_stream = _Stream("raw_block", self._next_seq("raw_block"))
        self.message_stream = _Stream("message_block", self._next_seq("message_block"))
        self.pending_alerts: list[tuple] = []
        self.pending_meta: dict[str, str] = {}
        self.pending_gaps: list[list] = []  # [stream, seq_first, n_lost, t_first, t_last, wall_utc, reason]
        self.lost_raw = self.lost_messages = self.gaps_opened = 0
        self.loss_t_first: float | None = None
        self.loss_t_last: float | None = None
        self.pragmas = connection_pragmas(self.conn)

    def _prepare(self, now_utc: float) -> None:
        self.conn.executescript("BEGIN IMMEDIATE;" + _SCHEMA + "COMMIT;")
        found = self.conn.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
        if found is None:
            self.conn.execute("BEGIN IMMEDIATE")
            self.conn.executemany("INSERT INTO meta (key, value) VALUES (?, ?)", [
                ("schema_version", str(SCHEMA_VERSION)),
                ("created_utc", _iso(now_utc)),
                ("software", f"offwatch {__version__}")])
            self.conn.execute("COMMIT")
        elif int(found[0]) == 1:  # version 2 adds the gap table (created above): upgrade in place
            self.conn.execute("BEGIN IMMEDIATE")
            self.conn.execute("UPDATE meta SET value = ? WHERE key = 'schema_version'", (str(SCHEMA_VERSION),))
            self.conn.execute("COMMIT")
        elif int(found[0]) != SCHEMA_VERSION:
            raise OutputError(f"recording {self.path} has schema version {found[0]}, this offwatch "
                              f"writes {SCHEMA_VERSION}: record into a new file")

    def _next_seq(self, table: str) -> int:
        row = self.conn.execute(f"SELECT MAX(seq_first + n_lines) FROM {table}").fetchone()
        return int(row[0] or 0)

    def add_raw(self, line: RawLine) -> None:
        self.raw_stream.pending.append(_Item(line.t_s, line.source, (line.recv_utc, line.text)))

    def add_message(self, msg: Message) -> None:
        if not isinstance(msg.payload, Mapping):  # a payload is a JSON object, or nothing to keep
            raise TypeError(f"a message payload must be a mapping, found {type(msg.payload).__name__}")
        text = ascii_json(msg.payload_json())  # the blocks are ASCII (schema above)
        self.message_stream.pending.append(
            _Item(msg.t_s, msg.topic, (int(bool(msg.retain)), int(msg.qos), msg.kind, text)))
        if msg.kind == "alert":
            payload = msg.payload
            alert_id = payload.get("id") or msg.topic.rsplit("/", 1)[-1]
            # the alert table's columns are text: anything else in a payload stays in its JSON only (a list
            # bound there failed the whole batch's commit)
            self.pending_alerts.append((msg.t_s, str(alert_id), *(_text_or_none(payload.get(key)) for key in
                                        ("priority", "state", "text", "since")), msg.topic, text))

    def set_config(self, effective: Mapping[str, Any], now_utc: float | None = None) -> None:
        self.pending_meta["config"] = _dumps(dict(effective))
        self.pending_meta["config_utc"] = _iso(now_utc if now_utc is not None else time.time())

    def has_pending(self) -> bool:
        return bool(self.raw_stream.pending or self.message_stream.pending or self.pending_meta or self.pending_gaps)

    def lose(self, stream: str, lost: tuple[int, int, float | None, float | None], reason: str) -> None:
        """Count lost lines and keep their gap for the file."""
        seq_first, n_lost, t_first, t_last = lost
        if stream == "raw":
            self.lost_raw += n_lost
        else:
            self.lost_messages += n_lost
        self.loss_t_first = _min_known(self.loss_t_first, t_first)
        self.loss_t_last = _max_known(self.loss_t_last, t_last)
        if self.note_gap(stream, seq_first, n_lost, t_first, t_last, reason, time.time()):
            self.gaps_opened += 1

    def skip_dropped(self, stream: str, n: int, t_first: float | None, t_last: float | None) -> None:
        """``n`` items of ``stream`` were dropped before reaching the writer (a full queue)."""
        target = self.raw_stream if stream == "raw" else self.message_stream
        self.lose(stream, (target.skip(n), n, t_first, t_last), "queue full")

    def note_gap(self, stream: str, seq_first: int, n_lost: int, t_first: float | None, t_last: float | None,
                 reason: str, wall_utc: float) -> bool:
        """Keep a gap for the next commit that works; one that continues the previous gap of its
        stream extends it. True when it opened a new gap."""
        for gap in reversed(self.pending_gaps):
            if gap[0] == stream:
                if gap[1] + gap[2] == seq_first:
                    gap[2] += n_lost
                    gap[3] = _min_known(gap[3], t_first)
                    gap[4] = _max_known(gap[4], t_last)
                    return False
                break
        self.pending_gaps.append([stream, seq_first, n_lost, t_first, t_last, wall_utc, reason])
        return True

    def commit(self, final: bool = False) -> tuple[int, int, int, int]:
        """Write everything pending in one transaction; (raw lines, messages, alerts, merged blocks).

        ``final`` also merges the small blocks left over, so a closed recording is compact.
        On an SQLite error the transaction is rolled back, the pending lines are
        dropped (so one bad batch cannot wedge the writer) and OutputError is raised.
        """
        streams = (self.raw_stream, self.message_stream)
        if not self.has_pending() and not (final and any(len(s.small) > 1 for s in streams)):
            return 0, 0, 0, 0
        counts = (len(self.raw_stream.pending), len(self.message_stream.pending), len(self.pending_alerts))
        saved = [(list(s.small), s.next_seq, list(s.pending)) for s in streams]
        merged = 0
        try:
            self.conn.execute("BEGIN IMMEDIATE")
            for stream in streams:
                merged += stream.write(self.conn, self.block_span_s, self.max_small_blocks,
                                       self.max_block_lines, final)
            self.conn.executemany("INSERT INTO alert (t, alert_id, priority, state, text, since, topic, payload) "
                                  "VALUES (?, ?, ?, ?, ?, ?, ?, ?)", self.pending_alerts)
            self.conn.executemany("INSERT OR REPLACE INTO meta (key, value) VALUES (?, ?)",
                                  list(self.pending_meta.items()))
            self.conn.executemany("INSERT INTO gap (stream, seq_first, n_lost, t_first, t_last, wall_utc, reason) "
                                  "VALUES (?, ?, ?, ?, ?, ?, ?)", [tuple(g) for g in self.pending_gaps])
            self.conn.execute("COMMIT")
        except (sqlite3.Error, ValueError, TypeError, OverflowError) as exc:  # SQLite, or a payload JSON refuses
            if self.conn.in_transaction:
                try:
                    self.conn.execute("ROLLBACK")
                except sqlite3.Error:
                    pass  # SQLite has rolled back by itself after a full disk
            for stream, (small, seq, pending) in zip(streams, saved):
                stream.rollback(small, seq, pending)
            reason = str(exc) or exc.__class__.__name__
            for name, stream in (("raw", self.raw_stream), ("message", self.message_stream)):
                if stream.pending:
                    self.lose(name, stream.lose_pending(), reason)
            self.pending_alerts = []  # the config (pending_meta) and the gap rows wait for the next commit
            raise OutputError(f"recording {self.path}: commit failed, {counts[0]} lines and {counts[1]} messages "
                              f"lost (their numbers are skipped and the gap is marked): {reason}") from exc
        self.pending_alerts, self.pending_meta, self.pending_gaps = [], {}, []
        return (*counts, merged)

    def close(self) -> None:
        """Merge what is left, checkpoint the WAL into the file and close."""
        try:
            self.commit(final=True)
            self.conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
        finally:
            self.conn.close()


# --------------------------------------------------------------------------- where recordings go

def _min_known(a: float | None, b: float | None) -> float | None:
    return b if a is None else a if b is None else min(a, b)


def _max_known(a: float | None, b: float | None) -> float | None:
    return b if a is None else a if b is None else max(a, b)


def recording_name(t_utc: float) -> str:
    """File name of a recording started at ``t_utc`` (UNIX s): offwatch-YYYYMMDDTHHMMSSZ.sqlite."""
    return NAME_PREFIX + datetime.fromtimestamp(t_utc, timezone.utc).strftime("%Y%m%dT%H%M%SZ") + NAME_SUFFIX


_NAME_RE = re.compile(re.escape(NAME_PREFIX) + r"(\d{8})T(\d{6})Z(?:-\d+)?" + re.escape(NAME_SUFFIX) + "$")


class RecordingPolicy:
    """Names, rotation and the size cap / free-disk floor of the recordings directory.

    ``free_bytes(directory)`` is injectable for tests; by default the file
    system's free space.
    """

    def __init__(self, params: RecordingParams,
                 free_bytes: Callable[[Path], int] | None = None):
        self.params = params
        self.directory = Path(params.directory)
        self.free_bytes = free_bytes or (lambda d: shutil.disk_usage(d).free)
        self._warned_floor = False

    def recordings(self) -> list[Path]:
        """The recordings in the directory, oldest first (by the start time in the name)."""
        if not self.directory.is_dir():
            return []
        return sorted((p for p in self.directory.iterdir() if _NAME_RE.match(p.name)), key=lambda p: p.name)

    def path_for_start(self, now_utc: float) -> Path:
        """Where to record from ``now_utc``: today's recording when per="day" and it exists, else a new one."""
        try:
            self.directory.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise OutputError(f"recording directory {self.directory} cannot be made: {exc}; "
                              "set [recording] directory to a writable place") from exc
        if self.params.per == "day":
            today = _utc_day(now_utc)
            same_day = [p for p in self.recordings() if _NAME_RE.match(p.name).group(1) == today]
            if same_day:
                return same_day[-1]
        return self.new_path(now_utc)

    def new_path(self, now_utc: float) -> Path:
        path = self.directory / recording_name(now_utc)
        n = 1
        while path.exists():
            path = self.directory / recording_name(now_utc).replace(NAME_SUFFIX, f"-{n}{NAME_SUFFIX}")
            n += 1
        return path

    def needs_new(self, current: Path, now_utc: float) -> bool:
        """True when per="day" and the UTC day has moved on past the current recording's day."""
        if self.params.per != "day":
            return False
        m = _NAME_RE.match(current.name)
        return m is not None and _utc_day(now_utc) > m.group(1)

    def enforce(self, current: Path) -> list[Path]:
        """Remove the oldest recordings (never ``current``) past the size cap or under the free floor."""
        removed = []
        cap = self.params.max_total_mb * _MB
        floor = self.params.min_free_mb * _MB
        for old in self.recordings():
            if old == current:
                continue
            total = sum(_recording_bytes(p) for p in self.recordings())
            free = self.free_bytes(self.directory)
            if total <= cap and free >= floor:
                break
            reason = (f"all recordings {total / _MB:.1f} MB > cap {self.params.max_total_mb} MB" if total > cap
                      else f"free disk {free / _MB:.1f} MB < floor {self.params.min_free_mb} MB")
            size = _recording_bytes(old)
            for part in _recording_files(old):
                part.unlink(missing_ok=True)
            log.warning("removed oldest recording %s (%.1f MB): %s", old.name, size / _MB, reason)
            removed.append(old)
        free = self.free_bytes(self.directory)
        if free < floor and not self._warned_floor:
            log.warning("free disk %.1f MB is under the floor %.1f MB and only the current recording is left",
                        free / _MB, self.params.min_free_mb)
        self._warned_floor = free < floor
        return removed


def _recording_files(path: Path) -> list[Path]:
    return [path, path.with_name(path.name + "-wal"), path.with_name(path.name + "-shm")]


def _recording_bytes(path: Path) -> int:
    return sum(p.stat().st_size for p in _recording_files(path) if p.exists())


def _utc_day(t_utc: float) -> str:
    return datetime.fromtimestamp(t_utc, timezone.utc).strftime("%Y%m%d")


def _iso(t_utc: float) -> str:
    return datetime.fromtimestamp(t_utc, timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z")


# --------------------------------------------------------------------------- the Sink

_CLOSE = object()


class _Flush:
    def __init__(self) -> None:
        self.done = threading.Event()


class _Config:
    def __init__(self, effective: Mapping[str, Any]):
        self.effective = dict(effective)


class Recorder:
    """The recording Sink: enqueue from the pipeline, write from one thread, commit about once a second.

    Give it a file (``Recorder.open_file(path)``, as ``replay --record`` does:
    it waits for the disk rather than drop, a replay may wait, a live input may
    not) or a managed directory (``Recorder.open_passage(params, default_dir)``,
    as ``run`` does). With ``overflow="drop"`` (the default) a full queue drops the
    new item and counts it. ``on_commit(stats)`` is called in the writer thread
    after each commit that wrote lines.
    """

    def __init__(self, path: str | Path | None = None, *, commit_interval_s: float = 1.0,
                 block_span_s: float = 60.0, queue_size: int = 20000,
                 policy: RecordingPolicy | None = None, clock: Callable[[], float] = time.time,
                 on_commit: Callable[[RecorderStats], None] | None = None,
                 enforce_every: int = 60, overflow: str = "drop"):
        if (path is None) == (policy is None):
            raise ValueError("give a recording path or a RecordingPolicy, not both")
        if overflow not in ("drop", "wait"):
            raise ValueError(f"overflow = {overflow!r}: expected 'drop' or 'wait'")
        self._wait_when_full = overflow == "wait"
        self.commit_interval_s = commit_interval_s
        self.block_span_s = block_span_s
        self._policy = policy
        self._clock = clock
        self._on_commit = on_commit
        self._enforce_every = enforce_every
        self._queue_size = queue_size
        self._stats = RecorderStats()
        self._lock = threading.Lock()  # guards _stats, _dropped and the queue between the writer and callers
        # The queue is a list the writer takes whole (one wake and one lock a batch, not a get per
        # item): it wakes for the first item after an idle spell, at its commit deadline, for a
        # flush or close, and when the queue is full.
        self._ready = threading.Condition(self._lock)
        self._queued: list[object] = []
        self._writer_idle = False  # the writer waits for a first item, with no deadline
        self._urgent = False       # a flush, a close or a full queue: the writer takes the queue now
        self._dropped: dict[str, list] = {"raw": [0, None, None], "message": [0, None, None]}  # n, t_first, t_last
        self._config: dict[str, Any] | None = None
        self._loss_base = (0, 0, 0)  # losses of the files before the current one
        self._closed = False
        self._error: BaseException | None = None
        self._started = threading.Event()
        first_path = Path(path) if path is not None else policy.path_for_start(clock())
        self._thread = threading.Thread(target=self._run, args=(first_path,), name="offwatch-recorder",
                                        daemon=True)
        self._thread.start()
        self._started.wait()
        if self._error is not None:
            self._thread.join()
            raise self._error

    @classmethod
    def open_file(cls, path: str | Path, **options: Any) -> Recorder:
        """A recorder for ``replay --record FILE``: that one file (appended to if it exists), never dropping."""
        options.setdefault("overflow", "wait")
        return cls(path, **options)

    @classmethod
    def open_passage(cls, params: RecordingParams, default_directory: str | Path | None = None, *,
                     free_bytes: Callable[[Path], int] | None = None, clock: Callable[[], float] = time.time,
                     on_commit: Callable[[RecorderStats], None] | None = None) -> Recorder:
        """A recorder for ``offwatch run``: a recording in params.directory (or ``default_directory``
        when that is empty), a new one per start or per UTC day, the directory kept under the cap
        and above the free-disk floor. A live input never waits: a full queue drops and counts."""
        directory = params.directory or default_directory
        if not directory:
            raise OutputError("no recording directory: set [recording] directory")
        params = dataclasses.replace(params, directory=str(Path(directory).expanduser()))
        return cls(policy=RecordingPolicy(params, free_bytes), commit_interval_s=params.commit_interval_s,
                   block_span_s=params.block_span_s, queue_size=params.queue_size, clock=clock,
                   on_commit=on_commit)

    # -- the Sink protocol (called from the pipeline: never blocks)
    def raw(self, line: RawLine) -> None:
        self._offer(line)

    def message(self, msg: Message) -> None:
        self._offer(msg)

    def record_config(self, effective: Mapping[str, Any]) -> None:
        """Keep the effective configuration/parameters (JSON) in meta; also copied into each new file."""
        self._put_marker(_Config(effective), urgent=False)

    def flush(self, timeout_s: float = 10.0) -> bool:
        """Commit what is queued now and wait for it (tests, shutdown paths). False on timeout."""
        marker = _Flush()
        self._put_marker(marker, urgent=True)
        return marker.done.wait(timeout_s)

    def close(self) -> None:
        """Commit the rest, merge the small blocks, checkpoint and stop the writer. Idempotent."""
        if self._closed:
            return
        self._closed = True
        self._put_marker(_CLOSE, urgent=True)
        self._thread.join()

    @property
    def stats(self) -> RecorderStats:
        with self._lock:
            return RecorderStats(**{k: (dict(v) if isinstance(v, dict) else v)
                                    for k, v in vars(self._stats).items()})

    @property
    def path(self) -> Path:
        return Path(self.stats.path)

    def _offer(self, item: RawLine | Message) -> None:
        if self._closed:
            return
        with self._ready:
            if len(self._queued) >= self._queue_size:
                self._urgent = True
                self._ready.notify_all()
                if not self._wait_when_full:
                    self._count_drop(item)
                    return
                while len(self._queued) >= self._queue_size:
                    self._ready.wait()
            self._queued.append(item)
            self._stats.enqueued += 1
            if self._writer_idle:
                self._writer_idle = False
                self._ready.notify_all()

    def _count_drop(self, item: RawLine | Message) -> None:
        """A full queue refused ``item`` (the lock held): counted, and its number skipped later."""
        self._stats.dropped += 1
        drop = self._dropped["raw" if isinstance(item, RawLine) else "message"]
        drop[0] += 1
        drop[1], drop[2] = _min_known(drop[1], item.t_s), _max_known(drop[2], item.t_s)

    def _put_marker(self, marker: object, urgent: bool) -> None:
        """A flush, a close or the config: queued whatever the bound, in order with the lines."""
        with self._ready:
            self._queued.append(marker)
            self._urgent = self._urgent or urgent
            if urgent or self._writer_idle:
                self._writer_idle = False
                self._ready.notify_all()

    def _take_queued(self, deadline: float | None) -> list[object]:
        """Writer thread: everything queued, once the deadline passes (or, without one, once something
        comes), or at once for a flush, a close or a full queue."""
        with self._ready:
            while not self._urgent and not (deadline is None and self._queued):
                timeout = None if deadline is None else deadline - self._clock()
                if timeout is not None and timeout <= 0:
                    break
                self._writer_idle = deadline is None
                self._ready.wait(timeout)
            self._writer_idle = self._urgent = False
            batch, self._queued = self._queued, []
            self._ready.notify_all()  # a replay waiting for room (overflow="wait")
            return batch

    def _take_drops(self, writer: RecordingWriter) -> None:
        """Writer thread: give the items a full queue dropped their numbers and a gap."""
        with self._lock:
            drops = {k: v for k, v in self._dropped.items() if v[0]}
            self._dropped = {"raw": [0, None, None], "message": [0, None, None]}
        for stream, (n, t_first, t_last) in drops.items():
            writer.skip_dropped(stream, n, t_first, t_last)

    # -- the writer thread
    def _open(self, path: Path) -> RecordingWriter:
        writer = RecordingWriter(path, block_span_s=self.block_span_s,
                                 max_small_blocks=max(2, round(self.block_span_s / self.commit_interval_s)),
                                 now_utc=self._clock())
        if self._config is not None:
            writer.set_config(self._config, self._clock())
        with self._lock:
            self._stats.path = str(path)
            self._stats.pragmas = dict(writer.pragmas)
        log.info("recording to %s", path)
        self._enforce(path)
        return writer

    def _enforce(self, current: Path) -> None:
        if self._policy is None:
            return
        try:
            removed = self._policy.enforce(current)
        except OSError as exc:
            log.warning("recording cleanup failed: %s", exc)
            return
        with self._lock:
            self._stats.removed_recordings += len(removed)

    def _run(self, path: Path) -> None:
        try:
            writer = self._open(path)
        except BaseException as exc:  # handed to the constructor's thread
            self._error = exc
            self._started.set()
            return
        self._started.set()
        deadline: float | None = None
        failing = False
        closing = False
        while not closing:
            for item in self._take_queued(deadline):
                if item is _CLOSE:
                    closing = True
                    break
                if isinstance(item, _Flush):
                    writer, failing = self._commit(writer, failing)
                    deadline = None
                    item.done.set()
                    continue
                try:
                    self._add(writer, item)
                except (TypeError, ValueError, AttributeError) as exc:  # a malformed item: count, skip
                    log.warning("recording skipped an item it cannot keep (%s): %r", exc, item)
                    with self._lock:
                        self._stats.write_errors += 1
            if closing:
                break
            if deadline is None and writer.has_pending():
                deadline = self._clock() + self.commit_interval_s
            if deadline is not None and self._clock() >= deadline:
                writer, failing = self._commit(writer, failing)
                deadline = None
        try:
            writer, failing = self._commit(writer, failing)
            writer.close()
        except (OutputError, sqlite3.Error) as exc:
            log.error("recording %s: closing failed: %s", writer.path, exc)
            failing = True
        self._account_losses(writer, failing=failing)

    def _account_losses(self, writer: RecordingWriter, failing: bool, error: str = "") -> None:
        """Copy the writer's loss counters into the stats (lifetime of this process, every file)."""
        with self._lock:
            s, base = self._stats, self._loss_base
            s.lost_raw = base[0] + writer.lost_raw
            s.lost_messages = base[1] + writer.lost_messages
            s.gaps = base[2] + writer.gaps_opened
            s.gaps_unwritten = len(writer.pending_gaps)
            s.loss_t_first = _min_known(s.loss_t_first, writer.loss_t_first)
            s.loss_t_last = _max_known(s.loss_t_last, writer.loss_t_last)
            s.failing = failing
            if error:
                s.last_error = error

    def _add(self, writer: RecordingWriter, item: object) -> None:
        if isinstance(item, RawLine):
            writer.add_raw(item)
        elif isinstance(item, Message):
            writer.add_message(item)
        elif isinstance(item, _Config):
            self._config = item.effective
            writer.set_config(item.effective, self._clock())

    def _commit(self, writer: RecordingWriter, failing: bool) -> tuple[RecordingWriter, bool]:
        started = time.perf_counter()
        try:
            raw_n, msg_n, alert_n, merged = writer.commit()
        except OutputError as exc:
            if not failing:
                log.error("%s", exc)
            self._account_losses(writer, failing=True, error=str(exc))
            with self._lock:
                self._stats.write_errors += 1
            return writer, True
        if failing:
            log.warning("recording %s: commits work again; the gap is marked in the file", writer.path)
        # dropped items are newer than those just written (they found the queue full of them): their
        # gap goes after this commit's lines, its row into the next commit
        self._take_drops(writer)
        self._account_losses(writer, failing=False)
        elapsed = time.perf_counter() - started
        with self._lock:
            s = self._stats
            s.raw_lines += raw_n
            s.messages += msg_n
            s.alerts += alert_n
            s.blocks_merged += merged
            s.commits += 1 if (raw_n or msg_n) else 0
            s.last_commit_s = elapsed
            commits = s.commits
        if self._on_commit is not None and (raw_n or msg_n):
            self._on_commit(self.stats)
        if self._policy is not None:
            now = self._clock()
            if self._policy.needs_new(writer.path, now):
                writer.close()
                with self._lock:
                    self._loss_base = (self._stats.lost_raw, self._stats.lost_messages, self._stats.gaps)
                writer = self._open(self._policy.new_path(now))
            elif commits % self._enforce_every == 0:
                self._enforce(writer.path)
        return writer, False


# --------------------------------------------------------------------------- reading back

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
            yield from _unpack_rows(codec, names, data)
    finally:
        conn.close()


def iter_raw(path: str | Path) -> Iterator[RawLine]:
    """The raw sentences of a recording in the order they were recorded, times exact."""
    for t, t_ms, source, (recv, text) in _iter_block_rows(path, "raw_block"):
        yield RawLine(source=source, t_s=t, recv_utc=_decode_recv(recv, t, t_ms), text=text)


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
                       for t, _, topic, (retain, qos, kind, payload) in _unpack_rows(codec, names, data)]
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
    names, text = _open_block(codec, names_json, data)
    prev: tuple[int, float] = (0, 0.0)
    for line in text.split("\n"):
        t_text, index_text, rest = line[1:].split(",", 2)
        # mostly a step in whole ms: int() reads it far faster than json.loads
        t, prev = _decode_time(int(t_text) if t_text.lstrip("-").isdigit() else json.loads(t_text), prev)
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


# --------------------------------------------------------------------------- TAG-block NMEA export

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


__all__ = ["RecordingParams", "RecordingPolicy", "Recorder", "RecorderStats", "RecordingWriter",
           "SCHEMA_VERSION", "connect", "connection_pragmas", "recording_name", "is_recording",
           "iter_raw", "iter_messages", "iter_message_blocks", "LazyPayload", "count_message_blocks", "message_time_span", "read_meta", "recording_gaps", "Gap", "export_tag_nmea", "parse_tag_line", "read_tag_nmea",
           "tag_block"]

