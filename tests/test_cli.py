"""The ``offwatch`` command line as a person meets it: version, help, errors, and ``export``.

Checked against interface.md (commands, options, "a clear one-line error and
a non-zero status on a missing file, an unreadable config, an unknown
option"), pyproject.toml (the version), and the open formats export writes:
CSV read back with the csv module (RFC 4180), GPX 1.1 with xml.etree against
the topografix.com/GPX/1/1 namespace and its element order, GeoJSON with json
against RFC 7946 (a FeatureCollection; positions [longitude, latitude]).
"""

from __future__ import annotations

import csv
import json
import os
import re
import subprocess
import sys
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from daemon import __version__
from tests.shared import REPO, shared_path

BERTH = ("real-captures", "berth-13min-mda-pressure.nmea")  # 13 min at a berth: fixes and a barometer
GPX_NS = "{http://www.topografix.com/GPX/1/1}"


def cli(*args: str, timeout: float = 120.0) -> subprocess.CompletedProcess:
    env = dict(os.environ, COLUMNS="80")  # argparse wraps help to the terminal's width
    return subprocess.run([sys.executable, "-m", "daemon", *args], cwd=REPO, capture_output=True, text=True,
                          timeout=timeout, env=env)


LOG_STAMP = re.compile(r"^(\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ )?")


def error_lines(r: subprocess.CompletedProcess) -> list[str]:
    return [x for x in r.stderr.splitlines()
            if x.strip() and not LOG_STAMP.sub("", x).startswith(("INFO ", "DEBUG "))]


# --------------------------------------------------------------------------- version and help


def test_version_is_the_distribution_version():
    r = cli("--version")
    assert r.returncode == 0
    # pyproject.toml takes the version from the package (dynamic); the command says the same
    assert r.stdout.strip() == f"offwatch {__version__}"
    assert re.fullmatch(r"\d+\.\d+\.\d+", __version__)


def test_help_names_the_interface_commands_and_reads_on_an_80_column_terminal():
    r = cli("--help")
    assert r.returncode == 0 and r.stderr == ""
    lines = r.stdout.splitlines()
    assert all(len(x) <= 100 for x in lines), max(lines, key=len)
    for command in ("run", "replay", "export", "watch"):  # interface.md, command line
        assert re.search(rf"^\s+{command}\s", r.stdout, re.M), command
    # the advisory nature is stated where a person first looks (the project's rules)
    assert "not for navigation" in r.stdout


def test_replay_help_names_the_interface_options():
    r = cli("replay", "--help")
    assert r.returncode == 0
    for option in ("--config", "--jsonl", "--record", "--mqtt"):  # interface.md, offwatch replay
        assert option in r.stdout


def test_no_command_prints_the_help_and_fails():
    r = cli()
    assert r.returncode != 0
    assert "usage: offwatch" in r.stdout + r.stderr


# --------------------------------------------------------------------------- errors


@pytest.mark.parametrize("args", [("replay", "{missing}"), ("export", "{missing}", "--format", "csv", "--out", "{out}")])
def test_a_missing_file_is_one_line_on_stderr_and_a_non_zero_status(args, tmp_path):
    missing = tmp_path / "no-such-passage.nmea"
    argv = [a.format(missing=missing, out=tmp_path / "out.csv") for a in args]
    r = cli(*argv)
    assert r.returncode != 0
    lines = error_lines(r)
    assert len(lines) == 1, r.stderr
    assert str(missing) in lines[0] and "not found" in lines[0]
    assert "Traceback" not in r.stderr
    assert not (tmp_path / "out.csv").exists()


def test_an_unreadable_config_is_one_line_naming_it(tmp_path):
    src = shared_path(*BERTH)
    bad = tmp_path / "broken.toml"
    bad.write_text("[current\nthis is not TOML\n", encoding="utf-8")
    for config in (bad, tmp_path / "absent.toml"):
        r = cli("replay", str(src), "--config", str(config), "--quiet")
        assert r.returncode != 0
        lines = error_lines(r)
        assert len(lines) == 1 and str(config) in lines[0], r.stderr


def test_an_unknown_config_key_names_the_section_the_key_and_the_choices(tmp_path):
    # the project's rule: a bad config names the key and the fix
    config = tmp_path / "typo.toml"
    config.write_text("[current]\ncurrent_strong_knots = 2.5\n", encoding="utf-8")
    r = cli("replay", str(shared_path(*BERTH)), "--config", str(config), "--quiet")
    assert r.returncode != 0
    lines = error_lines(r)
    assert len(lines) == 1, r.stderr
    assert "[current]" in lines[0] and "current_strong_knots" in lines[0] and "current_strong_kn" in lines[0]


@pytest.mark.parametrize("argv", [("replay", "x.nmea", "--no-such-option"), ("--no-such-option",),
                                  ("no-such-command",), ("export", "x.nmea", "--format", "kml", "--out", "o")])
def test_an_unknown_option_command_or_format_fails_and_says_so(argv):
    r = cli(*argv)
    assert r.returncode != 0
    # one line, as the README promises: what is wrong and where the help is
    assert len(r.stderr.strip().splitlines()) == 1, r.stderr
    assert r.stderr.startswith("offwatch") and "error:" in r.stderr and "--help" in r.stderr
    assert "Traceback" not in r.stderr


# --------------------------------------------------------------------------- export


@pytest.fixture(scope="module")
def berth_positions(tmp_path_factory) -> list[dict]:
    """The position messages a replay of the berth capture publishes (the export's track points)."""
    out = tmp_path_factory.mktemp("berth") / "berth.jsonl"
    r = cli("replay", str(shared_path(*BERTH)), "--jsonl", str(out), "--quiet")
    assert r.returncode == 0, r.stderr
    msgs = [json.loads(x) for x in out.read_text(encoding="utf-8").splitlines()]
    positions = [m["payload"] for m in msgs if m["topic"] == "offwatch/position"]
    assert len(positions) > 100
    return positions


def export(fmt: str, out: Path) -> subprocess.CompletedProcess:
    r = cli("export", str(shared_path(*BERTH)), "--format", fmt, "--out", str(out))
    assert r.returncode == 0, r.stderr
    return r


def test_export_csv_has_one_row_per_position_message(berth_positions, tmp_path):
    out = tmp_path / "track.csv"
    r = export("csv", out)
    with open(out, newline="", encoding="utf-8") as f:  # RFC 4180 through the csv module
        rows = list(csv.DictReader(f))
    assert len(rows) == len(berth_positions)
    assert f"{len(rows)} track points" in r.stdout
    assert {"time", "lat", "lon", "source", "sigma_m", "set_deg", "drift_kn", "msl_hpa"} <= set(rows[0])
    for row, pos in zip(rows, berth_positions):
        assert row["time"] == pos["time"]
        assert float(row["lat"]) == pytest.approx(pos["lat"], abs=1e-7)
        assert float(row["lon"]) == pytest.approx(pos["lon"], abs=1e-7)
    # the berth capture has a barometer (SOURCES.md: WIMDA 1.0129-1.0141 bar): MSL beside the points
    msl = [float(r["msl_hpa"]) for r in rows if r["msl_hpa"]]
    assert msl and all(1005 < p < 1025 for p in msl)


def test_export_gpx_is_gpx_1_1_with_one_trkpt_per_position_message(berth_positions, tmp_path):
    out = tmp_path / "track.gpx"
    export("gpx", out)
    root = ET.parse(out).getroot()
    # GPX 1.1 (topografix.com/GPX/1/1): root <gpx version="1.1" creator=...> in its namespace
    assert root.tag == GPX_NS + "gpx" and root.get("version") == "1.1" and root.get("creator")
    # the schema's order: metadata?, wpt*, rte*, trk*, extensions?
    order = [child.tag.replace(GPX_NS, "") for child in root]
    assert order == sorted(order, key=["metadata", "wpt", "rte", "trk", "extensions"].index)
    points = root.findall(f"{GPX_NS}trk/{GPX_NS}trkseg/{GPX_NS}trkpt")
    assert len(points) == len(berth_positions)
    for pt, pos in zip(points, berth_positions):
        assert -90 <= float(pt.get("lat")) <= 90 and -180 <= float(pt.get("lon")) <= 180
        assert float(pt.get("lat")) == pytest.approx(pos["lat"], abs=1e-7)
        assert pt.find(f"{GPX_NS}time").text == pos["time"]  # xsd:dateTime, UTC with Z
        # within a wptType, <time> comes before <extensions>
        tags = [c.tag.replace(GPX_NS, "") for c in pt]
        assert tags.index("time") < tags.index("extensions")


def test_export_geojson_is_rfc_7946_with_lon_lat_positions(berth_positions, tmp_path):
    out = tmp_path / "track.geojson"
    export("geojson", out)
    doc = json.loads(out.read_text(encoding="utf-8"))
    assert doc["type"] == "FeatureCollection"
    for f in doc["features"]:
        assert f["type"] == "Feature" and "properties" in f and f["geometry"]["type"] in ("LineString", "Point")
        coords = f["geometry"]["coordinates"]
        for lon, lat in (coords if f["geometry"]["type"] == "LineString" else [coords]):
            assert -180 <= lon <= 180 and -90 <= lat <= 90
    lines = [f for f in doc["features"] if f["geometry"]["type"] == "LineString"]
    assert len(lines) == 1
    track = lines[0]["geometry"]["coordinates"]
    assert len(track) == len(berth_positions) >= 2  # RFC 7946 3.1.4: two or more positions
    # RFC 7946 3.1.1: longitude first, then latitude
    assert track[0] == pytest.approx([berth_positions[0]["lon"], berth_positions[0]["lat"]])
    points = [f for f in doc["features"] if f["geometry"]["type"] == "Point" and "source" in f["properties"]]
    assert len(points) == len(berth_positions)
