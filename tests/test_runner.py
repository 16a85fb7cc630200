"""The estimators' runner: data-time ticks, the gap rule, routing by type, the order of things.

The same runner drives the service's pipeline, the smoother, the benchmarks and
these tests; the pipeline's own tests (test_pipeline.py) check it wraps it.
"""

from __future__ import annotations

import math

from estimators.base import Condition, EstimatorBase, Publication
from estimators.runner import MAX_TICKS_PER_GAP, DataClock, Runner, RunContext, run
from estimators.samples import Heading, Pressure

T0 = 1_780_000_000.0


class Recorder(EstimatorBase):
    """Logs every call; publishes each heading and reads another estimator's newest publication."""

    accepts = (Heading,)

    def __init__(self, name: str, reads: str | None = None) -> None:
        self.name, self.reads, self.calls = name, reads, []

    def step(self, sample, ctx):
        seen = ctx.latest(self.reads) if self.reads else None
        in_history = ctx.history.latest(Heading) is sample
        self.calls.append(("step", sample.t_s, seen.payload["deg"] if seen else None, in_history))
        return [Publication(sample.t_s, self.name, {"deg": sample.true_deg})]

    def tick(self, t_s, ctx):
        self.calls.append(("tick", t_s))
        return [Condition(t_s, "sensor_stale", "caution", active=False)]


def test_clock_ticks_each_whole_data_second_passed_and_never_goes_back():
    clock = DataClock()
    # GIVEN the first time: no tick yet (nothing had been running before it)
    assert clock.advance(T0 + 0.4) == []
    # WHEN time moves 2.2 s THEN the two whole seconds passed are due, oldest first
    assert clock.advance(T0 + 2.6) == [T0 + 1.0, T0 + 2.0]
    # a repeated, an earlier or a non-finite time does not move it
    assert clock.advance(T0 + 2.6) is None
    assert clock.advance(T0 + 1.0) is None
    assert clock.advance(math.nan) is None and clock.advance(math.inf) is None
    assert clock.now_s == T0 + 2.6
    assert clock.advance(T0 + 3.0) == [T0 + 3.0]


def test_a_gap_longer_than_the_limit_is_crossed_without_ticks():
    clock = DataClock()
    clock.advance(T0)
    # GIVEN a gap just inside the limit: every second is ticked
    assert len(clock.advance(T0 + MAX_TICKS_PER_GAP)) == MAX_TICKS_PER_GAP
    # WHEN the logger was off for two hours THEN no tick across it, and ticks resume a second later
    later = T0 + MAX_TICKS_PER_GAP + 7200.5
    assert clock.advance(later) == []
    assert clock.advance(later + 1.0) == [math.floor(later) + 1.0]


def test_ticks_come_before_the_sample_that_made_them_due_and_the_history_before_the_step():
    est = Recorder("a")
    got = list(run(est, [Heading(T0 + 0.5, 10.0), Heading(T0 + 2.5, 20.0)]))
    assert [x for x, _ in got] == [Heading(T0 + 0.5, 10.0), T0 + 1.0, T0 + 2.0, Heading(T0 + 2.5, 20.0)]
    assert est.calls == [("step", T0 + 0.5, None, True), ("tick", T0 + 1.0), ("tick", T0 + 2.0),
                         ("step", T0 + 2.5, None, True)]
    # a tick's outputs are handed back with its time
    assert isinstance(got[1][1][0], Condition) and got[1][1][0].t_s == T0 + 1.0


def test_without_ticks_only_samples_are_stepped():
    est = Recorder("a")
    got = list(run(est, [Heading(T0 + 0.5, 10.0), Heading(T0 + 5.5, 20.0)], tick=False))
    assert [c[0] for c in est.calls] == ["step", "step"] and len(got) == 2


def test_samples_go_only_to_estimators_that_accept_their_type_and_later_ones_see_earlier_outputs():
    first, second = Recorder("first"), Recorder("second", reads="first")
    runner = Runner([first, second])
    # WHEN a pressure arrives THEN no heading estimator is stepped, but the history keeps it
    assert runner.step(Pressure(T0, 1013.0)) == []
    assert runner.ctx.history.latest(Pressure) == Pressure(T0, 1013.0)
    # WHEN a heading arrives THEN the second estimator already sees the first one's publication of it
    outs = runner.step(Heading(T0 + 1.0, 45.0))
    assert [o.topic for o in outs] == ["first", "second"]
    assert second.calls[-1][2] == 45.0
    assert runner.ctx.latest("second").payload["deg"] == 45.0


def test_a_shared_context_carries_history_and_publications_between_runs():
    ctx = RunContext(keep_s=60.0)
    list(run(Recorder("a"), [Heading(T0, 1.0)], ctx))
    assert ctx.latest("a").payload["deg"] == 1.0 and ctx.history.keep_s == 60.0
