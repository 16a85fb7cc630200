"""A short readable account of a replay: what was read, published and raised."""

from __future__ import annotations

from collections import Counter
from typing import Any

from daemon.core.readings import Message, RawLine
from daemon.core.payloads import iso_utc


class SummarySink:
    """Keeps counts and the few messages a person wants to see after a replay."""

    def __init__(self) -> None:
        self.raw_lines = 0
        self.topics: Counter[str] = Counter()
        self.alert_changes: list[Message] = []
        self.events: list[Message] = []
        self.first_t: float | None = None
        self.last_t: float | None = None
        self.latest: dict[str, Message] = {}
        self._alert_state: dict[str, tuple] = {}
        self.counters: Any = None  # the ingest Counters, set by the replay for the full picture
        self.outputs: list[str] = []     # one line per output that gave an account (delivered, kept)
        self.shortfalls: list[str] = []  # what an output was asked to keep or deliver and did not

    def raw(self, line: RawLine) -> None:
        self.raw_lines += 1

    def message(self, msg: Message) -> None:
        self.topics[msg.topic] += 1
        if self.first_t is None:
            self.first_t = msg.t_s
        self.last_t = msg.t_s
        self.latest[msg.topic.rsplit("/", 1)[-1] if msg.kind != "alert" else msg.topic] = msg
        if msg.kind == "alert" and self._is_change(msg):
            self.alert_changes.append(msg)
        elif msg.kind == "event":
            self.events.append(msg)

    def _is_change(self, msg: Message) -> bool:
        """A re-announcement repeats the same state and priority: not a change worth a line."""
        key = (msg.payload.get("state"), msg.payload.get("priority"))
        if self._alert_state.get(msg.topic) == key:
            return False
        self._alert_state[msg.topic] = key
        return True

    def close(self) -> None:
        pass

    def take_output_account(self, output: Any) -> None:
        """After the outputs closed: the MQTT link's undelivered messages, a recording's gaps."""
        undelivered = getattr(output, "undelivered", None)
        if undelivered is not None:
            where = f"{output.broker.host}:{output.broker.port}"
            left = undelivered()
            if left:
                what = ", ".join(f"{n} {_UNDELIVERED_NAMES.get(k, k)}" for k, n in left.items())
                self.shortfalls.append(f"MQTT: not delivered to {where} after waiting "
                                       f"{output.settings.close_timeout_s:g} s: {what}")
            else:
                self.outputs.append(f"MQTT: everything delivered to {where}.")

    def lines(self) -> list[str]:
        out = []
        if self.first_t is not None:
            hours = (self.last_t - self.first_t) / 3600.0
            out.append(f"Passage {iso_utc(self.first_t)} to {iso_utc(self.last_t)} ({hours:.1f} h), "
                       f"{self.raw_lines} lines read, {sum(self.topics.values())} messages published.")
        out.append("Messages: " + ", ".join(f"{t.split('/', 1)[-1]} {n}" for t, n in sorted(self.topics.items())
                                           if "/alerts/" not in t))
        for ev in self.events:
            out.append("Event   " + _describe(ev))
        for ch in self.alert_changes:
            p = ch.payload
            out.append(f"Alert   {p.get('time', '')[:19]}Z {p.get('priority', ''):8} {p.get('id', ''):20} {p.get('state', '')}")
        for topic in ("current", "pressure", "sea_temperature", "position"):
            msg = self.latest.get(topic)
            if msg:
                out.append(f"Last {topic}: " + _fields(msg.payload))
        if self.counters is not None:
            out.append("Input counters: " + _counter_line(self.counters.snapshot()))
        out.extend(self.outputs)
        out.extend(self.shortfalls)
        return out


_UNDELIVERED_NAMES = {"alerts": "alert changes", "events": "events", "status": "status messages",
                      "states": "latest states", "dropped": "dropped (queue full)"}


def _describe(ev: Message) -> str:
    p = ev.payload
    if p.get("kind") == "front_crossing":
        return (f"{p['time'][:19]}Z front crossing at {p.get('lat', 0):.4f}, {p.get('lon', 0):.4f}: "
                f"{p.get('delta_c', 0):+.1f} °C, peak {p.get('gradient_c_per_nm', 0):.1f} °C/nm")
    return f"{p.get('time', '')[:19]}Z {p.get('kind', 'event')}"


def _fields(payload: dict[str, Any]) -> str:
    keep = [k for k in payload if k != "time" and not isinstance(payload[k], (dict, list))][:8]
    return ", ".join(f"{k}={_fmt(payload[k])}" for k in keep)


def _fmt(v: Any) -> str:
    return f"{v:.2f}" if isinstance(v, float) else str(v)


def _counter_line(inputs: dict[str, Any]) -> str:
    """Totals over all sources: sentence outcomes, framer drops and time repairs."""
    totals: Counter[str] = Counter()
    for src in inputs.values():
        for part in ("totals", "framer", "time"):
            for k, v in src.get(part, {}).items():
                if isinstance(v, (int, float)) and not isinstance(v, bool):
                    totals[k] += v
    return ", ".join(f"{k} {int(v)}" for k, v in sorted(totals.items()) if v) or "none"
