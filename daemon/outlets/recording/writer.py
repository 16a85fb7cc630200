"""One recording file written by one thread: lines and messages collected, then committed about once a
second as compressed blocks (small zlib blocks merged into about a minute's lzma block), alert rows, the
config, and the gaps where lines were lost."""

from __future__ import annotations

import math
import sqlite3
import time
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from daemon import __version__
from daemon.core.payloads import ascii_json, iso_utc
from daemon.core.readings import Message, RawLine
from daemon.errors import OutputError
from daemon.outlets.recording.schema import (SCHEMA, SCHEMA_VERSION, BlockLine, compact_ascii_json, connect,
                                             connection_pragmas, pack)


class _Stream:
    """One block table: lines waiting for the next commit and committed small blocks to merge."""

    def __init__(self, table: str, next_seq: int):
        self.table = table
        self.next_seq = next_seq
        self.pending: list[BlockLine] = []
        self.small: list[tuple[int, list[BlockLine]]] = []  # (seq_first, items) of committed zlib blocks

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

    def rollback(self, small_before: list[tuple[int, list[BlockLine]]], seq_before: int,
                 pending_before: list[BlockLine]) -> None:
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

    def _insert(self, conn: sqlite3.Connection, seq: int, items: list[BlockLine], codec: str) -> None:
        names, data, t_first, t_last = pack(items, codec)
        conn.execute(f"INSERT INTO {self.table} (seq_first, n_lines, t_first, t_last, names, codec, data) "
                     "VALUES (?, ?, ?, ?, ?, ?, ?)", (seq, len(items), t_first, t_last, names, codec, data))


def _text_or_none(value: Any) -> str | None:
    """A payload's value for a text column: a string as it is, anything else nothing (it stays in the JSON)."""
    return value if isinstance(value, str) else None


def min_known(a: float | None, b: float | None) -> float | None:
    """The earlier of two data times, either of which may be unknown (a span of lost lines)."""
    return b if a is None else a if b is None else min(a, b)


def max_known(a: float | None, b: float | None) -> float | None:
    """The later of two data times, either of which may be unknown."""
    return b if a is None else a if b is None else max(a, b)


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
        self.conn.executescript("BEGIN IMMEDIATE;" + SCHEMA + "COMMIT;")
        found = self.conn.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
        if found is None:
            self.conn.execute("BEGIN IMMEDIATE")
            self.conn.executemany("INSERT INTO meta (key, value) VALUES (?, ?)", [
                ("schema_version", str(SCHEMA_VERSION)),
                ("created_utc", iso_utc(now_utc)),
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
        self.raw_stream.pending.append(BlockLine(line.t_s, line.source, (line.recv_utc, line.text)))

    def add_message(self, msg: Message) -> None:
        if not isinstance(msg.payload, Mapping):  # a payload is a JSON object, or nothing to keep
            raise TypeError(f"a message payload must be a mapping, found {type(msg.payload).__name__}")
        text = ascii_json(msg.payload_json())  # the blocks are ASCII (schema above)
        self.message_stream.pending.append(
            BlockLine(msg.t_s, msg.topic, (int(bool(msg.retain)), int(msg.qos), msg.kind, text)))
        if msg.kind == "alert":
            payload = msg.payload
            alert_id = payload.get("id") or msg.topic.rsplit("/", 1)[-1]
            # the alert table's columns are text: anything else in a payload stays in its JSON only (a list
            # bound there failed the whole batch's commit)
            self.pending_alerts.append((msg.t_s, str(alert_id), *(_text_or_none(payload.get(key)) for key in
                                        ("priority", "state", "text", "since")), msg.topic, text))

    def set_config(self, effective: Mapping[str, Any], now_utc: float | None = None) -> None:
        self.pending_meta["config"] = compact_ascii_json(dict(effective))
        self.pending_meta["config_utc"] = iso_utc(now_utc if now_utc is not None else time.time())

    def has_pending(self) -> bool:
        return bool(self.raw_stream.pending or self.message_stream.pending or self.pending_meta or self.pending_gaps)

    def lose(self, stream: str, lost: tuple[int, int, float | None, float | None], reason: str) -> None:
        """Count lost lines and keep their gap for the file."""
        seq_first, n_lost, t_first, t_last = lost
        if stream == "raw":
            self.lost_raw += n_lost
        else:
            self.lost_messages += n_lost
        self.loss_t_first = min_known(self.loss_t_first, t_first)
        self.loss_t_last = max_known(self.loss_t_last, t_last)
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
                    gap[3] = min_known(gap[3], t_first)
                    gap[4] = max_known(gap[4], t_last)
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
