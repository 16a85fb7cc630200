"""``offwatch export`` read back with outside readers, against the recording's own messages.

Sources of the checks: GPX 1.1 read with gpxpy (PyPI, a general-purpose GPX
reader); GeoJSON checked with the ``geojson`` package (PyPI: its ``is_valid``
follows RFC 7946 geometry rules) and RFC 7946 itself (3.1.1 longitude first,
3.1.4 a LineString has two or more positions); CSV with the csv module (RFC
4180). The passage is a 40-minute slice of the invented demo passage
(recorded_runs/README.md: the near edge of the stream at 07:14-07:22 UTC, a
warmer front and its caution), replayed once into a recording (the
``demo_slice`` fixture).
"""

from __future__ import annotations

import csv
import json
import math
import os
import subprocess
import sys
from pathlib import Path

import pytest

from daemon.core.config import load_config
from daemon.outlets.export import COLUMN_NAMES, LOGBOOK_COLUMNS, logbook_paths, parse_every
from daemon.outlets.passage import iter_passage
from daemon.outlets.recording.reading import iter_messages
from daemon.errors import ConfigError
from tests.shared import REPO

gpxpy = pytest.importorskip("gpxpy", reason="gpxpy (test extra) reads GPX back")
geojson = pytest.importorskip("geojson", reason="geojson (test extra) checks RFC 7946")

CONFIG = REPO / "recorded_runs" / "demo.toml"


def cli(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "daemon", *args], cwd=REPO, capture_output=True, text=True,
                          timeout=600, env=dict(os.environ, COLUMNS="80"))


@pytest.fixture(scope="module")
def passage(demo_slice, tmp_path_factory) -> dict[str, Path]:
    return {**demo_slice, "dir": tmp_path_factory.mktemp("exports")}


@pytest.fixture(scope="module")
def messages(passage) -> list:
    return list(iter_messages(passage["db"]))


def positions(messages) -> list[dict]:
    return [m.payload for m in messages if m.topic == "offwatch/position"]


def export(passage, fmt: str, name: str, *extra: str) -> Path:
    out = passage["dir"] / name
    r = cli("export", str(passage["db"]), "--format", fmt, "--out", str(out), "--config", str(CONFIG), *extra)
    assert r.returncode == 0, r.stderr
    return out


def test_a_recording_is_read_not_replayed_and_a_plain_file_gives_the_same_messages(passage, messages):
    cfg = load_config(str(CONFIG))
    from_db = list(iter_passage(passage["db"], cfg))
    assert [(m.t_s, m.topic) for m in from_db] == [(m.t_s, m.topic) for m in messages]
    from_nmea = list(iter_passage(passage["nmea"], cfg))
    # the replay that made the recording and a replay in memory publish the same (interface.md: byte for byte)
    assert [(m.t_s, m.topic, json.dumps(m.payload)) for m in from_nmea] == \
        [(m.t_s, m.topic, json.dumps(m.payload)) for m in messages]


def test_csv_thins_to_a_point_a_minute_with_sigmas_and_quality(passage, messages):
    out = export(passage, "csv", "track.csv")
    with open(out, newline="", encoding="utf-8") as f:  # RFC 4180 through the csv module
        rows = list(csv.DictReader(f))
    assert tuple(rows[0]) == COLUMN_NAMES
    pos = positions(messages)
    # 40 minutes of 1-Hz positions at the default of one point a minute: 40 points
    assert len(rows) == 40
    by_time = {p["time"]: p for p in pos}
    for row in rows:
        p = by_time[row["time"]]
        assert float(row["lat"]) == pytest.approx(p["lat"], abs=1e-7)
        assert float(row["sog_kn"]) == pytest.approx(p["sog_kn"])
    current = {m.payload["time"]: m.payload for m in messages if m.topic == "offwatch/current"}
    late = rows[-1]  # in the stream, 4 kn toward about 047 (recorded_runs/README.md)
    assert late["current_quality"] in ("valid", "converging")
    assert float(late["drift_kn"]) > 3.0 and 20 < float(late["set_deg"]) < 80
    assert float(late["drift_sigma_kn"]) > 0 and float(late["set_sigma_deg"]) > 0
    c = current[late["time"]]
    assert float(late["drift_sigma_kn"]) == pytest.approx(c["drift_sigma_kn"])
    assert float(late["stw_scale"]) == pytest.approx(c["stw_scale"])


def test_every_zero_keeps_every_position(passage, messages):
    out = export(passage, "csv", "all.csv", "--every", "0")
    with open(out, newline="", encoding="utf-8") as f:
        assert len(list(csv.DictReader(f))) == len(positions(messages))


def test_gpx_reads_back_with_gpxpy_with_times_and_waypoints(passage, messages):
    out = export(passage, "gpx", "track.gpx", "--every", "5m")
    gpx = gpxpy.parse(out.read_text(encoding="utf-8"))
    points = [p for t in gpx.tracks for s in t.segments for p in s.points]
    assert len(points) == 8  # 40 minutes at a point every 5 minutes
    pos = {p["time"]: p for p in positions(messages)}
    first = pos[min(pos)]
    assert points[0].latitude == pytest.approx(first["lat"], abs=1e-7)
    assert points[0].longitude == pytest.approx(first["lon"], abs=1e-7)
    assert points[0].time.timestamp() == pytest.approx(messages_time(first["time"]))
    assert all(b.time > a.time for a, b in zip(points, points[1:]))
    # the front crossing (an event) and its caution (an alert) as waypoints with words
    events = [m.payload for m in messages if m.kind == "event"]
    assert events, "the slice holds the warmer front"
    names = [w.name for w in gpx.waypoints]
    assert any("front crossing" in n for n in names)
    assert any(n == "caution front active" for n in names)
    front = next(w for w in gpx.waypoints if "front crossing" in w.name)
    assert front.latitude == pytest.approx(events[0]["lat"], abs=1e-7)
    assert "°C" in front.description and front.time.timestamp() == pytest.approx(messages_time(events[0]["time"]))


def messages_time(iso: str) -> float:
    from datetime import datetime
    return datetime.fromisoformat(iso.replace("Z", "+00:00")).timestamp()


def test_geojson_is_valid_rfc_7946_with_track_current_vectors_and_events(passage, messages):
    out = export(passage, "geojson", "track.geojson")
    doc = geojson.loads(out.read_text(encoding="utf-8"))
    assert doc.is_valid, doc.errors()
    feats = doc["features"]
    track = [f for f in feats if f["properties"].get("name") == "track"]
    assert len(track) == 1 and len(track[0]["geometry"]["coordinates"]) == 40
    lon, lat = track[0]["geometry"]["coordinates"][0]  # RFC 7946 3.1.1: longitude, then latitude
    assert -33 < lon < -32 and 40 < lat < 41.5
    vectors = [f for f in feats if f["properties"].get("feature") == "current"]
    assert vectors
    v = vectors[-1]
    (lon0, lat0), (lon1, lat1) = v["geometry"]["coordinates"]
    # an hour of drift: the vector's length in nm is the drift in kn, its bearing the set (toward)
    de = (lon1 - lon0) * 60 * math.cos(math.radians(lat0))
    dn = (lat1 - lat0) * 60
    # (the published east/north components are rounded to 0.01 kn: the length agrees to about that)
    assert math.hypot(de, dn) == pytest.approx(v["properties"]["drift_kn"], abs=0.015)
    assert math.degrees(math.atan2(de, dn)) % 360 == pytest.approx(v["properties"]["set_deg"], abs=0.5)
    events = [f for f in feats if f["properties"].get("feature") == "event"]
    assert [e["properties"]["kind"] for e in events] == [m.payload["kind"] for m in messages if m.kind == "event"]


def test_logbook_has_a_line_an_hour_and_one_per_event_and_alert(passage, messages):
    out = export(passage, "logbook", "log")
    csv_path, html_path = logbook_paths(out)
    with open(csv_path, newline="", encoding="utf-8") as f:
        lines = list(csv.DictReader(f))
    assert tuple(lines[0]) == LOGBOOK_COLUMNS
    changes = {(m.topic, m.payload["state"]) for m in messages if m.kind == "alert"}
    n_events = sum(1 for m in messages if m.kind == "event")
    remarks = [x["remarks"] for x in lines]
    assert remarks[0].startswith("Log opened")
    assert len(lines) == 1 + n_events + len(changes)  # 07:00 opens the log; no other whole hour in the slice
    # heading and STW from the instruments: the helm steers 135 deg at about 6 kn (recorded_runs/README.md)
    later = lines[-1]
    assert 120 < float(later["heading_deg"]) < 150 and 5 < float(later["stw_kn"]) < 7
    page = html_path.read_text(encoding="utf-8")
    assert "<table" in page and "not for navigation" in page and "http" not in page.split("<body>")[1]


def test_every_takes_units_and_names_the_fix_when_wrong():
    assert parse_every("90") == 90 and parse_every("5m") == 300 and parse_every("1h") == 3600
    assert parse_every("0") == 0
    with pytest.raises(ConfigError, match="--every"):
        parse_every("often")


def test_a_thinned_read_decodes_the_same_messages_it_keeps(passage, messages):
    from daemon.outlets.passage import Thinner
    from daemon.outlets.recording.reading import iter_message_blocks

    kept = [m for block in iter_message_blocks(passage["db"], Thinner(every_s=300.0, status_every_s=60.0))
            for m in block]
    expected, due = [], -math.inf  # the rule written out: the first position, then the first 300 s after
    for m in messages:
        if m.topic.endswith("/position") and m.t_s >= due:
            expected.append(m)
            due = m.t_s + 300.0
    assert len(expected) == 8  # 40 minutes
    assert [m for m in kept if m.topic.endswith("/position")] == expected
    # events and alerts always come through, whole
    assert [m for m in kept if m.kind in ("event", "alert")] == [m for m in messages if m.kind in ("event", "alert")]
    status = [m.t_s for m in kept if m.topic.endswith("/status")]
    assert all(b - a >= 60.0 for a, b in zip(status, status[1:]))
