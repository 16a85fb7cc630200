"""What each input did with what it received: one table shared by all sources.

Per source and per sentence type (the three-letter formatter, e.g. ``RMC``;
the whole address for proprietary sentences, e.g. ``PGRME`` (``P`` and the
maker's three letters when the address is free text, e.g. ``PSRF``); ``-`` for a line
that is no sentence at all; ``TAG`` for a TAG block that fails):

- ``good``: well-formed sentences of a type we understand (checksum right,
  fields parsed). What became of their values is counted beside it:
  ``implausible`` (a value outside its range, a void fix: dropped),
  ``no_variation`` (a magnetic direction with no variation known: dropped),
  ``empty`` (nothing in the fields: no reading).
- ``bad_checksum``, ``no_checksum`` (rejected: the source does not allow it),
  ``unparseable`` (a field that is not what its layout says), ``unknown``
  (a well-formed sentence of a type we do not use), ``proprietary``
  (``$P...``), ``ais`` (``!`` encapsulated lines), ``not_sentence`` (a line
  that does not start with ``$``, ``!`` or ``\\``, such as a logger's comment).
- ``last_seen``: data time (UNIX s) of the latest good sentence of the type.

The rows are bounded, whatever arrives: every standard NMEA 0183 type keeps its
own row; other names (made-up or corrupted addresses, proprietary ones) get a row
each up to ``MAX_OTHER_TYPES`` per source, then share one row, ``other``. A flood
of invented types (``$GPK1X``, ``$GPK2X``, ...) is still counted, line by line.

Per source, ``framer``: lines the framer dropped (``overlong``, ``bad_bytes``);
``time``: what the replay clock did (see :mod:`daemon.intake.timing`).
:meth:`Counters.snapshot` is ready for JSON, keys sorted.
"""

from __future__ import annotations

from collections import defaultdict
from typing import Any

from daemon.nmea0183.codec import STANDARD_FORMATTERS

SENTENCE_COUNTS = (
    "good", "bad_checksum", "no_checksum", "unparseable", "unknown", "proprietary",
    "ais", "not_sentence", "implausible", "no_variation", "empty",
)
BAD_LINE_COUNTS = ("bad_checksum", "no_checksum", "unparseable", "not_sentence")
OTHER_SENTENCES = "other"  # the shared row of the types beyond the bound
_ALWAYS_NAMED = STANDARD_FORMATTERS | {"-", "TAG"}


class Counters:
    """Counts per (source, sentence type, what); cheap to bump on the hot path."""

    MAX_OTHER_TYPES = 64  # rows per source for names that are not standard types

    def __init__(self) -> None:
        self._n: dict[tuple[str, str, str], int] = defaultdict(int)
        self._other_names: dict[str, set[str]] = {}  # per source: the non-standard names with a row
        self._last_seen: dict[tuple[str, str], float] = {}
        self._framer: dict[str, dict[str, int]] = {}
        self._time: dict[str, dict[str, int]] = {}

    def _row(self, source: str, sentence: str, register: bool = True) -> str:
        """The row a sentence type is counted in: its own, or ``other`` beyond the bound."""
        if sentence in _ALWAYS_NAMED:
            return sentence
        names = self._other_names.setdefault(source, set())
        if sentence in names:
            return sentence
        if register and len(names) < self.MAX_OTHER_TYPES:
            names.add(sentence)
            return sentence
        return OTHER_SENTENCES

    def count(self, source: str, sentence: str, what: str, n: int = 1) -> None:
        self._n[(source, self._row(source, sentence), what)] += n

    def take(self, items) -> None:
        """Apply what each RawLine among ``items`` counted for (readings and other items pass)."""
        for item in items:
            if getattr(item, "counts", None) is not None:
                self.take_line(item)

    def take_line(self, line) -> None:
        """Apply what one RawLine counted for: the pipeline's call, once a line (no tuple made for it)."""
        n = self._n
        source, sentence = line.source, line.sentence
        row = sentence if sentence in _ALWAYS_NAMED else self._row(source, sentence)  # _row's first test
        for what, k in line.counts:
            n[(source, row, what)] += k
        if line.seen:
            self._last_seen[(source, row)] = line.t_s

    def seen(self, source: str, sentence: str, t_s: float) -> None:
        self._last_seen[(source, self._row(source, sentence))] = t_s

    def set_framer(self, source: str, *, overlong: int, bad_bytes: int) -> None:
        self._framer[source] = {"bad_bytes": bad_bytes, "overlong": overlong}

    def set_time(self, source: str, events: dict[str, int]) -> None:
        self._time[source] = dict(events)

    def get(self, source: str, sentence: str, what: str) -> int:
        return self._n.get((source, self._row(source, sentence, register=False), what), 0)

    def total(self, source: str, what: str) -> int:
        """One counter summed over every sentence type of a source."""
        return sum(v for (s, _t, w), v in self._n.items() if s == source and w == what)

    def framer(self, source: str) -> dict[str, int]:
        return dict(self._framer.get(source, {"bad_bytes": 0, "overlong": 0}))

    def time_events(self, source: str) -> dict[str, int]:
        return dict(self._time.get(source, {}))

    def line_snapshot(self) -> dict[str, Any]:
        """The per-line counts only: what a recording of framed lines reproduces exactly.

        Framer drops and time repairs belong to the byte stream, which a recording
        no longer holds; they stay in ``snapshot()``, the log and the replay summary.
        """
        return {src: {"sentences": d["sentences"], "totals": d["totals"]}
                for src, d in self.snapshot().items() if d.get("sentences")}

    def snapshot(self) -> dict[str, Any]:
        """``{source: {"framer", "sentences": {type: {...}}, "time", "totals"}}``, keys sorted."""
        sources: dict[str, Any] = {}
        names = {s for s, _t, _w in self._n} | set(self._framer) | set(self._time)
        for source in sorted(names):
            per_type: dict[str, dict[str, Any]] = {}
            totals = dict.fromkeys(SENTENCE_COUNTS, 0)
            for (s, t, w), v in self._n.items():
                if s != source:
                    continue
                row = per_type.setdefault(t, dict.fromkeys(SENTENCE_COUNTS, 0))
                row[w] = row.get(w, 0) + v
                totals[w] = totals.get(w, 0) + v
            for t, row in per_type.items():
                row["last_seen"] = self._last_seen.get((source, t))
            sources[source] = {
                "framer": self.framer(source),
                "sentences": {t: dict(sorted(per_type[t].items())) for t in sorted(per_type)},
                "time": dict(sorted(self._time.get(source, {}).items())),
                "totals": dict(sorted(totals.items())),
            }
        return sources
