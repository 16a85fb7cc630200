"""What the report needs from a passage, gathered in one pass and kept small.

The messages come from the daemon's passage reader (a recording's messages as
they are, or a plain NMEA file replayed in memory). The track and the newest
estimates beside each point come from the exports' ``PassageTrack``, thinned so
that a two-week passage stays a few thousand points. Beside it: the distance
run and the mean speed over ground over every position (not only the kept
ones), the periods each alert was up, the gaps in each feed (from the status
messages), the input counters, and when the calibration first said
'calibrated'.

Where the passage is short enough, the readings are read as well and the RTS
smoother (estimators/smoother.py) goes over them: the current along the track
then uses the whole passage, before and after each point.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from daemon.core.config import Config
from daemon.core.readings import Message
from daemon.outlets.export import PassageTrack
from daemon.outlets.passage import Thinner, iter_passage, iter_readings, passage_span_s
from daemon.core.payloads import iso_utc
from estimators.samples import WaterSpeed, WaterWind

MAX_TRACK_POINTS = 6000       # plotted points per series, whatever the passage's length
SMOOTH_MAX_HOURS = 48.0       # above this the readings are not read again: the published current is plotted
THIN_AFTER_HOURS = 12.0       # a longer recording is read thinned: each state topic about MAX_TRACK_POINTS times
NM_PER_DEG_LAT = 60.0         # 1' of latitude = 1 nm (the nautical mile's definition, near enough)


def step_nm(lat1: float, lon1: float, lat2: float, lon2: float) -> float:
    """Distance between two close positions (nm): flat earth at their mean latitude, good for one fix to the next."""
    dn = (lat2 - lat1) * NM_PER_DEG_LAT
    de = (lon2 - lon1) * NM_PER_DEG_LAT * math.cos(math.radians(0.5 * (lat1 + lat2)))
    return math.hypot(de, dn)


@dataclass
class Period:
    """A stretch of data time, e.g. an alert up or a feed silent (UNIX s)."""

    name: str
    start_s: float
    end_s: float | None = None
    detail: str = ""


@dataclass
class Passage:
    """Everything the plots, the tables and the summary use."""

    source: str
    track: PassageTrack
    total_nm: float = 0.0
    first_s: float | None = None
    last_s: float | None = None
    sog_sum: float = 0.0
    sog_n: int = 0
    stw_sum: float = 0.0
    stw_n: int = 0
    alert_periods: list[Period] = field(default_factory=list)
    feed_gaps: list[Period] = field(default_factory=list)
    counters: dict[str, dict[str, int]] = field(default_factory=dict)
    calibrated_s: float | None = None
    strongest: dict[str, Any] | None = None
    smoothed: list[Any] = field(default_factory=list)        # SmoothedCurrent rows, when the smoother ran
    smoother_note: str = ""
    thinned_note: str = ""
    sea_state: list[dict[str, Any]] = field(default_factory=list)
    wind: list[dict[str, Any]] = field(default_factory=list)  # per-minute true wind from the readings
    sea_state_step_s: float = 60.0
    messages: int = 0


class _Collector:
    def __init__(self, passage: Passage, gap_after_s: dict[str, float]) -> None:
        self.p = passage
        self.gap_after_s = gap_after_s
        self._last_pos: tuple[float, float] | None = None
        self._open_alerts: dict[str, Period] = {}
        self._open_gaps: dict[str, Period] = {}
        passage.track.row_extras = self.row_extras

    def take(self, msg: Message) -> None:
        p = self.p
        p.messages += 1
        if p.first_s is None:
            p.first_s = msg.t_s
        p.last_s = msg.t_s
        name = msg.topic.rsplit("/", 1)[-1]
        if name == "position" and msg.kind == "state":
            self._position(msg)
        elif name == "current" and msg.kind == "state":
            self._current(msg)
        elif name == "status":
            self._status(msg)
        elif name == "sea_state" and msg.kind == "state":
            self._sea_state(msg)
        elif msg.kind == "alert":
            self._alert(msg)
        p.track.message(msg)

    def row_extras(self, t_s: float) -> dict[str, Any]:
        """Beside each kept track point: its data time and the distance run to it."""
        return {"t_s": t_s, "distance_nm": self.p.total_nm}

    def _position(self, msg: Message) -> None:
        lat, lon = msg.payload.get("lat"), msg.payload.get("lon")
        if lat is None or lon is None:
            return
        if self._last_pos is not None:
            self.p.total_nm += step_nm(*self._last_pos, lat, lon)
        self._last_pos = (lat, lon)
        sog = msg.payload.get("sog_kn")
        if sog is not None:
            self.p.sog_sum += sog
            self.p.sog_n += 1

    def _current(self, msg: Message) -> None:
        c = msg.payload
        if self.p.calibrated_s is None and isinstance(c.get("calibration"), dict) \
                and c["calibration"].get("status") == "calibrated":
            self.p.calibrated_s = msg.t_s
        drift = c.get("drift_kn")
        if drift is not None and c.get("quality") == "valid" and \
                (self.p.strongest is None or drift > self.p.strongest["drift_kn"]):
            lat, lon = self._last_pos if self._last_pos else (None, None)
            self.p.strongest = {"t_s": msg.t_s, "drift_kn": drift, "set_deg": c.get("set_deg"),
                                "drift_sigma_kn": c.get("drift_sigma_kn"), "lat": lat, "lon": lon}

    def _status(self, msg: Message) -> None:
        sensors = msg.payload.get("sensors")
        if isinstance(sensors, dict):
            for kind, age in sensors.items():
                self._feed_age(kind, age, msg.t_s)
        inputs = msg.payload.get("inputs")
        if isinstance(inputs, dict):
            for src, info in inputs.items():
                if isinstance(info, dict) and isinstance(info.get("sentences"), dict):
                    for sentence, counts in info["sentences"].items():
                        if isinstance(counts, dict):
                            self.p.counters[f"{src} {sentence}"] = {
                                k: int(v) for k, v in counts.items() if isinstance(v, (int, float))
                                and k != "last_seen"}

    def _feed_age(self, kind: str, age: Any, t_s: float) -> None:
        limit = self.gap_after_s.get(kind)
        if limit is None:
            return
        silent = age is None or (isinstance(age, (int, float)) and age > limit)
        gap = self._open_gaps.get(kind)
        if silent and gap is None:
            start = t_s - age if isinstance(age, (int, float)) else t_s
            self._open_gaps[kind] = Period(kind, start)
        elif not silent and gap is not None:
            gap.end_s = t_s - (age if isinstance(age, (int, float)) else 0.0)
            self.p.feed_gaps.append(gap)
            del self._open_gaps[kind]

    def _sea_state(self, msg: Message) -> None:
        rows = self.p.sea_state
        if rows and msg.t_s - rows[-1]["t_s"] < self.p.sea_state_step_s:
            return
        rows.append({"t_s": msg.t_s, **msg.payload})
        if len(rows) > MAX_TRACK_POINTS:
            self.p.sea_state = rows[::2]
            self.p.sea_state_step_s *= 2

    def _alert(self, msg: Message) -> None:
        aid = str(msg.payload.get("id", msg.topic.rsplit("/", 1)[-1]))
        state = msg.payload.get("state")
        period = self._open_alerts.get(aid)
        if state in ("active", "acknowledged") and period is None:
            self._open_alerts[aid] = Period(aid, msg.t_s, detail=str(msg.payload.get("priority", "")))
        elif state in ("rectified", "cleared") and period is not None:
            period.end_s = msg.t_s
            self.p.alert_periods.append(period)
            del self._open_alerts[aid]

    def finish(self) -> None:
        for period in [*self._open_alerts.values()]:
            self.p.alert_periods.append(period)  # still up at the end: end_s None
        for gap in self._open_gaps.values():
            self.p.feed_gaps.append(gap)
        self.p.alert_periods.sort(key=lambda x: x.start_s)
        self.p.feed_gaps.sort(key=lambda x: x.start_s)


def collect(source: str | Path, cfg: Config, *, progress: Any = None, smooth: bool | None = None) -> Passage:
    """Read the passage once and gather what the report shows.

    ``smooth`` None: run the smoother where the passage is at most
    ``SMOOTH_MAX_HOURS`` long (it reads every sentence again).
    """
    staleness = cfg.section("staleness")
    gap_after = {}
    for kind in ("fix", "heading", "water_speed", "sea_temperature", "pressure", "apparent_wind", "water_wind",
                 "depth", "attitude", "air_temperature", "ground_velocity"):
        try:
            gap_after[kind] = staleness.interval_s(kind)
        except AttributeError:
            continue
    passage = Passage(str(source), PassageTrack(every_s=1.0, max_rows=MAX_TRACK_POINTS))
    collector = _Collector(passage, gap_after)
    span_s = passage_span_s(source)
    keep = None
    if span_s is not None and span_s > THIN_AFTER_HOURS * 3600.0:
        # a long recording: read each state topic about as often as the plots can show it (the payloads
        # skipped are never decoded); status once a minute, so a feed's gap shorter than that may not show
        keep = Thinner(every_s=span_s / MAX_TRACK_POINTS, status_every_s=60.0)
        passage.thinned_note = (f"a long passage: positions and estimates read every {keep.every_s:.0f} s, "
                                f"status once a minute (sensor gaps under a minute may not show)")
    for msg in iter_passage(source, cfg, progress=progress, keep=keep):
        collector.take(msg)
    collector.finish()
    hours = ((passage.last_s or 0) - (passage.first_s or 0)) / 3600.0
    if smooth is None:
        smooth = hours <= SMOOTH_MAX_HOURS
    if smooth:
        _smooth(passage, source, cfg)
    else:
        passage.smoother_note = (f"the passage is {hours:.0f} h long: the current shown is the one published "
                                 f"live (the smoother reads passages up to {SMOOTH_MAX_HOURS:.0f} h)")
    return passage


def _smooth(passage: Passage, source: str | Path, cfg: Config) -> None:
    from daemon.core.assembly import initial_calibration
    from estimators.current import CurrentEstimator
    from estimators.smoother import smooth_current

    accepts = CurrentEstimator.accepts
    samples = []
    wind = _WindMinutes()
    for r in iter_readings(source, cfg):
        s = r.sample
        if isinstance(s, WaterSpeed):
            passage.stw_sum += s.speed_kn
            passage.stw_n += 1
        elif isinstance(s, WaterWind):
            wind.add(s)
        if isinstance(s, accepts):
            samples.append(s)
    passage.wind = wind.rows()
    passage.smoothed = smooth_current(samples, cfg.section("current"), initial_calibration(cfg))
    passage.smoother_note = ("current from the RTS smoother over the whole passage (each point uses the data "
                             "before and after it)")


class _WindMinutes:
    """The true wind (over the water) from the vane, averaged per minute: speed, and direction as a vector mean."""

    def __init__(self, step_s: float = 60.0) -> None:
        self.step_s = step_s
        self._bins: dict[int, list[float]] = {}

    def add(self, s: WaterWind) -> None:
        if s.from_true_deg is None:
            return
        b = self._bins.setdefault(int(s.t_s // self.step_s), [0.0, 0.0, 0.0, 0])
        a = math.radians(s.from_true_deg)
        b[0] += math.sin(a)
        b[1] += math.cos(a)
        b[2] += s.speed_kn
        b[3] += 1

    def rows(self) -> list[dict[str, Any]]:
        out = []
        for k in sorted(self._bins):
            se, ce, sp, n = self._bins[k]
            out.append({"t_s": (k + 0.5) * self.step_s, "true_wind_kn": sp / n,
                        "true_wind_from_deg": math.degrees(math.atan2(se, ce)) % 360.0})
        return out


def iso_minute(t_s: float) -> str:
    """``2026-05-04 07:18Z``: a time as a person reads it in a table."""
    return iso_utc(t_s)[:16].replace("T", " ") + "Z"


__all__ = ["Passage", "Period", "collect", "step_nm", "iso_minute", "MAX_TRACK_POINTS"]
