"""``offwatch report``: the plots and the one self-contained page, from a recording.

Checked against: the PNG signature (PNG specification, ISO/IEC 15948, 8 bytes
89 50 4E 47 0D 0A 1A 0A) and its IHDR size; the HTML page holds its images as
data URIs (RFC 2397) and fetches nothing; the summary's distance against
geographiclib (Karney's geodesics, PyPI) over the recorded positions; the
calibration words against the invented demo boat's known errors
(recorded_runs/README.md: the log reads 5 % low, the compass 2.5° high); the
matplotlib import stays out of the daemon (the project's rule).
"""

from __future__ import annotations

import base64
import re
import struct
import subprocess
import sys

import pytest

pytest.importorskip("matplotlib", reason="matplotlib (the report extra) draws the plots")

from geographiclib.geodesic import Geodesic  # noqa: E402

from daemon.core.config import load_config  # noqa: E402
from daemon.outlets.recording.reading import iter_messages  # noqa: E402
from report.command import make_report  # noqa: E402
from report.plots import PLOTS  # noqa: E402
from tests.shared import REPO  # noqa: E402

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


@pytest.fixture(scope="module")
def made(demo_slice, tmp_path_factory):
    out = tmp_path_factory.mktemp("report")
    page, collected = make_report(demo_slice["db"], out, load_config(str(demo_slice["config"])))
    return out, page, collected


def test_every_plot_is_a_png_of_a_readable_size(made):
    out, _, _ = made
    for name, _, _ in PLOTS:
        data = (out / f"{name}.png").read_bytes()
        assert data[:8] == PNG_SIGNATURE, name
        width, height = struct.unpack(">II", data[16:24])  # IHDR: width, height, big-endian
        assert 600 <= width <= 1400 and 200 <= height <= 1200, (name, width, height)


def test_the_page_is_self_contained_and_says_it_is_advisory(made):
    out, page, _ = made
    text = page.read_text(encoding="utf-8")
    images = re.findall(r'<img src="data:image/png;base64,([A-Za-z0-9+/=]+)"', text)
    assert len(images) == len(PLOTS)
    assert all(base64.b64decode(i)[:8] == PNG_SIGNATURE for i in images)
    assert not re.search(r'(src|href)="(https?:)?//', text)  # nothing fetched from a network
    assert "<script" not in text
    assert "not for navigation" in text and 'name="viewport"' in text  # readable on a phone


def test_summary_distance_and_alerts_match_the_recording(made, demo_slice):
    _, page, collected = made
    msgs = list(iter_messages(demo_slice["db"]))
    pos = [m.payload for m in msgs if m.topic == "offwatch/position"]
    geo = sum(Geodesic.WGS84.Inverse(a["lat"], a["lon"], b["lat"], b["lon"])["s12"]
              for a, b in zip(pos, pos[1:])) / 1852.0  # 1 nm = 1852 m exactly
    assert collected.total_nm == pytest.approx(geo, rel=0.005)
    text = page.read_text(encoding="utf-8")
    assert f"{geo:.1f} nm" in text
    raised = [m.payload["id"] for m in msgs if m.kind == "alert" and m.payload["state"] == "active"]
    rows = re.findall(r"<tr><td>[^<]*</td><td>(caution|warning|alarm)</td><td>([^<]*)</td><td>active</td>", text)
    assert sorted(r[1] for r in rows) == sorted(set(a.replace("_", " ") for a in raised))
    events = [m.payload for m in msgs if m.kind == "event"]
    assert text.count("front crossing, warmer water") >= sum(1 for e in events if e.get("warmer"))


def test_fronts_and_the_smoothed_current_are_there(made):
    _, _, collected = made
    assert collected.smoothed, "a 40-minute passage is smoothed"
    strongest = max(s.drift_kn for s in collected.smoothed)
    # in the stream: 4.2 kn toward 047 (recorded_runs/README.md)
    assert 3.0 < strongest < 5.5
    assert any(h.name == "front_crossing" for h in collected.track.happenings)


def test_the_report_names_the_missing_extra(monkeypatch, capsys):
    """Without matplotlib the command says how to install it (one line, non-zero status)."""
    from daemon.commands import cli
    monkeypatch.setitem(sys.modules, "report.command", None)  # the import fails as if the extra were absent
    status = cli.main(["report", "x.sqlite", "--out", "somewhere"])
    err = capsys.readouterr().err
    assert status != 0 and "pip install 'offwatch[report]'" in err


def test_the_daemon_never_imports_matplotlib():
    code = "import sys, daemon.commands.cli, daemon.outlets.export, daemon.outlets.passage; " \
           "print('matplotlib' in sys.modules)"
    r = subprocess.run([sys.executable, "-c", code], cwd=REPO, capture_output=True, text=True, timeout=120)
    assert r.stdout.strip() == "False", r.stderr


def test_a_missing_source_is_one_line_and_creates_nothing(tmp_path, capsys):
    from daemon.commands import cli
    out = tmp_path / "report"
    status = cli.main(["report", str(tmp_path / "absent.sqlite"), "--out", str(out)])
    err = capsys.readouterr().err.strip().splitlines()
    assert status != 0 and len(err) == 1 and "absent.sqlite not found" in err[0]  # interface.md: one line
    assert not out.exists()


def _png_height(path) -> int:
    return struct.unpack(">II", path.read_bytes()[16:24])[1]  # PNG IHDR: width, height


def test_wind_against_current_gets_its_own_panel_once_sea_state_is_recorded(tmp_path):
    """offwatch/sea_state (interface.md) in a recording: the wind plot adds the opposing current and the
    steepness factor, and shades the wind_against_current alert; without it, the plot says so."""
    from daemon.core.readings import Message
    from daemon.outlets.recording.writer import RecordingWriter
    from report.collect import collect
    from report.plots import plot_wind
    from tools.bench.report import synthetic_messages

    def with_sea_state():
        for m in synthetic_messages(2.0):
            yield m
            if m.topic.endswith("/position") and int(m.t_s) % 10 == 0:
                yield Message(m.t_s, "offwatch/sea_state", {
                    "time": m.payload["time"], "true_wind_from_deg": 45.0, "true_wind_kn": 22.0,
                    "ground_wind_from_deg": 44.0, "ground_wind_kn": 18.0, "opposing_current_kn": 4.0,
                    "height_factor": 1.6, "length_factor": 0.6, "steepness_factor": 2.7, "depth_m": None},
                    retain=True)
            if m.topic.endswith("/position") and int(m.t_s) % 3600 in (1800, 3000):
                state = "active" if int(m.t_s) % 3600 == 1800 else "cleared"
                yield Message(m.t_s, "offwatch/alerts/wind_against_current", {
                    "time": m.payload["time"], "id": "wind_against_current", "priority": "caution",
                    "state": state, "text": "Wind against a 4 kn current.", "since": m.payload["time"]},
                    retain=True, qos=1, kind="alert")

    db = tmp_path / "sea.sqlite"
    w = RecordingWriter(db)
    for m in with_sea_state():
        w.add_message(m)
    w.close()
    cfg = load_config(None)
    p = collect(db, cfg, smooth=False)
    assert p.sea_state and p.sea_state[0]["steepness_factor"] == 2.7
    assert [x.name for x in p.alert_periods] == ["wind_against_current"] * 2
    assert all(x.end_s - x.start_s == 1200.0 for x in p.alert_periods)
    with_panel = _png_height(plot_wind(p, tmp_path / "with.png"))
    p.sea_state = []
    p.wind = [{"t_s": r["t_s"], "true_wind_kn": 20.0, "true_wind_from_deg": 45.0} for r in p.track.rows]
    without = _png_height(plot_wind(p, tmp_path / "without.png"))
    assert with_panel > without  # the third panel (opposing current, steepness factor) is there
