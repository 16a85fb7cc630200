"""Running an estimator over a list of samples as the pipeline does (tests, benchmarks, the smoother).

Pure: a minimal Context (history and the latest publications) and a driver
that ticks once a data second. The daemon's pipeline is the real thing.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Iterator
from typing import Any

from estimators.base import Output, Publication
from estimators.history import SampleHistory
from estimators.samples import Sample


class ReplayContext:
    """A minimal, pure Context for running estimators over a list of samples (tests, bench, smoother)."""

    def __init__(self, keep_s: float = 600.0) -> None:
        self.history = SampleHistory(keep_s)
        self._latest: dict[str, Publication] = {}

    def latest(self, topic: str) -> Publication | None:
        return self._latest.get(topic)

    def note(self, outputs: Iterable[Output]) -> list[Output]:
        outs = list(outputs)
        for o in outs:
            if isinstance(o, Publication):
                self._latest[o.topic] = o
        return outs


def run(estimator: Any, samples: Iterable[Sample], ctx: ReplayContext | None = None,
        tick: bool = True) -> Iterator[tuple[Sample | float, list[Output]]]:
    """Drive ``estimator`` as the pipeline does: history first, then step; a tick each data second."""
    ctx = ctx or ReplayContext()
    next_tick: float | None = None
    for s in samples:
        if tick:
            if next_tick is None:
                next_tick = math.floor(s.t_s) + 1.0
            while next_tick <= s.t_s:
                yield next_tick, ctx.note(estimator.tick(next_tick, ctx))
                next_tick += 1.0
                if s.t_s - next_tick > 600.0:
                    next_tick = math.floor(s.t_s)
        ctx.history.add(s)
        yield s, ctx.note(estimator.step(s, ctx) if isinstance(s, estimator.accepts) else ())
