"""Alert lifecycle: from the estimators' raw conditions to the alerts a crew sees.

Estimators say, at each moment, whether an alert's condition holds
(``estimators.base.Condition``), with its priority, text and values. This
manager turns that raw truth into alerts the way the trade's bridge alert
management does (priorities alarm, warning, caution; states active,
acknowledged, rectified, cleared):

- Minimum times. A condition must hold for ``raise_after`` before its alert is
  raised, and be gone for ``clear_after`` before it counts as gone, so a value
  hovering at a threshold does not make the alert chatter. Each time is set
  per priority and may be overridden per alert id.
- Alarm and warning. Raised as ``active``. Acknowledged while the condition
  lasts: ``acknowledged``, then ``cleared`` when the condition goes. If the
  condition goes first, the alert is ``rectified``: still listed (with
  ``condition: false``) until it is acknowledged, then ``cleared``; no longer
  announced as active, and its text says in the past tense what happened and
  when ("08:40–08:42 UTC: GNSS fixes lost ...; acknowledge."). An active
  unacknowledged alarm is re-announced every ``reannounce_alarm_s``, a warning
  every ``reannounce_warning_s``; a rectified one never is. If the condition
  comes back while rectified, the alert is active again.
- Figures follow the condition. While an alert is listed and its condition
  holds, an estimator's new text is published when it is a change worth
  telling (its words changed, or one of its figures by ``update_min_change_pct``
  or more: 2.0 -> 2.8 kn is news, 4.2 <-> 4.3 kn is not), at most once per
  ``update_min_s``. When the condition goes, the text is the
  estimator's closing words (the last value) after the time span.
- Caution. Never acknowledged (an acknowledgement is logged and ignored): it
  shows as ``active`` while its condition lasts and is ``cleared`` when it goes.
- Priority change. A condition may change priority while it holds (a pressure
  fall's caution upgraded to a warning): the change is published at once; an
  upgrade makes the alert unacknowledged again.

Every change is one retained QoS 1 ``Message`` on ``<prefix>/alerts/<id>``.
Time is data time only (each Condition's ``t_s``, each ``tick``): no clock.
``snapshot()`` / ``AlertManager.restore()`` carry the listed alerts across a
restart; a restored alert whose condition no estimator re-asserts within
``restore_confirm_s`` is taken as gone.
"""

from __future__ import annotations

import json
import logging
import math
import re
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from daemon.errors import ConfigError
from daemon.core.payloads import clean, iso_utc, with_advisory
from daemon.core.readings import Message
from estimators import wording
from estimators.base import ALARM, CAUTION, PRIORITIES, WARNING, Condition
from estimators.params import param

log = logging.getLogger(__name__)

ACTIVE, ACKNOWLEDGED, RECTIFIED, CLEARED = "active", "acknowledged", "rectified", "cleared"
STATES = (ACTIVE, ACKNOWLEDGED, RECTIFIED, CLEARED)
SNAPSHOT_VERSION = 1
_RANK = {ALARM: 0, WARNING: 1, CAUTION: 2}  # lower is more urgent
_EPS_S = 1e-6  # float slack on time comparisons (ticks land on whole seconds)


@dataclass(frozen=True)
class AlertParams:
    """The [alerts] section: minimum times and re-announcement intervals, in seconds."""

    reannounce_alarm_s: float = param(30.0, "s", 5.0, 3600.0, "an unacknowledged alarm is announced again this often")
    reannounce_warning_s: float = param(300.0, "s", 10.0, 86400.0, "an unacknowledged warning is announced again this often")
    raise_after_alarm_s: float = param(2.0, "s", 0.0, 600.0, "an alarm's condition must hold this long before it is raised")
    raise_after_warning_s: float = param(5.0, "s", 0.0, 600.0, "a warning's condition must hold this long before it is raised")
    raise_after_caution_s: float = param(10.0, "s", 0.0, 600.0, "a caution's condition must hold this long before it shows")
    clear_after_alarm_s: float = param(10.0, "s", 0.0, 3600.0, "an alarm's condition must be gone this long to count as gone")
    clear_after_warning_s: float = param(30.0, "s", 0.0, 3600.0, "a warning's condition must be gone this long to count as gone")
    clear_after_caution_s: float = param(30.0, "s", 0.0, 3600.0, "a caution's condition must be gone this long to clear")
    raise_after_by_id: dict[str, float] = param(
        {"gnss_lost": 0.0, "sensor_stale": 0.0}, "s",
        doc="per alert id, overrides the priority's raise time (gnss_lost and sensor_stale already wait "
            "for a silent feed in their estimators); a table given in the config replaces this one")
    clear_after_by_id: dict[str, float] = param({}, "s", doc="per alert id, overrides the priority's clear time")
    update_min_s: float = param(60.0, "s", 5.0, 3600.0,
                                "an active alert's new figures are published at most this often")
    update_min_change_pct: float = param(5.0, "%", 0.0, 100.0,
                                         "a figure in an active alert's text must change by this much to be told")
    restore_confirm_s: float = param(120.0, "s", 1.0, 3600.0,
                                     "a restored alert whose condition is not re-asserted within this time is taken as gone")
    max_payload_bytes: int = param(4096, "bytes", 512, 262144,
                                   "an alert payload larger than this loses its values, then the end of its text")

    def __post_init__(self) -> None:
        for name in ("raise_after_by_id", "clear_after_by_id"):
            for alert_id, value in getattr(self, name).items():
                if isinstance(value, bool) or not isinstance(value, (int, float)) or not 0.0 <= value <= 3600.0:
                    raise ConfigError(f"[alerts] {name}.{alert_id} = {value!r}: expected a number of seconds from 0 to 3600")

    def raise_after_s(self, alert_id: str, priority: str) -> float:
        return float(self.raise_after_by_id.get(alert_id, getattr(self, f"raise_after_{priority}_s")))

    def clear_after_s(self, alert_id: str, priority: str) -> float:
        return float(self.clear_after_by_id.get(alert_id, getattr(self, f"clear_after_{priority}_s")))

    def reannounce_s(self, priority: str) -> float | None:
        return {ALARM: self.reannounce_alarm_s, WARNING: self.reannounce_warning_s}.get(priority)


@dataclass
class _Alert:
    """One alert id's bookkeeping: the raw condition, its debounced view, the lifecycle."""

    alert_id: str
    priority: str
    text: str = ""
    values: Mapping[str, Any] | None = None
    raw: bool | None = False  # the estimator's latest word; None: restored, not yet re-asserted
    raw_since_s: float | None = None  # when ``raw`` took its present value
    condition: bool = False  # the debounced condition, as published
    listed: bool = False  # raised and not yet cleared
    state: str = CLEARED
    since_s: float | None = None  # when it was raised
    last_announced_s: float | None = None
    repeat: int = 0  # re-announcements since the last change
    published_text: str = ""  # the estimator text of the last message, to tell when figures changed
    gone_text: str = ""  # the estimator's closing words, from its latest all-clear
    gone_values: Mapping[str, Any] | None = None
    gone_s: float | None = None  # when the condition went (debounced view's start)


class AlertManager:
    """Conditions in, alert Messages out; see the module docstring for the lifecycle."""

    def __init__(self, params: AlertParams | None = None, *, prefix: str = "offwatch") -> None:
        self.params = params or AlertParams()
        self.prefix = prefix.rstrip("/")
        self._alerts: dict[str, _Alert] = {}
        self.ignored_acks = 0
        self.ignored_conditions = 0

    # -- inputs ------------------------------------------------------------

    def on_condition(self, cond: Condition) -> list[Message]:
        """Take an estimator's raw condition; return the alert changes it causes now."""
        if cond.priority not in PRIORITIES or not math.isfinite(cond.t_s):
            self.ignored_conditions += 1
            log.warning("condition %r ignored: priority %r is not one of %s", cond.alert_id, cond.priority, PRIORITIES)
            return []
        rec = self._alerts.get(cond.alert_id)
        if rec is None:
            if not cond.active:
                return []  # nothing listed, nothing pending: an all-clear changes nothing
            rec = self._alerts[cond.alert_id] = _Alert(cond.alert_id, cond.priority)
        out: list[Message] = []
        if cond.active:
            rec.text, rec.values = cond.text, dict(cond.values)
            if cond.priority != rec.priority:
                out += self._change_priority(rec, cond.priority, cond.t_s)
        else:
            rec.gone_text, rec.gone_values = cond.text, dict(cond.values)
        if rec.raw is not cond.active:
            rec.raw, rec.raw_since_s = cond.active, cond.t_s
        out += self._evaluate(rec, cond.t_s)
        if not out:
            out += self._update(rec, cond.t_s)
        return out

    def tick(self, t_s: float) -> list[Message]:
        """Data time has reached ``t_s``: minimum times run out, re-announcements fall due."""
        out: list[Message] = []
        for rec in list(self._alerts.values()):
            changed = self._evaluate(rec, t_s)
            out += changed or self._update(rec, t_s) or self._reannounce(rec, t_s)
        return out

    def acknowledge(self, alert_id: str, t_s: float) -> list[Message]:
        """The crew acknowledged ``alert_id``; an unknown id, a caution or a repeat is logged and ignored."""
        rec = self._alerts.get(alert_id)
        reason = None
        if rec is None or not rec.listed:
            reason = "no such alert is listed"
        elif rec.priority == CAUTION:
            reason = "a caution is not acknowledged"
        elif rec.state == ACKNOWLEDGED:
            reason = "it is already acknowledged"
        if reason:
            self.ignored_acks += 1
            log.info("acknowledgement of %r ignored: %s", alert_id, reason)
            return []
        if rec.condition:
            rec.state = ACKNOWLEDGED
        else:
            self._clear(rec)  # rectified and now acknowledged: done
        log.info("alert %r acknowledged: now %s", alert_id, rec.state)
        return [self._message(rec, t_s)]

    # -- views -------------------------------------------------------------

    def listed(self) -> list[dict[str, Any]]:
        """The alerts a display should list now (payloads without ``time``)."""
        return [self._payload(rec) for rec in self._alerts.values() if rec.listed]

    def republish(self, t_s: float) -> list[Message]:
        """One message per listed alert, e.g. after a restart or for a broker that just connected."""
        return [self._message(rec, t_s) for rec in self._alerts.values() if rec.listed]

    def snapshot(self) -> dict[str, Any]:
        """The listed alerts as plain JSON-able data, for the state directory."""
        alerts = []
        for rec in self._alerts.values():
            if rec.listed:
                alerts.append({
                    "id": rec.alert_id, "priority": rec.priority, "state": rec.state, "text": rec.text,
                    "values": clean(dict(rec.values or {})), "condition": rec.condition,
                    "since_s": rec.since_s, "last_announced_s": rec.last_announced_s,
                    "gone_text": rec.gone_text, "gone_s": rec.gone_s,
                })
        return {"version": SNAPSHOT_VERSION, "alerts": alerts}

    @classmethod
    def restore(cls, params: AlertParams | None, snapshot: Mapping[str, Any] | None, *,
                prefix: str = "offwatch") -> AlertManager:
        """A manager holding the alerts of ``snapshot``; a damaged entry is logged and skipped."""
        mgr = cls(params, prefix=prefix)
        if not isinstance(snapshot, Mapping) or snapshot.get("version") != SNAPSHOT_VERSION:
            log.warning("alert snapshot ignored: not a version %d snapshot", SNAPSHOT_VERSION)
            return mgr
        for entry in snapshot.get("alerts", ()):
            rec = _from_entry(entry)
            if rec is None:
                log.warning("alert snapshot entry ignored: %r", entry)
                continue
            mgr._alerts[rec.alert_id] = rec
        return mgr

    # -- the lifecycle -----------------------------------------------------

    def _evaluate(self, rec: _Alert, t_s: float) -> list[Message]:
        if rec.raw is None:  # restored: wait for an estimator to say it again
            if rec.raw_since_s is None:
                rec.raw_since_s = t_s
            if t_s - rec.raw_since_s < self.params.restore_confirm_s - _EPS_S:
                return []
            log.info("alert %r: no estimator re-asserted its condition since the restart; taken as gone", rec.alert_id)
            rec.raw, rec.raw_since_s = False, t_s
        if rec.raw == rec.condition:
            return []
        hold = (self.params.raise_after_s if rec.raw else self.params.clear_after_s)(rec.alert_id, rec.priority)
        if t_s - rec.raw_since_s < hold - _EPS_S:
            return []
        rec.condition = rec.raw
        return self._condition_raised(rec, t_s) if rec.condition else self._condition_gone(rec, t_s)

    def _condition_raised(self, rec: _Alert, t_s: float) -> list[Message]:
        if not rec.listed:
            rec.listed, rec.state, rec.since_s = True, ACTIVE, t_s
            log.info("alert %r raised (%s)", rec.alert_id, rec.priority)
        elif rec.state == RECTIFIED:
            rec.state = ACTIVE  # its condition came back before anyone acknowledged it
            log.info("alert %r active again", rec.alert_id)
        return [self._message(rec, t_s)]

    def _condition_gone(self, rec: _Alert, t_s: float) -> list[Message]:
        if not rec.listed:
            return []
        rec.gone_s = rec.raw_since_s if rec.raw_since_s is not None else t_s
        if rec.priority == CAUTION or rec.state == ACKNOWLEDGED:
            self._clear(rec)
        else:
            rec.state = RECTIFIED  # listed until acknowledged, no longer announced
            log.info("alert %r rectified: condition gone, not yet acknowledged", rec.alert_id)
        return [self._message(rec, t_s)]

    def _update(self, rec: _Alert, t_s: float) -> list[Message]:
        """New figures for a listed alert whose condition holds, at most once per ``update_min_s``."""
        if not rec.listed or not rec.condition or not _worth_telling(rec.published_text, rec.text,
                                                                      self.params.update_min_change_pct):
            return []
        last = rec.last_announced_s if rec.last_announced_s is not None else rec.since_s
        if last is not None and t_s - last < self.params.update_min_s - _EPS_S:
            return []  # rate-limited: the newest text goes out when the interval has passed
        return [self._message(rec, t_s, repeat=rec.repeat)]

    def _change_priority(self, rec: _Alert, priority: str, t_s: float) -> list[Message]:
        upgrade = _RANK[priority] < _RANK[rec.priority]
        log.info("alert %r: priority %s -> %s", rec.alert_id, rec.priority, priority)
        rec.priority = priority
        if not rec.listed:
            return []  # still pending: the new priority's raise time applies
        if upgrade or priority == CAUTION:
            rec.state = ACTIVE  # an upgrade asks for a fresh acknowledgement; a caution has none
        return [self._message(rec, t_s)]

    def _reannounce(self, rec: _Alert, t_s: float) -> list[Message]:
        interval = self.params.reannounce_s(rec.priority)
        if not rec.listed or rec.state != ACTIVE or interval is None:
            return []
        last = rec.last_announced_s if rec.last_announced_s is not None else rec.since_s
        if last is None or t_s - last < interval - _EPS_S:
            return []
        rec.repeat += 1
        return [self._message(rec, t_s, repeat=rec.repeat)]

    def _clear(self, rec: _Alert) -> None:
        rec.listed, rec.state = False, CLEARED
        log.info("alert %r cleared", rec.alert_id)

    # -- messages ----------------------------------------------------------

    def _message(self, rec: _Alert, t_s: float, repeat: int = 0) -> Message:
        rec.last_announced_s = t_s
        rec.repeat = repeat
        rec.published_text = rec.text
        payload = {"time": iso_utc(t_s), **self._payload(rec), "repeat": repeat}
        payload = _fit(payload, self.params.max_payload_bytes)
        return Message(t_s, f"{self.prefix}/alerts/{rec.alert_id}", payload, retain=True, qos=1, kind="alert")

    def _payload(self, rec: _Alert) -> dict[str, Any]:
        text = _text_now(rec)
        values = rec.values
        if not rec.condition and rec.gone_values:
            values = {**dict(rec.values or {}), **dict(rec.gone_values)}  # the last value, as the estimator closed it
        return {
            "id": rec.alert_id,
            "priority": rec.priority,
            "state": rec.state,
            "text": with_advisory(text),
            "since": iso_utc(rec.since_s) if rec.since_s is not None else None,
            "condition": rec.condition,
            "values": clean(dict(values or {})),
        }


_NUMBER = re.compile(r"\d+(?:\.\d+)?")


def _worth_telling(old: str, new: str, min_change_pct: float) -> bool:
    """A new text is news when its words changed or one of its figures moved by ``min_change_pct``."""
    if old == new:
        return False
    if _NUMBER.sub("#", old) != _NUMBER.sub("#", new):
        return True  # other words, or another number of figures
    for a, b in zip(_NUMBER.findall(old), _NUMBER.findall(new)):
        x, y = float(a), float(b)
        if abs(y - x) > 0.0 and abs(y - x) >= min_change_pct / 100.0 * abs(x):
            return True
    return False


def _text_now(rec: _Alert) -> str:
    """The estimator's present-tense text while the condition holds; once it has gone, the
    time span and the estimator's closing words, in the past tense."""
    if rec.condition or rec.since_s is None:
        return rec.text
    gone = rec.gone_s if rec.gone_s is not None else rec.since_s
    closing = (rec.gone_text or "Condition gone").strip().rstrip(".")
    text = f"{wording.span(rec.since_s, max(gone, rec.since_s))}: {closing}."
    if rec.state == RECTIFIED:
        text += " Acknowledge."
    return text


def _from_entry(entry: Any) -> _Alert | None:
    try:
        rec = _Alert(
            alert_id=str(entry["id"]), priority=entry["priority"], text=str(entry.get("text", "")),
            values=dict(entry.get("values") or {}), raw=None, raw_since_s=None,
            condition=bool(entry["condition"]), listed=True, state=entry["state"],
            since_s=float(entry["since_s"]),
            last_announced_s=None if entry.get("last_announced_s") is None else float(entry["last_announced_s"]),
            gone_text=str(entry.get("gone_text") or ""),
            gone_s=None if entry.get("gone_s") is None else float(entry["gone_s"]),
        )
    except (KeyError, TypeError, ValueError, AttributeError):
        return None
    if rec.priority not in PRIORITIES or rec.state not in (ACTIVE, ACKNOWLEDGED, RECTIFIED):
        return None
    if rec.state == ACTIVE and not rec.condition and rec.priority != CAUTION:
        rec.state = RECTIFIED  # a snapshot from before the rectified state had its own name
    if rec.state == ACKNOWLEDGED and (rec.priority == CAUTION or not rec.condition):
        return None  # not a state this manager leaves an alert in
    if rec.state == RECTIFIED and (rec.priority == CAUTION or rec.condition):
        return None
    rec.published_text = rec.text
    return rec


def _size(payload: Mapping[str, Any]) -> int:
    return len(json.dumps(payload, ensure_ascii=False, separators=(",", ":")).encode("utf-8"))


def _fit(payload: dict[str, Any], max_bytes: int) -> dict[str, Any]:
    """The payload within ``max_bytes``: first the values go, then the text is shortened."""
    if _size(payload) <= max_bytes:
        return payload
    payload = {**payload, "values": {"truncated": True}}
    while _size(payload) > max_bytes and payload["text"]:
        excess = _size(payload) - max_bytes
        raw = payload["text"].removesuffix("...").encode("utf-8")
        payload["text"] = raw[: max(0, len(raw) - excess - 3)].decode("utf-8", errors="ignore") + "..."
        if len(raw) <= 3:
            break
    return payload


class AlertChanges:
    """Which alert messages change an alert's state or priority: a re-announcement or an update of its
    figures repeats both and is not a change worth a line (the replay summary, the exports)."""

    def __init__(self) -> None:
        self._seen: dict[str, tuple] = {}

    def is_change(self, topic: str, payload: Mapping[str, Any]) -> bool:
        key = (payload.get("state"), payload.get("priority"))
        if self._seen.get(topic) == key:
            return False
        self._seen[topic] = key
        return True
