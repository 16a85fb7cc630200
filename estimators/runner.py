"""The one way to drive estimators in data time: for the service, the smoother,
the benchmarks and the tests alike.

Theory of operation. Estimators never read a clock: "now" is the newest time
they were given. The runner keeps that data time (``DataClock``) and, each
time it moves, gives every estimator a ``tick`` once per whole data second
that has passed (for timeouts and rate-limited publications), *before* the
sample that moved it is added to the history and stepped. A sample goes only
to the estimators whose ``accepts`` names its exact type, in the order they
were listed (a later one may read an earlier one's newest publication through
the context).

The gap rule: a jump in data time of more than ``MAX_TICKS_PER_GAP`` seconds
(a logger switched off, files hours apart) is crossed without ticks, so the
first sample after it is handled before any timeout is judged. Live, the
service ticks with the wall clock every second, so a feed falling silent is
still noticed.

Sensors that lie: an estimator that finds one returns a ``Distrust`` of its
sample kind. From then on the runner keeps that kind out of the history and
from every estimator but those with ``sees_distrusted`` (the one watching the
sensor, the displays), counts what it withheld (``distrusted``), and calls
``on_distrust(kind, active, since_s)`` on any estimator that defines it, until
a ``Distrust`` with ``active`` False ends it. Whether a sample is withheld is
decided as it enters.

This is the discrete-time event loop of a sans-I/O design: the caller does the
I/O and decides what to do with the outputs (the daemon's pipeline publishes
them and turns conditions into alerts; a test or a benchmark reads them).
"""

from __future__ import annotations

import logging
import math
from collections.abc import Iterable, Iterator, Sequence
from typing import Any

from estimators.base import Distrust, Output, Publication
from estimators.history import SampleHistory
from estimators.samples import KIND_NAMES, Sample

log = logging.getLogger(__name__)

LAST_COUNTABLE_S = 2.0 ** 52  # from here on t + 1 s == t in a float: the tick loop would never end
MAX_TICKS_PER_GAP = 600  # a data gap longer than this (s) is crossed in one step, not one tick per second
_SILENT = (tuple, list)  # an empty one of these is an estimator saying nothing (a generator is never taken so)


class RunContext:
    """What an estimator may see: the recent samples and the newest publication per topic."""

    def __init__(self, keep_s: float = 600.0) -> None:
        self.history = SampleHistory(keep_s)
        self._latest: dict[str, Publication] = {}

    def latest(self, topic: str) -> Publication | None:
        return self._latest.get(topic)

    def note(self, outputs: Iterable[Output]) -> list[Output]:
        """Keep the newest publication of each topic; hand the outputs back as a list."""
        outs = list(outputs)
        for o in outs:
            if isinstance(o, Publication):
                self._latest[o.topic] = o
        return outs


class DataClock:
    """Data time and the once-a-second tick schedule, with the gap rule."""

    def __init__(self) -> None:
        self.now_s: float | None = None
        self._next_tick_s = 0.0

    def advance(self, t_s: float) -> list[float] | None:
        """Move to ``t_s``: the tick times now due (oldest first), or None when time did not move
        (a non-finite, repeated or earlier time never moves it back)."""
        if not math.isfinite(t_s) or t_s >= LAST_COUNTABLE_S or (self.now_s is not None and t_s <= self.now_s):
            return None
        if self.now_s is None or t_s - self._next_tick_s > MAX_TICKS_PER_GAP:
            self._next_tick_s = math.floor(t_s) + 1.0  # the first time, or across a long gap: no ticks
        self.now_s = t_s
        due: list[float] = []
        while self._next_tick_s <= t_s:
            due.append(self._next_tick_s)
            self._next_tick_s += 1.0
        return due


class Runner:
    """Estimators, their context and the data clock: samples in, outputs out, in production order."""

    def __init__(self, estimators: Sequence[Any], ctx: RunContext | None = None) -> None:
        self.estimators = list(estimators)
        self.ctx = ctx if ctx is not None else RunContext()
        self.clock = DataClock()
        self._routes: dict[type, list[Any]] = {kind: [] for kind in KIND_NAMES}
        for est in self.estimators:
            for kind in est.accepts:
                self._routes.setdefault(kind, []).append(est)
        # kinds not believed now: kind -> [since (data time), reason, samples withheld]
        self.distrusted: dict[str, list] = {}

    def tick(self, t_s: float) -> list[Output]:
        """Every estimator's tick at data time ``t_s``, in order."""
        out: list[Output] = []
        for est in self.estimators:
            said = est.tick(t_s, self.ctx)
            if said or type(said) not in _SILENT:  # as in step
                out += self._take(said)
        return out

    def step(self, sample: Sample) -> list[Output]:
        """The sample into the history, then to each estimator that accepts its type (a distrusted
        kind: only to those that see distrusted samples, and not into the history)."""
        withheld = self.distrusted.get(KIND_NAMES[type(sample)])  # kind_of, without the call
        ctx = self.ctx
        if withheld is None:
            ctx.history.add(sample)
        else:
            withheld[2] += 1
        out: list[Output] = []
        for est in self._routes.get(type(sample), ()):
            if withheld is None or getattr(est, "sees_distrusted", False):
                said = est.step(sample, ctx)
                if said or type(said) not in _SILENT:  # most steps say nothing: _take's first test, without the call
                    out += self._take(said)
        return out

    def _take(self, outputs: Iterable[Output]) -> Sequence[Output]:
        if not outputs and isinstance(outputs, (tuple, list)):  # most steps say nothing: nothing to note
            return outputs
        outs = self.ctx.note(outputs)
        for o in outs:
            if isinstance(o, Distrust):
                self._distrust(o)
        return outs

    def _distrust(self, d: Distrust) -> None:
        """The one place a kind of sample stops (or starts again) reaching the fusing estimators."""
        if d.active and d.kind not in self.distrusted:
            self.distrusted[d.kind] = [d.t_s, d.reason, 0]
            log.warning("%s samples withheld from the estimators: %s", d.kind, d.reason)
        elif not d.active and d.kind in self.distrusted:
            withheld = self.distrusted.pop(d.kind)[2]
            log.warning("%s samples used again (%d withheld): %s", d.kind, withheld, d.reason)
        else:
            return
        for est in self.estimators:  # an estimator may undo what it fused since the evidence began
            hook = getattr(est, "on_distrust", None)
            if hook is not None:
                hook(d.kind, d.active, d.since_s)

    def feed(self, sample: Sample, tick: bool = True) -> Iterator[tuple[Sample | float, list[Output]]]:
        """The ticks the sample's time makes due (``(tick time, outputs)``), then ``(sample, outputs)``."""
        due = self.clock.advance(sample.t_s)
        if tick and due:
            for t in due:
                yield t, self.tick(t)
        yield sample, self.step(sample)


def run(estimators: Any, samples: Iterable[Sample], ctx: RunContext | None = None,
        tick: bool = True) -> Iterator[tuple[Sample | float, list[Output]]]:
    """Drive one estimator (or a sequence of them) over ``samples`` (time order) as the service does.

    Yields ``(tick time, outputs)`` for each data second's tick and ``(sample, outputs)`` for each
    sample. ``tick=False`` skips the ticks (the smoother's forward pass, which needs no publications).
    """
    runner = Runner(estimators if isinstance(estimators, Sequence) else [estimators], ctx)
    for s in samples:
        yield from runner.feed(s, tick)
