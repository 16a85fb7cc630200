"""``offwatch watch``: a live terminal view of what the service publishes, for the chart table.

Built to be read at 3 a.m. on an 80 x 24 terminal during an incident: one
header line that says whether the service is there and how old its data is,
one line per instrument group (each value with its age, dimmed when stale),
one line per listed alert, the selected alert's full text on demand, and a key
to acknowledge it (``{"id": ...}`` on ``<prefix>/ack``, as any display app).

Drawing is done by rich (well kept, pure Python, measures every character's
cell width so a line never wraps, and never interprets the text it is given
as markup); keys are read from the terminal in cbreak mode.

Everything received is data from any app aboard: every payload is bounded in
size and depth before it is parsed (``decode_json_payload``, as the service
reads its acks), every field is type-checked before use, and every string is
stripped of control characters before it can reach the terminal.
"""

from __future__ import annotations

import os
import select
import sys
import threading
import time
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import datetime, timezone
from typing import Any

from daemon.core.untrusted import clean_text, finite_number
from daemon.errors import ConfigError, InputError
from daemon.core.payloads import ADVISORY
from estimators.base import PRIORITIES
from estimators import wording  # how figures read in every text: positions, signs, sigmas

MAX_PAYLOAD_BYTES = 64 * 1024  # a state payload of the service is well under 4 KiB
MAX_PAYLOAD_DEPTH = 6          # the service's payloads nest 3 deep at most (status: priority.accepted.fix)
MAX_EVENTS = 5             # the newest events (front crossings) shown where there is room
MAX_ALERTS = 64            # alerts kept; more (a flood of retained topics) are counted and dropped
MAX_ID_CHARS = 40
MAX_TEXT_CHARS = 600
TEMP_TREND_S = 600.0       # the sea temperature's trend is its change over this long
STATES = ("active", "acknowledged", "rectified", "cleared")
STATUS_EVERY_S = 10.0      # the service publishes its status this often (interface)
OFFLINE_AFTER_S = 30.0     # no message at all for this long (wall clock): the service is taken as gone

# How old a topic's newest value may be (s of data time) before it is shown dimmed: a few times its interval.
STALE_AFTER_S = {
    "position": 10.0, "current": 15.0, "sea_temperature": 120.0, "pressure": 60.0,
    "sea_state": 60.0, "instruments": 10.0, "heading": 10.0, "stw": 20.0, "depth": 60.0, "wind": 60.0,
}
TOPICS = ("status", "position", "current", "sea_temperature", "pressure", "sea_state", "instruments")

_PRIORITY_LABEL = {"alarm": "ALARM", "warning": "WARN", "caution": "CAUT"}
_PRIORITY_STYLE = {"alarm": "bold white on red", "warning": "bold black on yellow", "caution": "bold cyan"}
_STATE_MARK = {"active": "●", "acknowledged": "✓", "rectified": "○", "cleared": " "}
_RANK = {"alarm": 0, "warning": 1, "caution": 2}
ARROWS = "↑↗→↘↓↙←↖"


# -- what arrived ---------------------------------------------------------------

@dataclass
class Alert:
    id: str
    priority: str      # one of PRIORITIES, or "?" when the payload said something else
    state: str         # one of STATES, or "?"
    text: str
    since_s: float | None
    received_s: float  # monotonic wall time it arrived


@dataclass
class Event:
    kind: str
    t_s: float | None
    delta_c: float | None
    lat: float | None
    lon: float | None


@dataclass
class Topic:
    data: dict[str, Any]
    t_s: float | None  # the payload's data time
    received_s: float


@dataclass
class WatchModel:
    """The newest state per topic and the listed alerts, fed from paho's thread, read by the view."""

    prefix: str = "offwatch"
    topics: dict[str, Topic] = field(default_factory=dict)
    alerts: dict[str, Alert] = field(default_factory=dict)
    refused: int = 0
    last_refusal: str = ""
    last_received_s: float | None = None
    temp_history: deque = field(default_factory=lambda: deque(maxlen=2000))
    events: deque = field(default_factory=lambda: deque(maxlen=MAX_EVENTS))
    lock: threading.Lock = field(default_factory=threading.Lock)

    def take(self, topic: str, payload: bytes, now_s: float) -> bool:
        """One message: True when it was used, False when refused (counted, never raised)."""
        rel = topic[len(self.prefix) + 1:] if topic.startswith(self.prefix + "/") else ""
        with self.lock:
            self.last_received_s = now_s
            if rel.startswith("alerts/"):
                if not payload:
                    self.alerts.pop(rel[7:], None)  # a retained alert deleted
                    return True
                return self._take_alert(rel[7:], payload, now_s)
            if rel == "events":
                return self._take_event(payload)
            if rel not in TOPICS:
                return False  # ack, topics of other programs: not shown
            doc, why = load_json_object(payload)
            if doc is None:
                return self._refuse(f"{rel}: {why}")
            t_s = parse_time(doc.get("time"))
            self.topics[rel] = Topic(doc, t_s, now_s)
            temp = finite_number(doc.get("temp_c"))
            if rel == "sea_temperature" and t_s is not None and temp is not None:
                self.temp_history.append((t_s, temp))
            return True

    def _take_alert(self, topic_id: str, payload: bytes, now_s: float) -> bool:
        doc, why = load_json_object(payload)
        if doc is None:
            return self._refuse(f"alert: {why}")
        alert_id = clean_text(doc.get("id"), MAX_ID_CHARS)
        if not alert_id or alert_id != topic_id:
            return self._refuse("alert: id missing or not its topic's")
        state = doc.get("state") if doc.get("state") in STATES else "?"
        if state == "cleared":
            self.alerts.pop(alert_id, None)
            return True
        if alert_id not in self.alerts and len(self.alerts) >= MAX_ALERTS:
            return self._refuse(f"alert: more than {MAX_ALERTS} listed")
        self.alerts[alert_id] = Alert(
            id=alert_id,
            priority=doc.get("priority") if doc.get("priority") in PRIORITIES else "?",
            state=state,
            text=clean_text(doc.get("text"), MAX_TEXT_CHARS),
            since_s=parse_time(doc.get("since")),
            received_s=now_s,
        )
        return True

    def _take_event(self, payload: bytes) -> bool:
        doc, why = load_json_object(payload)
        if doc is None:
            return self._refuse(f"event: {why}")
        kind = clean_text(doc.get("kind"), 24)
        if not kind:
            return self._refuse("event: no kind")
        self.events.append(Event(kind, parse_time(doc.get("time")), finite_number(doc.get("delta_c")),
                                 finite_number(doc.get("lat")), finite_number(doc.get("lon"))))
        return True

    def _refuse(self, why: str) -> bool:
        self.refused += 1
        self.last_refusal = why
        return False

    def sorted_alerts(self) -> list[Alert]:
        """Most urgent first: active before the rest, then alarm, warning, caution, then newest."""
        def key(a: Alert) -> tuple:
            return (a.state != "active", _RANK.get(a.priority, 3), -(a.since_s or 0.0), a.id)
        return sorted(self.alerts.values(), key=key)

    def data_now_s(self) -> float | None:
        """The service's newest data time: ages are measured against it (replay runs faster than the clock)."""
        status = self.topics.get("status")
        if status is not None and status.data.get("state") != "online":
            status = None  # a last will or a clean stop is stamped with the wall clock, not data time
        times = [t.t_s for name, t in self.topics.items()
                 if t.t_s is not None and (name != "status" or status is not None)]
        if status is not None and status.t_s is not None:
            # a payload dated far past the service's own status (another app's, or a bad clock) must not make
            # every true value look hours old
            times = [t for t in times if t <= status.t_s + STATUS_EVERY_S * 6]
        return max(times) if times else None

    def temp_trend(self) -> tuple[float, float] | None:
        """(change °C, over s) of the sea temperature across about TEMP_TREND_S."""
        if len(self.temp_history) < 2:
            return None
        t1, c1 = self.temp_history[-1]
        for t0, c0 in self.temp_history:
            if t1 - t0 <= TEMP_TREND_S:
                return (c1 - c0, t1 - t0) if t1 - t0 >= 60.0 else None
        return None


def load_json_object(payload: bytes) -> tuple[dict[str, Any] | None, str]:
    """A JSON object from a received payload, bounded in size and depth before it is parsed ->
    (object, ""), or (None, why it was refused)."""
    from daemon.outlets.mqtt import PayloadRefused, decode_json_payload

    try:
        doc = decode_json_payload(payload, MAX_PAYLOAD_BYTES, MAX_PAYLOAD_DEPTH)
    except PayloadRefused as e:
        return None, str(e)
    return (doc, "") if isinstance(doc, dict) else (None, "not a JSON object")


def parse_time(value: Any) -> float | None:
    """An ISO 8601 UTC time as in every payload (``...Z``) -> UNIX s; anything else -> None."""
    if not isinstance(value, str) or len(value) > 40:
        return None
    try:
        dt = datetime.fromisoformat(value.replace("Z", "+00:00"))
    except ValueError:
        return None
    if dt.tzinfo is None:
        dt = dt.replace(tzinfo=timezone.utc)
    return dt.timestamp()


# -- words and numbers a person reads -------------------------------------------

def age_words(age_s: float | None) -> str:
    if age_s is None:
        return ""
    age_s = max(0.0, age_s)
    if age_s < 100:
        return f"{age_s:.0f}s"
    if age_s < 6000:
        return f"{age_s / 60:.0f}m"
    if age_s < 48 * 3600:
        return f"{age_s / 3600:.0f}h"
    return f"{age_s / 86400:.0f}d"


def arrow_toward(deg: float) -> str:
    """One of eight arrows pointing the way the water goes (north up)."""
    return ARROWS[int(((deg % 360.0) + 22.5) // 45.0) % 8]


def num(value: Any, fmt: str, unit: str = "") -> str | None:
    """A received number as text, or None when it is not a finite number. ``fmt``: ``.1f`` (true minus,
    no negative zero), ``+.1f`` (signed, the same), or a zero-padded direction such as ``03.0f``."""
    f = finite_number(value)
    if f is None:
        return None
    decimals = int(fmt.rsplit(".", 1)[1].rstrip("f"))
    if fmt.startswith("+"):
        text = wording.signed(f, decimals)
    elif fmt.startswith("0"):
        text = format(f, fmt)
    else:
        text = wording.fixed(f, decimals)
    return text + unit


# -- the screen -------------------------------------------------------------------

class Screen:
    """Turns a WatchModel into at most ``height`` lines of at most ``width`` cells (rich Text)."""

    LABEL_WIDTH = 10

    def __init__(self, model: WatchModel, *, broker: str) -> None:
        self.model = model
        self.broker = broker
        self.selected = 0
        self.details = False
        self.notice = ""
        self.connected = False
        self.wall_clock: Callable[[], float] = time.time  # UTC now, for the offline status's own stamp

    # -- keys
    def move(self, step: int) -> None:
        n = len(self.model.alerts)
        self.selected = min(max(0, self.selected + step), max(0, n - 1))

    def selected_alert(self) -> Alert | None:
        with self.model.lock:
            alerts = self.model.sorted_alerts()
        if not alerts:
            return None
        self.selected = min(self.selected, len(alerts) - 1)
        return alerts[self.selected]

    # -- drawing
    def render(self, width: int, height: int, now_s: float) -> Any:
        from rich.console import Group

        return Group(*self.styled_lines(width, height, now_s)[:height])

    def styled_lines(self, width: int, height: int, now_s: float) -> list[Any]:
        """The frame as rich ``Text`` lines (styles and all), read under the model's lock."""
        with self.model.lock:
            return self._lines(width, height, now_s)

    def _lines(self, width: int, height: int, now_s: float) -> list[Any]:
        from rich.text import Text

        m = self.model
        offline = self._offline(now_s)
        data_now = m.data_now_s()
        rows = [self._header(width, now_s, offline, data_now), Text("─" * width, style="dim")]
        rows += [self._row(label, parts, width, offline, data_now) for label, parts in self._instrument_rows()]
        alerts = m.sorted_alerts()
        self.selected = min(self.selected, max(0, len(alerts) - 1))
        active = sum(1 for a in alerts if a.state == "active")
        rows.append(Text(f"── Alerts: {len(alerts)} listed, {active} active " + "─" * width, style="dim",
                         no_wrap=True, overflow="crop"))
        footer = self._footer(width)
        detail = self._detail(alerts, width) if self.details and alerts else []
        room = height - len(rows) - len(detail) - len(footer)
        rows += self._alert_rows(alerts, width, room, data_now)
        rows = [_one_line(r, width) for r in rows] + detail
        rows += [_one_line(r, width) for r in self._event_rows(height - len(rows) - len(footer), data_now)]
        pad = [Text("")] * max(0, height - len(rows) - len(footer))  # the keys stay on the bottom row
        return rows + pad + [_one_line(r, width) for r in footer]

    def _offline(self, now_s: float) -> str:
        m = self.model
        status = m.topics.get("status")
        if not self.connected:
            return f"no broker at {self.broker}: retrying"
        if status is not None and status.data.get("state") == "offline":
            reason = clean_text(status.data.get("reason"), 40)
            return "SERVICE OFFLINE" + (f" ({reason})" if reason else "")
        if m.last_received_s is None:
            return "waiting for the service"
        if now_s - m.last_received_s > OFFLINE_AFTER_S:
            return "SERVICE SILENT"
        return ""

    def _header(self, width: int, now_s: float, offline: str, data_now: float | None) -> Any:
        from rich.text import Text

        head = Text(" offwatch ", style="bold black on bright_white")
        stamp = datetime.fromtimestamp(data_now, tz=timezone.utc).strftime("%H:%M:%S UTC") if data_now else "--"
        if offline:
            head.append(f" {offline} ", style="bold white on red")
            head.append(f" data {stamp}" + self._gone_words(now_s), style="bold")
        else:
            head.append(" online ", style="bold black on green")
            head.append(f" data {stamp}")
        if self.model.refused:
            head.append(f"  refused {self.model.refused}", style="magenta")
        return head

    def _gone_words(self, now_s: float) -> str:
        """How long the service has been gone: from its offline status's stamp (wall clock, when it
        stopped or connected), else from the last message heard live."""
        status = self.model.topics.get("status")
        if status is not None and status.data.get("state") == "offline" and status.t_s is not None:
            gone_s = self.wall_clock() - status.t_s
            if gone_s >= 0:
                return f", gone {age_words(gone_s)}"
        heard = self.model.last_received_s
        return f", heard {age_words(now_s - heard)} ago" if heard is not None else ""

    def _instrument_rows(self) -> list[tuple[str, list[tuple[str | None, str]]]]:
        """(label, [(text or None, topic-or-kind for its age)...]) per line."""
        t = {name: topic.data for name, topic in self.model.topics.items()}
        pos, cur, sea, pr = (t.get(k, {}) for k in ("position", "current", "sea_temperature", "pressure"))
        ss, ins = t.get("sea_state", {}), t.get("instruments", {})
        lat, lon = finite_number(pos.get("lat")), finite_number(pos.get("lon"))
        where = wording.position(lat, lon) if lat is not None and lon is not None and abs(lat) <= 90 else None
        source = {"gnss": "GNSS", "dead_reckoning": "DR"}.get(pos.get("source"), "?")
        rows = [
            ("Position", [(where and f"{where} {source} ±{num(pos.get('sigma_m'), '.0f', ' m') or '?'}", "position"),
                          (_pair("SOG", num(pos.get("sog_kn"), ".1f", " kn")), "position"),
                          (_pair("COG", num(pos.get("cog_deg"), "03.0f", "°")), "position")]),
            ("Boat", [(_pair("HDG", num(ins.get("heading_deg"), "03.0f", "°T")), "heading"),
                      (_pair("STW", num(ins.get("stw_kn"), ".1f", " kn")), "stw")]),
            ("Current", [(self._current_words(cur), "current")]),
            ("Log/comp.", [(self._calibration_words(cur), "current")]),
            ("Sea temp", [(self._temp_words(sea), "sea_temperature")]),
            ("Barometer", [(self._pressure_words(pr), "pressure")]),
            ("Wind", [(self._wind_words(ss, ins), "sea_state" if "true_wind_kn" in ss else "wind"),
                      (_pair("Depth", num(ss.get("depth_m", ins.get("depth_m")), ".1f", " m")),
                       "sea_state" if "depth_m" in ss else "depth")]),
        ]
        if ss:
            rows.append(("Sea state", [(part, "sea_state") for part in self._sea_state_parts(ss)] or [(None, "sea_state")]))
        return rows

    def _current_words(self, cur: dict) -> str | None:
        drift, set_deg = finite_number(cur.get("drift_kn")), finite_number(cur.get("set_deg"))
        if drift is None or set_deg is None:
            quality = clean_text(cur.get("quality"), 20)
            return f"not yet known ({quality})" if quality else None
        sigma, sigma_deg = finite_number(cur.get("drift_sigma_kn")), finite_number(cur.get("set_sigma_deg"))
        sig_kn = wording.plus_minus(sigma, 1, "kn") if sigma is not None else "±? kn"  # never "±0.0 kn"
        sig_deg = wording.plus_minus(sigma_deg, 0) + "°" if sigma_deg is not None else "±?°"
        quality = clean_text(cur.get("quality"), 20)
        return (f"{arrow_toward(set_deg)} {drift:.1f} kn toward {set_deg:03.0f}°"
                f"  {sig_kn} {sig_deg}  {quality}")

    def _calibration_words(self, cur: dict) -> str | None:
        """The speed log's and the compass's errors as the current filter has learnt them, the right way round.

        true STW = log x stw_scale, so the log reads (1 - 1/stw_scale) low; true heading = compass +
        heading_offset_deg, so the compass reads heading_offset_deg low (interface: current payload).
        """
        scale, offset = finite_number(cur.get("stw_scale")), finite_number(cur.get("heading_offset_deg"))
        if scale is None or offset is None or scale <= 0:
            return None
        low_pct = (1.0 - 1.0 / scale) * 100.0
        sigma_pct = finite_number(cur.get("stw_scale_sigma"))
        sigma_deg = finite_number(cur.get("heading_offset_sigma_deg"))
        log = f"log {abs(low_pct):.1f} % {'low' if low_pct >= 0 else 'high'}"
        if sigma_pct is not None:
            log += f" ±{sigma_pct / scale * 100.0:.1f}"
        compass = f"compass {abs(offset):.1f}° {'low' if offset >= 0 else 'high'}"
        if sigma_deg is not None:
            compass += f" ±{sigma_deg:.1f}"
        calibration = cur.get("calibration")
        status = clean_text(calibration.get("status"), 20) if isinstance(calibration, dict) else ""
        return f"{log}, {compass}" + (f"  {status}" if status else "")

    def _temp_words(self, sea: dict) -> str | None:
        temp = num(sea.get("temp_c"), ".1f", " °C")
        if temp is None:
            return None
        words = [temp]
        grad = num(sea.get("gradient_c_per_nm"), "+.2f", " °C/nm along track")
        if grad:
            words.append(grad)
        trend = self.model.temp_trend()
        if trend is not None:
            words.append(f"{wording.signed(trend[0], 1)} °C in {trend[1] / 60:.0f} min")
        return "  ".join(words)

    def _pressure_words(self, pr: dict) -> str | None:
        msl = num(pr.get("msl_hpa"), ".1f", " hPa")
        if msl is None:
            return None
        tendency = num(pr.get("tendency_3h_hpa"), "+.1f", " hPa in 3 h")
        rate = num(pr.get("rate_hpa_per_h"), "+.1f", " hPa/h")
        rate = rate and f"now {rate}"  # the filter's present rate, beside the 3-hour change: which is which
        descriptor = clean_text(pr.get("descriptor"), 24)
        return "  ".join(w for w in (msl, tendency or "3 h tendency not yet", descriptor, rate) if w)

    def _wind_words(self, ss: dict, ins: dict) -> str | None:
        if "true_wind_kn" in ss:
            kn, frm = num(ss.get("true_wind_kn"), ".0f", " kn"), num(ss.get("true_wind_from_deg"), "03.0f", "°")
        else:
            kn, frm = num(ins.get("wind_kn"), ".0f", " kn"), num(ins.get("wind_from_deg"), "03.0f", "°")
        if kn is None:
            return None
        return f"true {kn} from {frm or '?'}"

    def _sea_state_parts(self, ss: dict) -> list[str]:
        """The sea state's figures, most important first: a narrow screen leaves out the last ones whole."""
        opp = num(ss.get("opposing_current_kn"), ".1f", " kn")
        parts = [f"opposing {opp}" if opp else None]
        length = None
        if ss.get("peak_blocked") is True:  # no factor at all: the wind sea's own waves cannot get through
            parts.append(_pair("peak", num(ss.get("wind_sea_period_s"), ".0f", "-s waves stopped: they break"), " "))
        else:
            parts += [_pair("height ×", self._factor(ss, "height_factor"), ""),
                      _pair("steepness ×", self._factor(ss, "steepness_factor"), "")]
            fraction = finite_number(ss.get("breaking_fraction"))
            if fraction is not None and fraction >= 1.0:  # the factors above stop there: the waves break
                parts.append("at breaking")
            length = _pair("length ×", self._factor(ss, "length_factor"), "")
        if ss.get("near_blocking") is True or ss.get("blocked_periods_s"):
            parts.append(_pair("stopped under", num(ss.get("blocking_period_s"), ".1f", " s"), " "))
        parts.append(length)  # last: what a narrow screen leaves out matters least
        return [p for p in parts if p]

    @staticmethod
    def _factor(ss: dict, name: str) -> str | None:
        """The wind sea's peak period's factor, as the caution judges it, bounded at breaking; without
        those (an older service) the unbounded peak's, the worst period's bounded, and only then linear
        theory's worst, which has no ceiling near blocking (a figure no sea shows). The length factor
        needs no bound (at blocking, deep water: 1/4)."""
        for key in ("peak_bounded_" + name, "peak_" + name, "bounded_" + name, name):
            if finite_number(ss.get(key)) is not None:
                return num(ss.get(key), ".1f")
        return None

    def _age_of(self, key: str, data_now: float | None) -> float | None:
        m = self.model
        if key in m.topics:
            t = m.topics[key].t_s
            return None if t is None or data_now is None else data_now - t
        ins = m.topics.get("instruments")
        if ins is None or data_now is None or ins.t_s is None:
            return None
        own = finite_number(ins.data.get(f"{key}_age_s"))
        return None if own is None else own + (data_now - ins.t_s)

    def _row(self, label: str, parts: list[tuple[str | None, str]], width: int, offline: str,
             data_now: float | None) -> Any:
        """One line: each part dimmed when its source is stale, each source's age after its last part."""
        from rich.text import Text

        row = Text(f"{label:<{self.LABEL_WIDTH}}", style="bold")
        shown = [(text, key) for text, key in parts if text is not None]
        if not shown:
            row.append("—", style="dim")
        age_due: tuple[str, str] | None = None  # the age of the last part shown, when it is not written yet
        for i, (text, key) in enumerate(shown):
            age = self._age_of(key, data_now)
            stale = bool(offline) or age is None or age > STALE_AFTER_S.get(key, 60.0)
            piece, age_piece = ("  " if i else "") + text, (f" {age_words(age) or '?'}", "dim italic" if stale else "green")
            if i and len(row.plain) + len(piece) + len(age_piece[0]) > width:
                break  # a part that does not fit whole is left out, never cut mid-word (the first is cut at the edge)
            row.append(piece, style="dim" if stale else "")
            age_due = age_piece
            if i + 1 == len(shown) or shown[i + 1][1] != key:
                row.append(*age_due)
                age_due = None
        if age_due is not None:
            row.append(*age_due)
        return row

    def _alert_rows(self, alerts: list[Alert], width: int, room: int, data_now: float | None) -> list[Any]:
        from rich.text import Text

        if not alerts:
            return [Text("  none listed", style="green")][: max(room, 0)]
        if room < 1:
            return []
        first = 0
        if len(alerts) > room:  # scroll so the selected one shows, keep one line for "more"
            room -= 1
            first = min(max(0, self.selected - room + 1), len(alerts) - room)
        rows = []
        for i, a in enumerate(alerts[first:first + room], start=first):
            chosen = i == self.selected
            row = Text("▶" if chosen else " ", style="bold")
            row.append(f"{_PRIORITY_LABEL.get(a.priority, '?'):<5}", style=_PRIORITY_STYLE.get(a.priority, "magenta"))
            row.append(f" {_STATE_MARK.get(a.state, '?')} ")
            row.append(f"{a.id[:20]:<20} ", style="bold" if a.state == "active" else "")
            age = age_words(data_now - a.since_s) if data_now is not None and a.since_s is not None else ""
            room_for_text = width - len(row.plain) - len(age) - 2
            row.append(_cut(short_text(a.text), room_for_text).ljust(max(room_for_text, 0)),
                       style="" if a.state == "active" else "dim")
            row.append(f" {age:>{len(age)}}", style="dim")
            if chosen:
                row.stylize("reverse", 0, 1)
            rows.append(row)
        if len(alerts) > room:
            rows.append(Text(f"  … {len(alerts) - room} more: ↑↓ to scroll", style="dim"))
        return rows

    def _event_rows(self, room: int, data_now: float | None) -> list[Any]:
        """The newest events, where the alerts leave room (a rule and at least one line)."""
        from rich.text import Text

        events = list(self.model.events)[::-1][: max(0, room - 2)]
        if not events:
            return []
        rows = [Text(""), Text("── Latest events " + "─" * 80, style="dim", overflow="crop")]
        for e in events:
            when = datetime.fromtimestamp(e.t_s, tz=timezone.utc).strftime("%H:%M UTC") if e.t_s else "--:--"
            what = e.kind.replace("_", " ")
            if e.delta_c is not None:
                what += f" {wording.signed(e.delta_c, 1)} °C ({'warmer' if e.delta_c > 0 else 'colder'})"
            if e.lat is not None and e.lon is not None and abs(e.lat) <= 90:
                what += f" at {wording.position(e.lat, e.lon)}"
            age = age_words(data_now - e.t_s) if data_now is not None and e.t_s else ""
            rows.append(Text(f"  {when}  {what}" + (f"  {age} ago" if age else ""), style="dim"))
        return rows

    def _detail(self, alerts: list[Alert], width: int) -> list[Any]:
        from rich.text import Text

        a = alerts[min(self.selected, len(alerts) - 1)]
        since = datetime.fromtimestamp(a.since_s, tz=timezone.utc).strftime("%H:%M:%S UTC") if a.since_s else "?"
        head = Text(f"── {a.id}: {a.priority}, {a.state}, since {since} " + "─" * width, style="bold",
                    no_wrap=True, overflow="crop")
        body = Text(a.text or "(no text)")
        wrapped = body.wrap(_console(width), width - 2)
        lines = [Text("  ") + line for line in list(wrapped)[:6]]
        if len(wrapped) > 6:
            lines[-1] = Text(_cut("  " + lines[-1].plain, width - 1) + "…")
        return [head] + lines

    def _footer(self, width: int) -> list[Any]:
        from rich.text import Text

        rows = []
        if self.notice:
            rows.append(Text(self.notice, style="bold"))
        keys = Text("↑↓ select  ⏎ details  a acknowledge  q quit", style="bold")
        keys.append("   advisory only, not for navigation", style="dim")
        rows.append(keys)
        return rows


def _pair(label: str, value: str | None, sep: str = " ") -> str | None:
    return None if value is None else f"{label}{sep}{value}"


def short_text(text: str) -> str:
    """An alert's text without the advisory sentence every alert ends with (the footer says it once)."""
    return text[: -len(ADVISORY)].rstrip() if text.endswith(ADVISORY) else text


def _cut(text: str, room: int) -> str:
    if room <= 0:
        return ""
    return text if len(text) <= room else text[: max(room - 1, 0)] + "…"


def _one_line(row: Any, width: int) -> Any:
    """Never wrap: a line too long loses its end (a rule is cropped, text ends in an ellipsis)."""
    overflow = row.overflow or "ellipsis"
    row.no_wrap = True
    row.overflow = overflow
    row.truncate(width, overflow=overflow)
    return row


_CONSOLES: dict[int, Any] = {}


def _console(width: int) -> Any:
    from rich.console import Console

    if width not in _CONSOLES:
        _CONSOLES[width] = Console(width=width, file=open(os.devnull, "w"))
    return _CONSOLES[width]


# -- the broker -------------------------------------------------------------------

def watch_settings(args: Any) -> tuple[Any, Any]:
    """The service's own [mqtt] settings (``MqttSettings``: user, password, TLS files) from --config, with
    --mqtt and --prefix over them, and the broker address -> (settings, BrokerUrl)."""
    import dataclasses

    from daemon.core.config import load_config, mqtt_problems
    from daemon.outlets.mqtt import parse_broker_url

    cfg = load_config(args.config) if getattr(args, "config", None) else load_config(None)
    url = args.mqtt or cfg.mqtt.url or "mqtt://127.0.0.1:1883"
    broker = parse_broker_url(url, "--mqtt" if args.mqtt else "mqtt.url")
    settings = dataclasses.replace(cfg.mqtt, url=url, prefix=(args.prefix or cfg.mqtt.prefix).strip("/"),
                                   client_id=f"offwatch-watch-{os.getpid()}")
    problems = mqtt_problems(settings)
    if problems:
        raise ConfigError(f"mqtt.{problems[0]}")
    return settings, broker


def broker_words(broker: Any) -> str:
    return f"{'mqtts' if broker.tls else 'mqtt'}://{broker.host}:{broker.port}"


def make_client(s: Any, broker: Any, model: WatchModel, screen: Screen) -> Any:
    """A paho client set up as the service's (user and password from the settings or the URL, TLS as
    the service checks its files), subscribing to everything under the prefix."""
    import paho.mqtt.client as paho
    from paho.mqtt.enums import CallbackAPIVersion

    from daemon.outlets.mqtt import tls_context

    protocol = paho.MQTTv5 if s.protocol == "5" else paho.MQTTv311
    client = paho.Client(CallbackAPIVersion.VERSION2, client_id=s.client_id, protocol=protocol)
    username = s.username or broker.username
    if username:
        client.username_pw_set(username, s.password or broker.password or None)
    if broker.tls:
        client.tls_set_context(tls_context(s))  # the service's own checks and context

    def on_connect(c: Any, userdata: Any, flags: Any, reason: Any, properties: Any = None) -> None:
        screen.connected = not getattr(reason, "is_failure", False)
        if screen.connected:
            c.subscribe(f"{s.prefix}/#", qos=1)
        else:
            screen.notice = f"broker refused: {clean_text(str(reason), 60)}"

    def on_disconnect(c: Any, userdata: Any, flags: Any, reason: Any, properties: Any = None) -> None:
        screen.connected = False

    def on_message(c: Any, userdata: Any, msg: Any) -> None:
        try:
            model.take(msg.topic, msg.payload, time.monotonic())
        except Exception as e:  # noqa: BLE001 - an exception here would end paho's thread for good
            model.refused += 1
            model.last_refusal = type(e).__name__

    client.on_connect = on_connect
    client.on_disconnect = on_disconnect
    client.on_message = on_message
    client.reconnect_delay_set(min_delay=1, max_delay=5)
    return client


def acknowledge(client: Any, screen: Screen, prefix: str) -> None:
    """Send the selected alarm or warning's acknowledgement; the service answers with its new state."""
    import json

    alert = screen.selected_alert()
    if alert is None:
        screen.notice = "no alert to acknowledge"
    elif alert.priority not in ("alarm", "warning"):
        screen.notice = f"{alert.id}: a caution is not acknowledged; it clears with its condition"
    elif alert.state == "acknowledged":
        screen.notice = f"{alert.id}: already acknowledged"
    else:
        client.publish(f"{prefix}/ack", json.dumps({"id": alert.id}), qos=1)
        screen.notice = f"{alert.id}: acknowledgement sent"


# -- the terminal -------------------------------------------------------------------

KEYS = {"\x1b[A": "up", "\x1bOA": "up", "k": "up", "\x1b[B": "down", "\x1bOB": "down", "j": "down",
        "\r": "details", "\n": "details", "d": "details", "a": "ack", "q": "quit", "\x03": "quit"}


def read_keys(fd: int, timeout_s: float) -> list[str]:
    """Keys typed since the last call (cbreak mode), as names from KEYS."""
    ready, _, _ = select.select([fd], [], [], timeout_s)
    if not ready:
        return []
    data = os.read(fd, 64).decode("utf-8", errors="replace")
    out, i = [], 0
    while i < len(data):
        for seq in ("\x1b[A", "\x1bOA", "\x1b[B", "\x1bOB"):
            if data.startswith(seq, i):
                out.append(KEYS[seq])
                i += len(seq)
                break
        else:
            if data[i] in KEYS:
                out.append(KEYS[data[i]])
            i += 1
    return out


def handle_key(key: str, screen: Screen, ack: Callable[[], None]) -> bool:
    """Apply one key; False to quit."""
    if key == "quit":
        return False
    screen.notice = ""
    if key == "up":
        screen.move(-1)
    elif key == "down":
        screen.move(1)
    elif key == "details":
        screen.details = not screen.details
    elif key == "ack":
        ack()
    return True


def watch_command(args: Any) -> int:
    from rich.console import Console

    settings, broker = watch_settings(args)
    model = WatchModel(prefix=settings.prefix)
    screen = Screen(model, broker=broker_words(broker))
    client = make_client(settings, broker, model, screen)
    try:
        client.connect_async(broker.host, broker.port, keepalive=settings.keepalive_s)
    except (OSError, ValueError) as e:
        raise InputError(f"cannot reach the broker at {broker_words(broker)}: {e}") from None
    client.loop_start()
    try:
        if args.once or not sys.stdin.isatty():
            time.sleep(2.0)
            console = Console(width=80, height=24)
            console.print(screen.render(80, 24, time.monotonic()))
            return 0
        return _interactive(client, screen, settings.prefix)
    finally:
        client.loop_stop()
        client.disconnect()


def _interactive(client: Any, screen: Screen, prefix: str) -> int:
    import termios
    import tty

    from rich.console import Console
    from rich.live import Live

    console = Console()
    fd = sys.stdin.fileno()
    saved = termios.tcgetattr(fd)
    tty.setcbreak(fd)
    try:
        with Live(console=console, screen=True, auto_refresh=False) as live:
            while True:
                width, height = console.size
                live.update(screen.render(width, height, time.monotonic()), refresh=True)
                for key in read_keys(fd, 0.5):
                    if not handle_key(key, screen, lambda: acknowledge(client, screen, prefix)):
                        return 0
    finally:
        termios.tcsetattr(fd, termios.TCSADRAIN, saved)
