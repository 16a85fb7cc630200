"""What must reach the broker even when it is away: kept by offwatch itself.

Two kinds of message leave offwatch, and they need different keeping:

* **states** (retained, QoS 0: ``position``, ``current``, ``status``...): only
  the latest of each topic matters, so a state is an *upsert* by topic. After a
  reconnect (or a restart of offwatch) the latest state of every topic is
  published again.
* **queued** messages (every alert change, QoS 1; events, which are not
  retained): each one matters, in order. They wait in an ordered queue with a
  bound; when it is full the oldest is dropped and counted. An entry leaves the
  queue only when the broker has taken it (PUBACK for QoS 1). A queued message
  that is retained (an alert, the status) is also kept as its topic's latest
  state, so the link can publish it again after a reconnect once nothing of
  that topic waits in the queue (a broker that lost its retained messages, a
  display that comes later).

The store is one SQLite file in the state directory (WAL journal,
``synchronous=FULL``: a committed alert survives a power cut), or memory when
no file is given (a replay). One lock guards the connection, so the MQTT
network thread and the pipeline may both call in; the MQTT sink in fact calls
from one worker thread only.
"""

from __future__ import annotations

import os
import sqlite3
import threading
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

from daemon.errors import OutputError

DEFAULT_MAX_QUEUED = 10_000  # alert changes and events kept while the broker is away

_SCHEMA = """
CREATE TABLE IF NOT EXISTS latest_state (
    topic   TEXT PRIMARY KEY,
    payload BLOB NOT NULL,
    qos     INTEGER NOT NULL,
    retain  INTEGER NOT NULL
);
CREATE TABLE IF NOT EXISTS queued (
    seq     INTEGER PRIMARY KEY AUTOINCREMENT,
    topic   TEXT NOT NULL,
    payload BLOB NOT NULL,
    qos     INTEGER NOT NULL,
    retain  INTEGER NOT NULL
);
CREATE TABLE IF NOT EXISTS counter (
    name  TEXT PRIMARY KEY,
    value INTEGER NOT NULL
);
"""


@dataclass(frozen=True, slots=True)
class Outgoing:
    """One message as the outbox keeps it; ``seq`` is None for a state."""

    topic: str
    payload: bytes
    qos: int
    retain: bool
    seq: int | None = None


class Outbox:
    """Latest state per topic, plus an ordered, bounded queue of what must all arrive."""

    def __init__(self, path: str | os.PathLike[str] | None, max_queued: int = DEFAULT_MAX_QUEUED) -> None:
        if max_queued < 1:
            raise ValueError("max_queued must be at least 1")
        self.path = Path(path) if path is not None else None
        self.max_queued = max_queued
        self._lock = threading.RLock()
        self._depth = 0  # nesting of batch(): commit only at the outermost
        self._db = self._open()

    def _open(self) -> sqlite3.Connection:
        target = ":memory:"
        if self.path is not None:
            try:
                self.path.parent.mkdir(parents=True, exist_ok=True)
            except OSError as e:
                raise OutputError(f"cannot create the state directory {self.path.parent}: {e.strerror}") from None
            target = str(self.path)
        try:
            db = sqlite3.connect(target, check_same_thread=False, isolation_level=None)
            db.execute("PRAGMA journal_mode=WAL")
            db.execute("PRAGMA synchronous=FULL")
            db.executescript(_SCHEMA)
        except sqlite3.Error as e:
            raise OutputError(f"cannot open the MQTT outbox {target}: {e}") from None
        return db

    # -- writing -------------------------------------------------------------

    @contextmanager
    def batch(self) -> Iterator[None]:
        """Group several writes into one transaction (one fsync)."""
        with self._lock:
            if self._depth == 0:
                self._db.execute("BEGIN IMMEDIATE")
            self._depth += 1
            try:
                yield
            except BaseException:
                self._depth -= 1
                if self._depth == 0:
                    self._db.execute("ROLLBACK")
                raise
            self._depth -= 1
            if self._depth == 0:
                self._db.execute("COMMIT")

    def keep_latest(self, topic: str, payload: bytes, qos: int = 0, retain: bool = True) -> None:
        """Upsert the latest state of ``topic``."""
        with self.batch():
            self._db.execute(
                "INSERT INTO latest_state(topic, payload, qos, retain) VALUES (?, ?, ?, ?) "
                "ON CONFLICT(topic) DO UPDATE SET payload = excluded.payload, qos = excluded.qos, "
                "retain = excluded.retain",
                (topic, payload, qos, int(retain)))

    def append(self, topic: str, payload: bytes, qos: int = 1, retain: bool = False) -> int:
        """Queue one message that must arrive; returns its sequence number.

        When the queue is full the oldest entries are dropped and counted.
        """
        with self.batch():
            cur = self._db.execute("INSERT INTO queued(topic, payload, qos, retain) VALUES (?, ?, ?, ?)",
                                   (topic, payload, qos, int(retain)))
            seq = int(cur.lastrowid)
            excess = self.queued_count() - self.max_queued
            if excess > 0:
                self._db.execute("DELETE FROM queued WHERE seq IN (SELECT seq FROM queued ORDER BY seq LIMIT ?)",
                                 (excess,))
                self._add_counter("dropped", excess)
        return seq

    def store(self, items: Iterable[Outgoing]) -> list[int | None]:
        """Keep many at once in one transaction: states upserted, the rest queued.

        Returns the sequence number of each queued item (None for a state).
        """
        seqs: list[int | None] = []
        with self.batch():
            for it in items:
                if it.retain:
                    self.keep_latest(it.topic, it.payload, it.qos, it.retain)
                if it.seq is None and is_state(it.qos, it.retain):
                    seqs.append(None)
                else:
                    seqs.append(self.append(it.topic, it.payload, it.qos, it.retain))
        return seqs

    def forget_latest(self, topic: str) -> None:
        """Drop the latest state of ``topic`` (it described an earlier process)."""
        with self.batch():
            self._db.execute("DELETE FROM latest_state WHERE topic = ?", (topic,))

    def remove(self, seq: int) -> None:
        """The broker has the queued message ``seq``: forget it."""
        with self.batch():
            self._db.execute("DELETE FROM queued WHERE seq = ?", (seq,))

    def _add_counter(self, name: str, n: int) -> None:
        self._db.execute("INSERT INTO counter(name, value) VALUES (?, ?) "
                         "ON CONFLICT(name) DO UPDATE SET value = value + excluded.value", (name, n))

    # -- reading -------------------------------------------------------------

    def latest_states(self) -> list[Outgoing]:
        with self._lock:
            rows = self._db.execute("SELECT topic, payload, qos, retain FROM latest_state ORDER BY topic").fetchall()
        return [Outgoing(t, bytes(p), q, bool(r)) for t, p, q, r in rows]

    def latest(self, topic: str) -> Outgoing | None:
        with self._lock:
            row = self._db.execute("SELECT topic, payload, qos, retain FROM latest_state WHERE topic = ?",
                                   (topic,)).fetchone()
        return Outgoing(row[0], bytes(row[1]), row[2], bool(row[3])) if row else None

    def queued(self, limit: int = 100, after_seq: int = 0) -> list[Outgoing]:
        """The oldest queued messages, in order."""
        with self._lock:
            rows = self._db.execute(
                "SELECT seq, topic, payload, qos, retain FROM queued WHERE seq > ? ORDER BY seq LIMIT ?",
                (after_seq, limit)).fetchall()
        return [Outgoing(t, bytes(p), q, bool(r), s) for s, t, p, q, r in rows]

    def queued_topics(self) -> set[str]:
        """The topics that still have a message waiting in the queue."""
        with self._lock:
            return {row[0] for row in self._db.execute("SELECT DISTINCT topic FROM queued")}

    def queued_count(self) -> int:
        with self._lock:
            return int(self._db.execute("SELECT count(*) FROM queued").fetchone()[0])

    @property
    def dropped(self) -> int:
        """Queued messages dropped because the queue was full, over the file's whole life."""
        with self._lock:
            row = self._db.execute("SELECT value FROM counter WHERE name = 'dropped'").fetchone()
        return int(row[0]) if row else 0

    def close(self) -> None:
        with self._lock:
            self._db.close()


def is_state(qos: int, retain: bool) -> bool:
    """A retained QoS-0 message is a state: only its latest value matters."""
    return qos == 0 and retain
