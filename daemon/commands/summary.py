"""A short readable account of a replay: what was read, published and raised."""

from __future__ import annotations

from collections import Counter
from datetime import datetime, timezone
from typing import Any

from daemon.core.alerts import AlertChanges
from daemon.core.readings import Message, RawLine
from estimators import wording


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
        self._alert_changes = AlertChanges()
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
        if msg.kind == "alert" and self._alert_changes.is_change(msg.topic, msg.payload):
            self.alert_changes.append(msg)
        elif msg.kind == "event":
            self.events.append(msg)

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
        stats = getattr(output, "stats", None)
        if stats is not None and hasattr(stats, "lost_raw"):
            self._recording_account(stats)

    def _recording_account(self, stats: Any) -> None:
        lost = stats.lost_raw + stats.lost_messages
        if not lost and not stats.failing:
            self.outputs.append(f"Recording: {stats.path}, every line and message kept.")
            return
        span = (f" (data time {_day(stats.loss_t_first)} {wording.span(stats.loss_t_first, stats.loss_t_last)})"
                if stats.loss_t_first is not None else "")
        unmarked = (f", {stats.gaps_unwritten} of them not marked in the file (the disk never freed)"
                    if stats.gaps_unwritten else "")
        why = f": {stats.last_error.split(': ')[-1]}" if stats.last_error else ""
        self.shortfalls.append(f"recording {stats.path}: {stats.lost_raw} lines and {stats.lost_messages} messages "
                               f"not kept{span}, in {stats.gaps} gaps{unmarked}{why}")

    def lines(self) -> list[str]:
        """What a person reads after a replay: times of day in UTC, positions in degrees and minutes,
        no ``None`` (a figure not known is left out), no ``-0.00``."""
        out = []
        if self.first_t is not None:
            hours = (self.last_t - self.first_t) / 3600.0
            out.append(f"Passage {_day(self.first_t)} {wording.span(self.first_t, self.last_t)} ({hours:.1f} h), "
                       f"{self.raw_lines} lines read, {sum(self.topics.values())} messages published.")
        else:
            out.append(f"{self.raw_lines} lines read; nothing published (no sentence gave a fix, a time or a reading).")
        shown = ", ".join(f"{t.split('/', 1)[-1]} {n}" for t, n in sorted(self.topics.items()) if "/alerts/" not in t)
        if shown:
            out.append("Messages: " + shown)
        for ev in self.events:
            out.append("Event   " + _describe(ev))
        for ch in self.alert_changes:
            p = ch.payload
            out.append(f"Alert   {wording.clock(ch.t_s)[:5]} {_word(p.get('priority')):8} "
                       f"{_word(p.get('id')):20} {_word(p.get('state'))}")
        for topic in ("current", "pressure", "sea_temperature", "position"):
            msg = self.latest.get(topic)
            if msg:
                out.append(f"Last {topic}: " + _fields(msg.payload))
        calibration = _calibration_line(self.latest.get("current"))
        if calibration:
            out.append(calibration)
        if self.counters is not None:
            out.append("Input counters: " + _counter_line(self.counters.snapshot()))
        out.extend(self.outputs)
        out.extend(self.shortfalls)
        return out


_UNDELIVERED_NAMES = {"alerts": "alert changes", "events": "events", "status": "status messages",
                      "states": "latest states", "dropped": "dropped (queue full)"}
def _day(t_s: float) -> str:
    d = datetime.fromtimestamp(t_s, tz=timezone.utc)
    return f"{d.day} {d:%b %Y}"


def _word(v: Any, longest: int = 40) -> str:
    """A payload field that should be a short text; anything else (it is data) shows as '?'."""
    return v if isinstance(v, str) and v.isprintable() and len(v) <= longest else "?"


def _describe(ev: Message) -> str:
    p = ev.payload
    when = wording.clock(ev.t_s)[:5]
    if p.get("kind") == "front_crossing" and all(_number(p.get(k)) for k in ("lat", "lon", "delta_c")):
        where = wording.position(p["lat"], p["lon"])
        text = f"{when} front crossing at {where}: {wording.signed(p['delta_c'])} °C"
        if _number(p.get("gradient_c_per_nm")):
            text += f", steepest {wording.fixed(abs(p['gradient_c_per_nm']))} °C/nm"
        return text
    return f"{when} {_word(p.get('kind'))}"


def _number(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and v == v and abs(v) != float("inf")


def _fields(payload: dict[str, Any]) -> str:
    if _number(payload.get("lat")) and _number(payload.get("lon")):
        head = [wording.position(payload["lat"], payload["lon"])]
        keep = [k for k in payload if k not in ("time", "lat", "lon")]
    else:
        head, keep = [], [k for k in payload if k != "time"]
    keep = [k for k in keep if payload[k] not in (None, "") and not isinstance(payload[k], (dict, list))][:8]
    return ", ".join(head + [f"{k}={_fmt(payload[k])}" for k in keep])


def _fmt(v: Any) -> str:
    """A payload value as published (the payload layer chose its decimals), with a true minus sign."""
    if isinstance(v, float) and _number(v):
        text = repr(v + 0.0)  # + 0.0: no negative zero
        return wording.MINUS + text[1:] if text.startswith("-") else text
    return str(v) if _number(v) else _word(v, 120)


def _calibration_line(msg: Message | None) -> str | None:
    """The calibration the current estimator earned, in words the right way round."""
    if msg is None:
        return None
    k, d = msg.payload.get("stw_scale"), msg.payload.get("heading_offset_deg")
    if not (_number(k) and _number(d)):
        return None
    return f"Calibration: {wording.calibration(k, d)}."


def _counter_line(inputs: dict[str, Any]) -> str:
    """Totals over all sources: sentence outcomes, framer drops and time repairs."""
    totals: Counter[str] = Counter()
    for src in inputs.values():
        for part in ("totals", "framer", "time"):
            for k, v in src.get(part, {}).items():
                if isinstance(v, (int, float)) and not isinstance(v, bool):
                    totals[k] += v
    return ", ".join(f"{k} {int(v)}" for k, v in sorted(totals.items()) if v) or "none"
