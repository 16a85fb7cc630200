"""Reading a passage back: the messages it published, for exports and the report.

A recording already holds every message the service published: those are
read straight from it (``recorder.iter_messages``), never replayed again. A
plain NMEA file (TAG blocks or not, gzipped or not) has no messages of its
own: it is replayed through the very same pipeline as ``replay``, in memory,
and its messages are handed on as they leave.

``iter_readings`` gives the plausible readings of a source (parsed and timed
by the ingest, no estimators), one source per kind as the service's priority
chose them: what the RTS smoother needs to go over the passage again
afterwards, seeing what the live filters saw (never two receivers at once).

Both ask the priority selector again, quietly: what it says (a receiver fallen
silent, two that disagree) was logged when the passage was live.
"""

from __future__ import annotations

import sys
from collections.abc import Callable, Iterator
from pathlib import Path

from daemon.core.assembly import build
from daemon.core.config import Config
from daemon.core.readings import Message, RawLine, Reading
from daemon.errors import InputError
from daemon.intake.replayfiles import ProgressBar, detect_format, iter_replay

Progress = Callable[[int, int], None]


def is_recording_file(source: str | Path) -> bool:
    """True for the program's own recording (told by its first bytes, never by its name)."""
    return detect_format(source) == "sqlite"


class _Keeper:
    """A sink that holds the pipeline's messages until the reader hands them on."""

    def __init__(self) -> None:
        self.pending: list[Message] = []

    def raw(self, line: RawLine) -> None:
        pass

    def message(self, msg: Message) -> None:
        self.pending.append(msg)

    def close(self) -> None:
        pass


def iter_passage(source: str | Path, cfg: Config, *, progress: Progress | None = None,
                 keep: Callable[[str, float], bool] | None = None, lazy: bool = False) -> Iterator[Message]:
    """Every message of the passage in the order it was published.

    ``progress(done, total)`` is called as the source is read (blocks of a
    recording, bytes of a text file). ``keep(topic, t)``, when given, may
    refuse messages of a recording before they are decoded (thinning a long
    passage for a plot); a replayed file's messages all come through.
    ``lazy``: a recording's payloads are decoded when first read
    (``recorder.LazyPayload``), for a reader that reads few of them.
    """
    source = Path(source)
    if not source.is_file():
        raise InputError(f"{source} not found (a recording or an NMEA file)")
    if is_recording_file(source):
        yield from _recorded_messages(source, progress, keep, lazy)
        return
    keeper = _Keeper()
    parts = build(cfg, [keeper], live=False)
    pipe = parts.pipeline
    pipe.selector.quiet = True
    try:
        for item in iter_replay([source], parts.make_ingest, progress=progress):
            pipe.feed(item)
            if keeper.pending:
                yield from keeper.pending
                keeper.pending.clear()
    finally:
        pipe.close()
    yield from keeper.pending
    keeper.pending.clear()


def _recorded_messages(source: Path, progress: Progress | None,
                       keep: Callable[[str, float], bool] | None, lazy: bool) -> Iterator[Message]:
    from daemon.outlets.recording.reading import count_message_blocks, iter_message_blocks

    total = count_message_blocks(source)
    for done, block in enumerate(iter_message_blocks(source, keep, lazy=lazy), start=1):
        yield from block
        if progress is not None:
            progress(done, total)


def iter_readings(source: str | Path, cfg: Config) -> Iterator[Reading]:
    """The plausible readings of a recording's raw lines or of an NMEA file, in data-time order,
    from the source the configured priority follows for each kind (as ``Pipeline.feed`` chooses)."""
    parts = build(cfg, [], live=False)
    selector = parts.pipeline.selector
    selector.quiet = True
    for item in iter_replay([Path(source)], parts.make_ingest):
        if isinstance(item, Reading) and selector.accept(item):
            yield item


def passage_span_s(source: str | Path) -> float | None:
    """A recording's length in seconds from its block index; None for a text file (not known before reading)."""
    if not is_recording_file(source):
        return None
    from daemon.outlets.recording.reading import message_time_span
    span = message_time_span(source)
    return None if span is None else span[1] - span[0]


def is_event_or_alert(topic: str) -> bool:
    """``<prefix>/events`` or ``<prefix>/alerts/<id>`` (interface.md): kept whole by every thin reader."""
    return "/alerts/" in topic or topic.rsplit("/", 1)[-1] == "events"


class Thinner:
    """A ``keep`` for ``iter_passage``: each state topic at most once every ``every_s`` of data time
    (``status`` at most once every ``status_every_s``); events and alerts always."""

    def __init__(self, every_s: float, status_every_s: float) -> None:
        self.every_s = every_s
        self.status_every_s = status_every_s
        self._next: dict[str, float] = {}

    def __call__(self, topic: str, t: float) -> bool:
        if is_event_or_alert(topic):
            return True
        name = topic.rsplit("/", 1)[-1]
        due = self._next.get(topic)
        if due is not None and t < due:
            return False
        self._next[topic] = t + (self.status_every_s if name == "status" else self.every_s)
        return True


def terminal_progress(label: str) -> ProgressBar | None:
    """A progress bar on stderr when it is a terminal, else None (no output at all)."""
    if not sys.stderr.isatty():
        return None
    return ProgressBar(label=label)


__all__ = ["iter_passage", "iter_readings", "is_recording_file", "terminal_progress", "passage_span_s", "Thinner",
           "is_event_or_alert"]
