"""``offwatch export``: the track and the estimates in open formats (CSV, GPX 1.1, GeoJSON).

The source is replayed through the same pipeline as ``replay``; every position
message becomes a track point carrying the newest current, sea temperature and
pressure known at that moment.
"""

from __future__ import annotations

import csv
import json
from pathlib import Path
from typing import Any
from xml.sax.saxutils import escape

from daemon.core.config import load_config
from daemon.errors import InputError, OutputError
from daemon.core.readings import Message, RawLine

COLUMNS = ("time", "lat", "lon", "source", "sigma_m", "set_deg", "drift_kn", "current_quality",
           "stw_scale", "heading_offset_deg", "sea_temp_c", "gradient_c_per_nm", "msl_hpa", "tendency_3h_hpa")


class TrackSink:
    """Collects one row per position message, with the newest estimates beside it."""

    def __init__(self) -> None:
        self.rows: list[dict[str, Any]] = []
        self.events: list[dict[str, Any]] = []
        self._latest: dict[str, dict[str, Any]] = {}

    def raw(self, line: RawLine) -> None:
        pass

    def message(self, msg: Message) -> None:
        name = msg.topic.rsplit("/", 1)[-1]
        if msg.kind == "event":
            self.events.append(dict(msg.payload))
        elif name == "position":
            self.rows.append(self._row(msg.payload))
        elif msg.kind == "state":
            self._latest[name] = dict(msg.payload)

    def close(self) -> None:
        pass

    def _row(self, pos: dict[str, Any]) -> dict[str, Any]:
        cur = self._latest.get("current", {})
        sea = self._latest.get("sea_temperature", {})
        prs = self._latest.get("pressure", {})
        return {
            "time": pos["time"], "lat": pos["lat"], "lon": pos["lon"], "source": pos.get("source"),
            "sigma_m": pos.get("sigma_m"), "set_deg": cur.get("set_deg"), "drift_kn": cur.get("drift_kn"),
            "current_quality": cur.get("quality"), "stw_scale": cur.get("stw_scale"),
            "heading_offset_deg": cur.get("heading_offset_deg"), "sea_temp_c": sea.get("temp_c"),
            "gradient_c_per_nm": sea.get("gradient_c_per_nm"), "msl_hpa": prs.get("msl_hpa"),
            "tendency_3h_hpa": prs.get("tendency_3h_hpa"),
        }


def write_csv(track: TrackSink, out: Path) -> None:
    with open(out, "w", newline="", encoding="utf-8") as f:
        w = csv.DictWriter(f, fieldnames=COLUMNS)
        w.writeheader()
        for row in track.rows:
            w.writerow({k: ("" if v is None else v) for k, v in row.items()})


def write_gpx(track: TrackSink, out: Path) -> None:
    """GPX 1.1 (topografix.com/GPX/1/1): one track, estimates in a namespaced extension."""
    ns = "https://offwatch.invalid/gpx-estimates/1"
    lines = ['<?xml version="1.0" encoding="UTF-8"?>',
             f'<gpx version="1.1" creator="offwatch" xmlns="http://www.topografix.com/GPX/1/1" xmlns:ow="{ns}">']
    for ev in track.events:
        lines.append(f'  <wpt lat="{ev.get("lat")}" lon="{ev.get("lon")}"><time>{ev["time"]}</time>'
                     f'<name>{escape(str(ev.get("kind", "event")))}</name></wpt>')
    lines.append("  <trk><name>offwatch track</name><trkseg>")
    for r in track.rows:
        ext = "".join(f"<ow:{k}>{escape(str(r[k]))}</ow:{k}>" for k in COLUMNS[3:] if r.get(k) is not None)
        lines.append(f'    <trkpt lat="{r["lat"]}" lon="{r["lon"]}"><time>{r["time"]}</time>'
                     f'<extensions>{ext}</extensions></trkpt>')
    lines += ["  </trkseg></trk>", "</gpx>"]
    out.write_text("\n".join(lines) + "\n", encoding="utf-8")


def write_geojson(track: TrackSink, out: Path) -> None:
    """GeoJSON (RFC 7946): the track as a LineString, each point and event as a Point."""
    features = [{"type": "Feature", "geometry": {"type": "LineString",
                                                 "coordinates": [[r["lon"], r["lat"]] for r in track.rows]},
                 "properties": {"name": "track"}}]
    features += [{"type": "Feature", "geometry": {"type": "Point", "coordinates": [r["lon"], r["lat"]]},
                  "properties": {k: v for k, v in r.items() if k not in ("lat", "lon")}} for r in track.rows]
    features += [{"type": "Feature", "geometry": {"type": "Point", "coordinates": [e.get("lon"), e.get("lat")]},
                  "properties": e} for e in track.events]
    out.write_text(json.dumps({"type": "FeatureCollection", "features": features}, ensure_ascii=False) + "\n",
                   encoding="utf-8")


WRITERS = {"csv": write_csv, "gpx": write_gpx, "geojson": write_geojson}


def export_raw_nmea(source: str, out: Path) -> int:
    """A recording's raw sentences as TAG-block NMEA text (lines with a TAG block stay as stored)."""
    from daemon.outlets.recorder import export_tag_nmea, is_recording

    if not is_recording(source):
        raise InputError(f"{source} is not an offwatch recording: --format nmea exports a recording's raw sentences")
    return export_tag_nmea(source, out)


def export_command(args) -> int:
    from daemon.commands.replay import run_replay

    if args.format == "nmea":
        n = export_raw_nmea(args.source, Path(args.out))
        print(f"{n} sentences written to {args.out}")
        return 0
    cfg = load_config(args.config)
    track = TrackSink()
    run_replay([args.source], cfg, extra_sinks=[track], progress=True)
    out = Path(args.out)
    try:
        WRITERS[args.format](track, out)
    except OSError as e:
        raise OutputError(f"cannot write {out}: {e.strerror}") from None
    print(f"{len(track.rows)} track points and {len(track.events)} events written to {out}")
    return 0
