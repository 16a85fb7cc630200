"""``offwatch export``: the passage in open formats (CSV, GPX 1.1, GeoJSON) and as a logbook.

The messages come from ``passage.iter_passage``: read straight from a
recording, or a plain NMEA file replayed in memory. Every ``--every`` seconds
of data time (default 60: a point a minute, which a chart program handles over
a long passage) a position message becomes a track point carrying the newest
current, sea temperature, pressure and wind known at that moment, with their
sigmas and quality. Events and alert changes are kept whole, with the position
where they happened.

The logbook is what a watch-keeper writes by hand: one line on each whole hour
and one for each event and alert change. Heading and speed through water are
not in any message, so for the logbook the source's readings (the parsed
sentences, no estimators) are merged in by data time.
"""

from __future__ import annotations

import csv
import heapq
import html
import json
import math
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any
from xml.sax.saxutils import escape

from daemon.core.alerts import AlertChanges
from daemon.core.config import load_config
from daemon.core.readings import Message, Reading
from daemon.errors import ConfigError, InputError, OutputError
from daemon.outlets.passage import is_event_or_alert, iter_passage, iter_readings, terminal_progress
from daemon.core.payloads import ADVISORY, iso_utc
from estimators.samples import Heading, WaterSpeed, WaterWind

DEFAULT_EVERY_S = 60.0

# (column, unit, meaning): the CSV header is the first item; README's table says the same
COLUMNS: tuple[tuple[str, str, str], ...] = (
    ("time", "ISO 8601 UTC", "data time of the position"),
    ("lat", "deg", "latitude, WGS 84, north positive"),
    ("lon", "deg", "longitude, WGS 84, east positive"),
    ("source", "", "gnss, or dead_reckoning while the fixes are lost"),
    ("sigma_m", "m", "position uncertainty, one sigma"),
    ("sog_kn", "kn", "speed over ground"),
    ("cog_deg", "deg true", "course over ground"),
    ("set_deg", "deg true", "set of the current: the direction it flows toward"),
    ("drift_kn", "kn", "drift: the current's speed"),
    ("set_sigma_deg", "deg", "set uncertainty, one sigma"),
    ("drift_sigma_kn", "kn", "drift uncertainty, one sigma"),
    ("current_east_kn", "kn", "current, east component"),
    ("current_north_kn", "kn", "current, north component"),
    ("current_quality", "", "converging, valid, degraded or unavailable"),
    ("stw_scale", "", "learnt speed-log scale (true STW = scale x log reading)"),
    ("stw_scale_sigma", "", "its uncertainty, one sigma"),
    ("heading_offset_deg", "deg", "learnt compass correction (true heading = reading + offset)"),
    ("heading_offset_sigma_deg", "deg", "its uncertainty, one sigma"),
    ("calibration", "", "calibrated, partly calibrated, not yet calibrated or suspended"),
    ("sea_temp_c", "degC", "sea temperature"),
    ("gradient_c_per_nm", "degC/nm", "sea-temperature gradient along the track (positive: warming ahead)"),
    ("msl_hpa", "hPa", "pressure reduced to mean sea level"),
    ("tendency_3h_hpa", "hPa", "3-hour pressure tendency (WMO), empty before 3 h of data"),
    ("pressure_descriptor", "", "the tendency in words, e.g. falling quickly"),
    ("true_wind_from_deg", "deg true", "true wind (over the water), direction it blows from"),
    ("true_wind_kn", "kn", "true wind speed (over the water)"),
)
COLUMN_NAMES = tuple(c[0] for c in COLUMNS)

LOGBOOK_COLUMNS = ("time", "lat", "lon", "cog_deg", "sog_kn", "heading_deg", "stw_kn", "set_deg", "drift_kn",
                   "wind_from_deg", "wind_kn", "msl_hpa", "tendency_3h_hpa", "sea_temp_c", "remarks")


def _topic_name(msg: Message) -> str:
    return msg.topic.rsplit("/", 1)[-1]


@dataclass
class Happening:
    """An event or an alert change, where and when it happened, in words."""

    t_s: float
    kind: str  # "event" or "alert"
    name: str  # the event kind or the alert id
    title: str
    text: str
    lat: float | None
    lon: float | None
    payload: dict[str, Any] = field(default_factory=dict)


class PassageTrack:
    """Collects thinned track points, events, alert changes and the hourly logbook from messages.

    ``every_s`` <= 0 keeps every position message. With ``max_rows`` (for
    plotting a long passage) the interval doubles, and every other kept point
    goes, whenever the track grows past it: memory stays bounded whatever the
    passage's length, and the points stay evenly spaced in time.
    """

    def __init__(self, every_s: float = DEFAULT_EVERY_S, max_rows: int | None = None,
                 row_extras: Callable[[float], dict[str, Any]] | None = None) -> None:
        self.every_s = every_s
        self.max_rows = max_rows
        self.row_extras = row_extras  # more columns for each kept point, from its data time
        self.rows: list[dict[str, Any]] = []
        self.happenings: list[Happening] = []
        self.logbook: list[dict[str, Any]] = []
        self.positions_seen = 0
        self._latest: dict[str, dict[str, Any]] = {}
        self._alert_changes = AlertChanges()
        self._last_row_t = -math.inf
        self._last_hour: int | None = None
        self._heading: float | None = None
        self._stw: float | None = None
        self._water_wind: tuple[float | None, float] | None = None

    # -- input ------------------------------------------------------------------
    def take(self, item: Message | Reading) -> None:
        if isinstance(item, Reading):
            self.reading(item)
        else:
            self.message(item)

    def message(self, msg: Message) -> None:
        name = _topic_name(msg)
        if msg.kind == "event":
            self._happened(self._event(msg))
        elif msg.kind == "alert":
            if self._alert_changes.is_change(msg.topic, msg.payload):
                self._happened(self._alert(msg))
        elif name == "position":
            self._position(msg)
        elif msg.kind == "state":
            self._latest[name] = msg.payload  # read only when a row or a log line is written

    def reading(self, r: Reading) -> None:
        """Heading, STW and the wind over the water for the logbook (no message carries them)."""
        s = r.sample
        if isinstance(s, Heading):
            self._heading = round(s.true_deg % 360.0, 1)
        elif isinstance(s, WaterSpeed):
            self._stw = round(s.speed_kn, 2)
        elif isinstance(s, WaterWind):
            frm = None if s.from_true_deg is None else round(s.from_true_deg % 360.0, 1)
            self._water_wind = (frm, round(s.speed_kn, 1))

    # -- what is kept -------------------------------------------------------------
    def _position(self, msg: Message) -> None:
        self.positions_seen += 1
        self._latest["position"] = msg.payload
        if msg.t_s - self._last_row_t >= self.every_s or self.every_s <= 0:
            self._last_row_t = msg.t_s
            row = self._row(msg.payload)
            if self.row_extras is not None:
                row.update(self.row_extras(msg.t_s))
            self.rows.append(row)
            if self.max_rows is not None and len(self.rows) > self.max_rows:
                self.rows = self.rows[::2]
                self.every_s = max(2.0 * self.every_s, 1.0)
        hour = int(msg.t_s // 3600)
        if hour != self._last_hour:
            if self._last_hour is not None:  # the first fix opens the log below, not as an hourly line
                self.logbook.append(self._log_line(msg.t_s, ""))
            else:
                self.logbook.append(self._log_line(msg.t_s, "Log opened: first position of the passage."))
            self._last_hour = hour

    def _row(self, pos: dict[str, Any]) -> dict[str, Any]:
        cur = self._latest.get("current", {})
        sea = self._latest.get("sea_temperature", {})
        prs = self._latest.get("pressure", {})
        wind = self._wind()
        return {
            "time": pos["time"], "lat": pos.get("lat"), "lon": pos.get("lon"), "source": pos.get("source"),
            "sigma_m": pos.get("sigma_m"), "sog_kn": pos.get("sog_kn"), "cog_deg": pos.get("cog_deg"),
            "set_deg": cur.get("set_deg"), "drift_kn": cur.get("drift_kn"),
            "set_sigma_deg": cur.get("set_sigma_deg"), "drift_sigma_kn": cur.get("drift_sigma_kn"),
            "current_east_kn": cur.get("east_kn"), "current_north_kn": cur.get("north_kn"),
            "current_quality": cur.get("quality"), "stw_scale": cur.get("stw_scale"),
            "stw_scale_sigma": cur.get("stw_scale_sigma"), "heading_offset_deg": cur.get("heading_offset_deg"),
            "heading_offset_sigma_deg": cur.get("heading_offset_sigma_deg"),
            "calibration": (cur.get("calibration") or {}).get("status") if isinstance(cur.get("calibration"), dict)
            else None,
            "sea_temp_c": sea.get("temp_c"), "gradient_c_per_nm": sea.get("gradient_c_per_nm"),
            "msl_hpa": prs.get("msl_hpa"), "tendency_3h_hpa": prs.get("tendency_3h_hpa"),
            "pressure_descriptor": prs.get("descriptor"),
            "true_wind_from_deg": wind[0], "true_wind_kn": wind[1],
        }

    def _wind(self) -> tuple[float | None, float | None]:
        """True wind (over the water): offwatch/sea_state where published, else the vane's own reading."""
        sea_state = self._latest.get("sea_state")
        if sea_state and sea_state.get("true_wind_kn") is not None:
            return sea_state.get("true_wind_from_deg"), sea_state.get("true_wind_kn")
        if self._water_wind is not None:
            return self._water_wind
        return None, None

    def _where(self) -> tuple[float | None, float | None]:
        pos = self._latest.get("position", {})
        return pos.get("lat"), pos.get("lon")

    def _event(self, msg: Message) -> Happening:
        p = dict(msg.payload)
        kind = str(p.get("kind", "event"))
        lat, lon = p.get("lat"), p.get("lon")
        if lat is None or lon is None:
            lat, lon = self._where()
        return Happening(msg.t_s, "event", kind, _event_title(p), _event_text(p), lat, lon, p)

    def _alert(self, msg: Message) -> Happening:
        p = dict(msg.payload)
        aid, state, prio = str(p.get("id", "?")), str(p.get("state", "?")), str(p.get("priority", "?"))
        lat, lon = self._where()
        text = str(p.get("text", "")).replace(" " + ADVISORY, "")
        return Happening(msg.t_s, "alert", aid, f"{prio} {aid.replace('_', ' ')} {state}", text, lat, lon, p)

    def _happened(self, h: Happening) -> None:
        self.happenings.append(h)
        line = self._log_line(h.t_s, f"{h.title}: {h.text}" if h.text else h.title)
        if h.lat is not None:
            line["lat"], line["lon"] = h.lat, h.lon
        self.logbook.append(line)

    def _log_line(self, t_s: float, remarks: str) -> dict[str, Any]:
        pos = self._latest.get("position", {})
        cur = self._latest.get("current", {})
        prs = self._latest.get("pressure", {})
        sea = self._latest.get("sea_temperature", {})
        wind_from, wind_kn = self._wind()
        return {
            "time": iso_utc(t_s), "lat": pos.get("lat"), "lon": pos.get("lon"),
            "cog_deg": pos.get("cog_deg"), "sog_kn": pos.get("sog_kn"),
            "heading_deg": self._heading, "stw_kn": self._stw,
            "set_deg": cur.get("set_deg"), "drift_kn": cur.get("drift_kn"),
            "wind_from_deg": wind_from, "wind_kn": wind_kn,
            "msl_hpa": prs.get("msl_hpa"), "tendency_3h_hpa": prs.get("tendency_3h_hpa"),
            "sea_temp_c": sea.get("temp_c"), "remarks": remarks,
        }


def _event_title(p: dict[str, Any]) -> str:
    if p.get("kind") == "front_crossing":
        return "front crossing, " + ("warmer" if p.get("warmer") else "colder") + " water"
    return str(p.get("kind", "event")).replace("_", " ")


def _event_text(p: dict[str, Any]) -> str:
    if p.get("kind") == "front_crossing" and p.get("delta_c") is not None:
        text = f"sea temperature changed by {p['delta_c']:+.1f} °C"
        if p.get("distance_nm") is not None:
            text += f" over {p['distance_nm']:.2f} nm"
        if p.get("gradient_c_per_nm") is not None:
            text += f" (steepest {p['gradient_c_per_nm']:+.1f} °C/nm)"
        if p.get("current_note"):
            text += f"; {p['current_note']}"
        return text + "."
    return ", ".join(f"{k} {v}" for k, v in p.items() if k not in ("time", "kind", "lat", "lon"))


# --------------------------------------------------------------------------- formats


def _cell(v: Any) -> Any:
    return "" if v is None else v


def write_csv(track: PassageTrack, out: Path) -> int:
    """RFC 4180 CSV, one row per track point; the columns are ``COLUMNS`` (units in README)."""
    with open(out, "w", newline="", encoding="utf-8") as f:
        w = csv.DictWriter(f, fieldnames=COLUMN_NAMES)
        w.writeheader()
        for row in track.rows:
            w.writerow({k: _cell(row.get(k)) for k in COLUMN_NAMES})
    return len(track.rows)


def _fmt_coord(v: float) -> str:
    return f"{v:.7f}"


def write_gpx(track: PassageTrack, out: Path) -> int:
    """GPX 1.1 (topografix.com/GPX/1/1): events and alerts as waypoints, then one track.

    The schema's order is metadata, wpt*, rte*, trk*; within a point ``time``
    comes before ``name``, ``desc``, ``type`` and ``extensions``. The estimates
    ride in a namespaced extension, as GPX 1.1 allows.
    """
    ns = "https://offwatch.invalid/gpx-estimates/1"
    lines = ['<?xml version="1.0" encoding="UTF-8"?>',
             f'<gpx version="1.1" creator="offwatch" xmlns="http://www.topografix.com/GPX/1/1" xmlns:ow="{ns}">',
             f"  <metadata><name>offwatch passage</name><desc>{escape(ADVISORY)}</desc></metadata>"]
    for h in track.happenings:
        if h.lat is None or h.lon is None:
            continue
        lines.append(f'  <wpt lat="{_fmt_coord(h.lat)}" lon="{_fmt_coord(h.lon)}"><time>{iso_utc(h.t_s)}</time>'
                     f"<name>{escape(h.title)}</name><desc>{escape(h.text)}</desc>"
                     f"<type>{escape(h.kind)}</type></wpt>")
    lines.append("  <trk><name>offwatch track</name><trkseg>")
    for r in track.rows:
        if r["lat"] is None or r["lon"] is None:
            continue
        ext = "".join(f"<ow:{k}>{escape(str(r[k]))}</ow:{k}>" for k in COLUMN_NAMES[3:] if r.get(k) is not None)
        lines.append(f'    <trkpt lat="{_fmt_coord(r["lat"])}" lon="{_fmt_coord(r["lon"])}"><time>{r["time"]}</time>'
                     f"<extensions>{ext}</extensions></trkpt>")
    lines += ["  </trkseg></trk>", "</gpx>"]
    out.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return len(track.rows)


def _lonlat(lat: float, lon: float) -> list[float]:
    return [round(lon, 7), round(lat, 7)]  # RFC 7946 3.1.1: longitude first; 11.2 cm is plenty (RFC 7946 11.2)


def current_arrow_end(lat: float, lon: float, east_kn: float, north_kn: float, hours: float = 1.0) -> list[float]:
    """Where the water carries a floating object in ``hours`` (plane approximation), [lon, lat]."""
    dn_nm, de_nm = north_kn * hours, east_kn * hours
    return _lonlat(lat + dn_nm / 60.0, lon + de_nm / (60.0 * max(math.cos(math.radians(lat)), 1e-6)))


def write_geojson(track: PassageTrack, out: Path) -> int:
    """GeoJSON (RFC 7946): the track (LineString), each point, current vectors and events/alerts.

    A current vector is a LineString from the point to where the water would carry
    a floating object in one hour (its length in nm is the drift in kn).
    """
    rows = [r for r in track.rows if r["lat"] is not None and r["lon"] is not None]
    features: list[dict[str, Any]] = []
    if len(rows) >= 2:  # RFC 7946 3.1.4: a LineString has two or more positions
        features.append({"type": "Feature", "geometry": {"type": "LineString",
                                                         "coordinates": [_lonlat(r["lat"], r["lon"]) for r in rows]},
                         "properties": {"name": "track", "start": rows[0]["time"], "end": rows[-1]["time"]}})
    for r in rows:
        props = {"feature": "track_point", **{k: v for k, v in r.items() if k not in ("lat", "lon")}}
        features.append({"type": "Feature", "geometry": {"type": "Point", "coordinates": _lonlat(r["lat"], r["lon"])},
                         "properties": props})
        if r.get("current_east_kn") is not None and r.get("current_north_kn") is not None:
            end = current_arrow_end(r["lat"], r["lon"], r["current_east_kn"], r["current_north_kn"])
            features.append({"type": "Feature", "geometry": {"type": "LineString",
                                                             "coordinates": [_lonlat(r["lat"], r["lon"]), end]},
                             "properties": {"feature": "current", "time": r["time"], "set_deg": r["set_deg"],
                                            "drift_kn": r["drift_kn"], "set_sigma_deg": r["set_sigma_deg"],
                                            "drift_sigma_kn": r["drift_sigma_kn"], "quality": r["current_quality"],
                                            "length": "one hour of drift"}})
    for h in track.happenings:
        if h.lat is None or h.lon is None:
            continue
        features.append({"type": "Feature", "geometry": {"type": "Point", "coordinates": _lonlat(h.lat, h.lon)},
                         "properties": {"feature": h.kind, "name": h.name, "title": h.title, "text": h.text,
                                        "time": iso_utc(h.t_s), **{k: v for k, v in h.payload.items()
                                                                    if k not in ("time", "text", "lat", "lon")}}})
    doc = {"type": "FeatureCollection", "features": features}
    out.write_text(json.dumps(doc, ensure_ascii=False, allow_nan=False) + "\n", encoding="utf-8")
    return len(rows)


def _log_cells(line: dict[str, Any]) -> dict[str, str]:
    """Logbook figures as a watch-keeper writes them: degrees whole, speeds to a tenth."""
    def num(v: Any, fmt: str) -> str:
        return "" if v is None else format(v, fmt)
    return {
        "time": line["time"][:16].replace("T", " ") + "Z",
        "lat": "" if line["lat"] is None else _dm(line["lat"], "NS"),
        "lon": "" if line["lon"] is None else _dm(line["lon"], "EW"),
        "cog_deg": num(line["cog_deg"], "03.0f"), "sog_kn": num(line["sog_kn"], ".1f"),
        "heading_deg": num(line["heading_deg"], "03.0f"), "stw_kn": num(line["stw_kn"], ".1f"),
        "set_deg": num(line["set_deg"], "03.0f"), "drift_kn": num(line["drift_kn"], ".1f"),
        "wind_from_deg": num(line["wind_from_deg"], "03.0f"), "wind_kn": num(line["wind_kn"], ".0f"),
        "msl_hpa": num(line["msl_hpa"], ".1f"), "tendency_3h_hpa": num(line["tendency_3h_hpa"], "+.1f"),
        "sea_temp_c": num(line["sea_temp_c"], ".1f"), "remarks": line["remarks"],
    }


def _dm(deg: float, hemis: str) -> str:
    """Degrees and decimal minutes, e.g. 41°03.2′N (the way positions go into a logbook)."""
    h = hemis[0] if deg >= 0 else hemis[1]
    a = abs(deg)
    d = int(a)
    m = (a - d) * 60.0
    if round(m, 1) >= 60.0:
        d, m = d + 1, 0.0
    return f"{d}°{m:04.1f}′{h}"


def write_logbook_csv(track: PassageTrack, out: Path) -> int:
    with open(out, "w", newline="", encoding="utf-8") as f:
        w = csv.DictWriter(f, fieldnames=LOGBOOK_COLUMNS)
        w.writeheader()
        for line in track.logbook:
            w.writerow({k: _cell(line[k]) for k in LOGBOOK_COLUMNS})
    return len(track.logbook)


LOGBOOK_HEAD = ("Time (UTC)", "Lat", "Lon", "COG °T", "SOG kn", "Hdg °T", "STW kn", "Set °T (toward)", "Drift kn",
                "Wind from °T", "Wind kn", "Baro hPa", "3-h tend. hPa", "Sea °C", "Remarks")


def write_logbook_html(track: PassageTrack, out: Path) -> int:
    """A printable logbook page: one table, plain HTML and CSS, no scripts, nothing fetched."""
    rows = []
    for line in track.logbook:
        cells = _log_cells(line)
        cls = ' class="happening"' if line["remarks"] and not line["remarks"].startswith("Log opened") else ""
        rows.append(f"<tr{cls}>" + "".join(f"<td>{html.escape(cells[k])}</td>" for k in LOGBOOK_COLUMNS) + "</tr>")
    first = track.logbook[0]["time"] if track.logbook else ""
    page = f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>Logbook {html.escape(first[:10])}</title>
<style>
body {{ font-family: sans-serif; margin: 1em; }}
table {{ border-collapse: collapse; font-size: 10pt; }}
th, td {{ border: 1px solid #888; padding: 2px 4px; text-align: right; vertical-align: top; }}
td:last-child, th:last-child {{ text-align: left; min-width: 20em; }}
tr.happening td {{ background: #f3f3f3; }}
thead {{ display: table-header-group; }}
@media print {{ @page {{ size: A4 landscape; margin: 10mm; }} body {{ margin: 0; }} tr {{ break-inside: avoid; }} }}
</style></head><body>
<h1>Logbook</h1>
<p>Kept by offwatch from the boat's instruments: a line on each whole hour and one for each event and alert.
Set is the direction the current flows toward; wind is the true wind over the water, from. {html.escape(ADVISORY)}</p>
<div style="overflow-x:auto"><table>
<thead><tr>{"".join(f"<th>{html.escape(h)}</th>" for h in LOGBOOK_HEAD)}</tr></thead>
<tbody>
{chr(10).join(rows)}
</tbody></table></div>
</body></html>
"""
    out.write_text(page, encoding="utf-8")
    return len(track.logbook)


def write_logbook(track: PassageTrack, out: Path) -> int:
    """The logbook as CSV at ``out`` (``.csv``) and as a printable page beside it (``.html``)."""
    csv_path, html_path = logbook_paths(out)
    write_logbook_csv(track, csv_path)
    return write_logbook_html(track, html_path)


def logbook_paths(out: Path) -> tuple[Path, Path]:
    """FILE.csv and FILE.html: ``--out log.csv`` or ``--out log.html`` or ``--out log`` give log.csv + log.html."""
    if out.suffix.lower() in (".csv", ".html", ".htm"):
        return out.with_suffix(".csv"), out.with_suffix(".html")
    return out.with_name(out.name + ".csv"), out.with_name(out.name + ".html")


WRITERS = {"csv": write_csv, "gpx": write_gpx, "geojson": write_geojson, "logbook": write_logbook}


def read_track(source: str | Path, cfg: Any, *, every_s: float = DEFAULT_EVERY_S, with_readings: bool = False,
               progress: Any = None) -> PassageTrack:
    """The passage's messages (and, for the logbook, its readings) gathered into a PassageTrack.

    A recording is read thin: only the topics a track is made of, each payload
    decoded when a row or a log line reads it (about one in sixty of the fixes
    and currents at a point a minute).
    """
    track = PassageTrack(every_s)
    stream: Iterable[Message | Reading] = iter_passage(source, cfg, progress=progress, keep=is_track_topic, lazy=True)
    if with_readings:
        stream = heapq.merge(stream, iter_readings(source, cfg), key=_item_time)
    for item in stream:
        track.take(item)
    return track


# the state topics PassageTrack reads (rows, log lines, the wind); status (the largest) and the rest are skipped
TRACK_STATES = frozenset({"position", "current", "sea_temperature", "pressure", "sea_state"})


def is_track_topic(topic: str, t_s: float) -> bool:
    """A ``keep`` for ``iter_passage``: the states a track is made of, events and alert changes."""
    return topic.rsplit("/", 1)[-1] in TRACK_STATES or is_event_or_alert(topic)


def _item_time(item: Message | Reading) -> float:
    return item.sample.t_s if isinstance(item, Reading) else item.t_s


def export_raw_nmea(source: str, out: Path) -> int:
    """A recording's raw sentences as TAG-block NMEA text (lines with a TAG block stay as stored)."""
    from daemon.outlets.recording.reading import is_recording
    from daemon.outlets.recording.tag_nmea import export_tag_nmea

    if not is_recording(source):
        raise InputError(f"{source} is not an offwatch recording: --format nmea exports a recording's raw sentences")
    return export_tag_nmea(source, out)


def parse_every(text: str | None) -> float:
    """``--every``: seconds between track points (``30``, ``30s``, ``5m``, ``1h``; 0 keeps every point)."""
    if text is None:
        return DEFAULT_EVERY_S
    t = str(text).strip().lower()
    scale = {"s": 1.0, "m": 60.0, "h": 3600.0}.get(t[-1:], None)
    number = t[:-1] if scale else t
    try:
        value = float(number) * (scale or 1.0)
    except ValueError:
        value = math.nan
    if not math.isfinite(value) or value < 0:
        raise ConfigError(f"--every {text}: expected seconds between points (e.g. 60, 30s, 5m, 1h; 0 for every point)")
    return value


def export_command(args) -> int:
    out = Path(args.out)
    if args.format == "nmea":
        n = export_raw_nmea(args.source, out)
        print(f"{n} sentences written to {args.out}")
        return 0
    every_s = parse_every(getattr(args, "every", None))
    cfg = load_config(args.config)
    bar = terminal_progress("export")
    try:
        track = read_track(args.source, cfg, every_s=every_s, with_readings=args.format == "logbook",
                           progress=bar)
    finally:
        if bar is not None:
            bar.close()
    try:
        WRITERS[args.format](track, out)
    except OSError as e:
        raise OutputError(f"cannot write {out}: {e.strerror}") from None
    if args.format == "logbook":
        csv_path, html_path = logbook_paths(out)
        print(f"{len(track.logbook)} logbook lines written to {csv_path} and {html_path}")
    else:
        print(f"{len(track.rows)} track points and {len(track.happenings)} events and alert changes "
              f"written to {out}")
    return 0


__all__ = ["PassageTrack", "Happening", "COLUMNS", "COLUMN_NAMES", "LOGBOOK_COLUMNS", "read_track", "WRITERS",
           "export_command", "parse_every", "current_arrow_end", "logbook_paths", "DEFAULT_EVERY_S"]
