"""The recording Sink: the pipeline only enqueues (a full queue drops and counts, never waits, live); one
writer thread takes the queue whole, commits about once a second and rotates and trims the recordings."""

from __future__ import annotations

import dataclasses
import logging
import sqlite3
import threading
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from daemon.core.readings import Message, RawLine
from daemon.errors import OutputError
from daemon.outlets.recording.files import RecordingParams, RecordingPolicy
from daemon.outlets.recording.writer import RecordingWriter, max_known, min_known

log = logging.getLogger("offwatch.recorder")


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
        drop[1], drop[2] = min_known(drop[1], item.t_s), max_known(drop[2], item.t_s)

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
            s.loss_t_first = min_known(s.loss_t_first, writer.loss_t_first)
            s.loss_t_last = max_known(s.loss_t_last, writer.loss_t_last)
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
