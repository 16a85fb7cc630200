"""The one loop shared by ``run`` and ``replay``: readings in, estimators step,
outputs published and recorded.

Every item passes through ``Pipeline.feed``: a raw line goes to the sinks (the
recorder keeps it), a reading is checked against the source priority, added to
the history and handed to each estimator that accepts its kind (a kind an
estimator has said not to believe, ``Distrust``, is withheld by the runner and
listed in the status). What the
estimators return becomes Messages (publications) or alert changes (through the
alert manager). Data time drives everything, kept by the estimators' runner
(``estimators.runner``: the same loop, gap rule included, that the smoother,
the benchmarks and the tests use): once per data second every estimator and
then the alert manager get a tick, and every ``status_every_s`` the status is
published. In ``run`` the service also ticks with the wall clock so
a silent feed is noticed when nothing arrives at all.

Adding a topic is adding an estimator to ``build_estimators``: the pipeline
publishes whatever it returns.

A high-rate sentence (a 10 Hz compass, a 5 Hz log) walks the whole way as one
reading each, not as sums kept between fixes: the estimators use each heading
at its own time (the apparent wind takes the heading nearest before it, the
frozen-compass check the spread of the headings across a turn), which a mean
or a circular sum would not keep. The per-item path is kept short instead.
"""

from __future__ import annotations

import logging
import queue
from collections.abc import Callable, Iterable, Sequence
from typing import Any

from daemon.core.payloads import iso_utc, payload as make_payload
from daemon.core.readings import Acknowledgement, Message, RawLine, Reading, Sink
from daemon.intake.acks import ack_items
from daemon.intake.swell import parse_swell, swell_items
from estimators.base import Condition, Distrust, Publication
from estimators.runner import Runner
from estimators.samples import KIND_NAMES

log = logging.getLogger(__name__)


class Pipeline:
    def __init__(self, estimators: Sequence[Any], sinks: Sequence[Sink], alerts: Any,
                 *, prefix: str = "offwatch", selector: Any = None, counters: Any = None,
                 status_every_s: float = 10.0, extra_status: Any = None) -> None:
        self.estimators = list(estimators)
        self.sinks = list(sinks)
        self.alerts = alerts
        self.prefix = prefix.rstrip("/")
        self.selector = selector
        self.counters = counters
        self.status_every_s = status_every_s
        self.extra_status = extra_status  # callable -> dict, live health of inputs/outputs
        self.runner = Runner(self.estimators)
        self.ctx = self.runner.ctx
        self._clock = self.runner.clock
        self._next_status_s = 0.0
        self._last_seen: dict[str, float] = {}
        self._commands: queue.SimpleQueue[tuple[str, Any]] = queue.SimpleQueue()
        self.messages_out = 0

    # -- the doorway -------------------------------------------------------

    def feed(self, item: RawLine | Reading | Acknowledgement) -> None:
        if not self._commands.empty():  # checked here too: on every item, the call saved
            self._run_commands(item.sample.t_s if isinstance(item, Reading) else item.t_s)
        self._take(item)

    def _take(self, item: RawLine | Reading | Acknowledgement) -> None:
        if isinstance(item, RawLine):  # first: every line is one, half the items
            if self.counters is not None:
                self.counters.take_line(item)
            for sink in self.sinks:
                sink.raw(item)
            # Most items carry the time of the one before (a second's lines share their TAG block's time, a
            # line's readings its time): the clock would not move, and _advance is not called for them.
            # Any other time (later, the first, NaN) goes to _advance, whose clock judges it as before.
            t_s, now_s = item.t_s, self._clock.now_s
            if now_s is None or not t_s <= now_s:
                self._advance(t_s)
            return
        if isinstance(item, Acknowledgement):  # a recorded one, replayed: the alert manager's, as live
            self._emit_all(self.alerts.acknowledge(item.alert_id, item.t_s))
            return
        if self.selector is not None and not self.selector.accept(item):
            return
        sample = item.sample
        t_s = sample.t_s
        now_s = self._clock.now_s
        if now_s is None or not t_s <= now_s:  # as for a line, above
            self._advance(t_s)
        self._last_seen[KIND_NAMES[type(sample)]] = t_s  # kind_of, without the call
        outputs = self.runner.step(sample)
        if outputs:  # most samples make none: no _handle call for them
            self._handle(outputs)

    def feed_all(self, items: Iterable[RawLine | Reading]) -> None:
        for item in items:
            self.feed(item)

    def tick(self, t_s: float) -> None:
        """Wall-clock tick from ``run``: data time cannot stand still when feeds fall silent."""
        self._run_commands(t_s)
        self._advance(t_s)

    def condition(self, cond: Condition) -> None:
        """A condition judged outside the estimators (the recorder's health), handled as theirs.
        Call it from the loop's own thread, as ``tick``."""
        self._handle((cond,))

    def republish_alerts(self, t_s: float) -> None:
        """Announce the listed alerts again (after a restart restored them)."""
        self._emit_all(self.alerts.republish(t_s))

    def close(self) -> None:
        self._run_commands(None)
        if self.now_s is not None:
            self._publish_status(self.now_s)
        for sink in self.sinks:
            sink.close()

    # -- commands from other threads (an MQTT ack) -------------------------------

    def acknowledge(self, alert_id: str, reply: Callable[[str, bool], object] | None = None) -> None:
        """Thread-safe: queue an acknowledgement to be handled in the loop.

        ``reply(alert_id, acknowledged)`` is called from the loop once it is
        handled: True only when it acknowledged a listed alarm or warning.
        """
        self._commands.put(("ack", (alert_id, reply)))

    def report_swell(self, payload: bytes) -> str:
        """Thread-safe: a swell report (``daemon.intake.swell``); returns why it was refused.

        An accepted one is fed in the loop as an input (a raw line the recorder keeps and a ``Swell``
        reading), stamped with the data time of that moment, so a replay of the recording repeats it.
        """
        report, why = parse_swell(payload)
        if report is not None:
            self._commands.put(("swell", report))
        return why

    def _run_commands(self, t_next: float | None) -> None:
        """The queued commands, in the loop. ``t_next``: the data time of what comes next, which stamps a
        report that came before any data (a retained one comes at connect); None at close."""
        if self._commands.empty():  # no exception raised and caught when nothing is queued
            return
        while True:
            try:
                cmd, arg = self._commands.get_nowait()
            except queue.Empty:
                return
            if cmd == "swell":
                t = self.now_s if self.now_s is not None else t_next
                if t is None:
                    continue  # closing without any data: nothing for it to change
                for item in swell_items(arg, t):  # through the doorway, as a replay will feed it
                    self._take(item)
            elif cmd == "ack":
                alert_id, reply = arg
                changes = self.alerts.acknowledge(alert_id, self.now_s) if self.now_s is not None else []
                if changes:  # kept as an input (daemon.intake.acks): a replay of the recording repeats it
                    self._take(ack_items(alert_id, self.now_s)[0])
                self._emit_all(changes)
                if reply is not None:
                    reply(alert_id, bool(changes))

    # -- time --------------------------------------------------------------

    @property
    def now_s(self) -> float | None:
        """Data time: the newest time seen (None before the first)."""
        return self.runner.clock.now_s

    def _advance(self, t_s: float) -> None:
        """Move data time (the runner's clock and its gap rule): each due tick to the estimators
        and then the alert manager, and the status when it is due."""
        clock = self.runner.clock
        first = clock.now_s is None
        due = clock.advance(t_s)
        if due is None:
            return
        if first:
            self._next_status_s = t_s
        for tick_s in due:
            self._handle(self.runner.tick(tick_s))
            if self.selector is not None:  # two receivers that disagree
                self._handle(self.selector.tick(tick_s))
            self._emit_all(self.alerts.tick(tick_s))
        if t_s >= self._next_status_s:
            self._publish_status(t_s)
            self._next_status_s = t_s + self.status_every_s

    # -- outputs -------------------------------------------------------------

    def _handle(self, outputs: Iterable[Publication | Condition]) -> None:
        for out in outputs:
            if isinstance(out, Distrust):
                continue  # the runner acted on it; the status lists it
            if isinstance(out, Publication):
                kind = "event" if out.topic == "events" else "state"
                self._emit(Message(out.t_s, self._topic(out.topic), make_payload(out.t_s, out.payload),
                                   retain=out.retain and kind != "event", qos=1 if kind == "event" else 0, kind=kind))
            else:
                self._emit_all(self.alerts.on_condition(out))

    def _emit_all(self, messages: Iterable[Message]) -> None:
        for msg in messages:
            self._emit(msg)

    def _emit(self, msg: Message) -> None:
        self.messages_out += 1
        for sink in self.sinks:
            sink.message(msg)

    def _topic(self, rel: str) -> str:
        return f"{self.prefix}/{rel}"

    def _publish_status(self, t_s: float) -> None:
        payload: dict[str, Any] = {
            "state": "online",
            "sensors": {k: t_s - seen for k, seen in sorted(self._last_seen.items())},
            "distrusted": {k: {"since": iso_utc(since), "reason": why, "withheld": n}
                           for k, (since, why, n) in sorted(self.runner.distrusted.items())},
        }
        if self.counters is not None:
            payload["inputs"] = self.counters.line_snapshot()
        if self.selector is not None:
            payload["priority"] = self.selector.snapshot()
        # each filter's fusion steps (fused, rejected, last NIS): which sensor a filter distrusts
        fusion = {e.name: e.fusion_health() for e in self.estimators if hasattr(e, "fusion_health")}
        if fusion:
            payload["fusion"] = fusion
        if self.extra_status is not None:
            payload.update(self.extra_status())
        self._emit(Message(t_s, self._topic("status"), make_payload(t_s, payload), retain=True, qos=1, kind="status"))
