"""The one loop shared by ``run`` and ``replay``: readings in, estimators step,
outputs published and recorded.

Every item passes through ``Pipeline.feed``: a raw line goes to the sinks (the
recorder keeps it), a reading is checked against the source priority, added to
the history and handed to each estimator that accepts its kind. What the
estimators return becomes Messages (publications) or alert changes (through the
alert manager). Data time drives everything: once per data second every
estimator and the alert manager get a tick, and every ``status_every_s`` the
status is published. In ``run`` the service also ticks with the wall clock so
a silent feed is noticed when nothing arrives at all.

Adding a topic is adding an estimator to ``build_estimators``: the pipeline
publishes whatever it returns.
"""

from __future__ import annotations

import logging
import math
import queue
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

from daemon.intake.swell import parse_swell
from daemon.core.readings import Message, RawLine, Reading, Sink, json_safe
from estimators.base import Condition, Publication, iso_utc
from estimators.history import SampleHistory
from estimators.samples import KIND_NAMES, kind_of

log = logging.getLogger(__name__)

MAX_TICKS_PER_GAP = 600  # a data gap longer than this is crossed in one tick, not one per second


class _Context:
    """What an estimator may see: the history and the newest publication per topic."""

    def __init__(self) -> None:
        self.history = SampleHistory()
        self._latest: dict[str, Publication] = {}

    def latest(self, topic: str) -> Publication | None:
        return self._latest.get(topic)


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
        self.ctx = _Context()
        self.now_s: float | None = None
        self._next_tick_s: float | None = None
        self._next_status_s: float | None = None
        self._last_seen: dict[str, float] = {}
        self._commands: queue.SimpleQueue[tuple[str, Any]] = queue.SimpleQueue()
        self._routes = self._route_table()
        self.messages_out = 0

    # -- the doorway -------------------------------------------------------

    def feed(self, item: RawLine | Reading) -> None:
        self._run_commands()
        if isinstance(item, RawLine):
            if self.counters is not None:
                self.counters.take((item,))
            for sink in self.sinks:
                sink.raw(item)
            self._advance(item.t_s)
            return
        if self.selector is not None and not self.selector.accept(item):
            return
        sample = item.sample
        self._advance(sample.t_s)
        self.ctx.history.add(sample)
        self._last_seen[kind_of(sample)] = sample.t_s
        for est in self._routes.get(type(sample), ()):
            self._handle(est.step(sample, self.ctx))

    def feed_all(self, items: Iterable[RawLine | Reading]) -> None:
        for item in items:
            self.feed(item)

    def tick(self, t_s: float) -> None:
        """Wall-clock tick from ``run``: data time cannot stand still when feeds fall silent."""
        self._run_commands()
        self._advance(t_s)

    def republish_alerts(self, t_s: float) -> None:
        """Announce the listed alerts again (after a restart restored them)."""
        self._emit_all(self.alerts.republish(t_s))

    def close(self) -> None:
        self._run_commands()
        if self.now_s is not None:
            self._publish_status(self.now_s)
        for sink in self.sinks:
            sink.close()

    # -- commands from other threads (MQTT ack, a new connection) --------------

    def acknowledge(self, alert_id: str) -> None:
        """Thread-safe: queue an acknowledgement to be handled in the loop."""
        self._commands.put(("ack", alert_id))

    def report_swell(self, payload: bytes) -> str:
        """Thread-safe: a swell report (``daemon.intake.swell``) for the estimators; returns why it was refused."""
        report, why = parse_swell(payload)
        if report is not None:
            self._commands.put(("swell", report))
        return why

    def request_status(self) -> None:
        """Thread-safe: publish the status at the next chance (a broker just connected)."""
        self._commands.put(("status", None))

    def _run_commands(self) -> None:
        if self._commands.empty():  # the common case, on every item: no exception raised and caught
            return
        while True:
            try:
                cmd, arg = self._commands.get_nowait()
            except queue.Empty:
                return
            if cmd == "swell":  # a state, kept even before the first data (a retained report comes first)
                for est in self.estimators:
                    if hasattr(est, "set_swell"):
                        est.set_swell(arg.period_s, arg.from_deg)
                continue
            if self.now_s is None:
                continue
            if cmd == "ack":
                self._emit_all(self.alerts.acknowledge(arg, self.now_s))
            elif cmd == "status":
                self._publish_status(self.now_s)


    # -- time --------------------------------------------------------------

    def _advance(self, t_s: float) -> None:
        if not math.isfinite(t_s) or (self.now_s is not None and t_s <= self.now_s):
            return
        if self.now_s is None:
            self._next_tick_s = math.floor(t_s) + 1.0
            self._next_status_s = t_s
        self.now_s = t_s
        if t_s - self._next_tick_s > MAX_TICKS_PER_GAP:
            # A gap this long in replayed data is the logger being off, not feeds falling
            # silent (live, the wall clock ticks every second): no ticks across it, so the
            # first reading after it is handled before any timeout is judged.
            self._next_tick_s = math.floor(t_s) + 1.0
        while self._next_tick_s <= t_s:
            self._tick_all(self._next_tick_s)
            self._next_tick_s += 1.0
        if t_s >= self._next_status_s:
            self._publish_status(t_s)
            self._next_status_s = t_s + self.status_every_s

    def _tick_all(self, t_s: float) -> None:
        for est in self.estimators:
            self._handle(est.tick(t_s, self.ctx))
        self._emit_all(self.alerts.tick(t_s))

    # -- outputs -------------------------------------------------------------

    def _handle(self, outputs: Iterable[Publication | Condition]) -> None:
        for out in outputs:
            if isinstance(out, Publication):
                self.ctx._latest[out.topic] = out
                kind = "event" if out.topic == "events" else "state"
                self._emit(Message(out.t_s, self._topic(out.topic), _payload(out.t_s, out.payload),
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
            "sensors": {k: round(t_s - seen, 1) for k, seen in sorted(self._last_seen.items())},
        }
        if self.counters is not None:
            payload["inputs"] = self.counters.line_snapshot()
        if self.selector is not None:
            payload["priority"] = self.selector.snapshot()
        if self.extra_status is not None:
            payload.update(self.extra_status())
        self._emit(Message(t_s, self._topic("status"), _payload(t_s, payload), retain=True, qos=1, kind="status"))

    def _route_table(self) -> dict[type, list[Any]]:
        routes: dict[type, list[Any]] = {kind: [] for kind in KIND_NAMES}
        for est in self.estimators:
            for kind in est.accepts:
                routes.setdefault(kind, []).append(est)
        return routes


def _payload(t_s: float, fields: Mapping[str, Any]) -> dict[str, Any]:
    """``time`` first, then the fields; floats rounded so output is stable and compact."""
    out: dict[str, Any] = {"time": iso_utc(t_s)}
    for k, v in fields.items():
        if k != "time":
            out[k] = json_safe(v)
    return out
