"""Reading a passage's readings back (for the RTS smoother and the logbook): one source per kind, as the
service's priority chose it, so a second receiver a mile off never reaches the smoother.

Check values: one minute of latitude is about one nautical mile (the nautical mile's definition, 1852 m);
TAG blocks ``\\c:<UNIX s>,s:<source>*hh\\`` as NMEA 0183 v4.10 defines them; RMC's field layout from
NMEA 0183 v4.10.
"""

from __future__ import annotations

import logging
from pathlib import Path

from daemon.commands.replay import run_replay
from daemon.core.config import load_config
from daemon.nmea0183.codec import tag_block
from daemon.outlets.passage import iter_readings
from estimators.samples import Fix
from tests.helpers import sentence

T0 = 1780300800.0  # 2026-06-01 08:00:00 UTC
LAT_MIN = 30.0     # 50°30.0'N, the chart-table receiver; the masthead one a minute (a mile) further north


def rmc(t_s: float, lat_min: float) -> str:
    hhmmss = f"08{int((t_s - T0) // 60):02d}{int((t_s - T0) % 60):02d}.00"
    return sentence(f"GPRMC,{hhmmss},A,50{lat_min:07.4f},N,00400.0000,W,6.0,090.0,010626,,,A")


def write_receiver(path: Path, lat_min: float, delay_s: float, silent: tuple[float, float] = (0, 0)) -> None:
    """1 Hz for 5 minutes, TAG-stamped ``delay_s`` after each second, silent over ``silent`` (s after T0)."""
    lines = [tag_block(T0 + i + delay_s, path.stem) + rmc(T0 + i, lat_min)
             for i in range(300) if not silent[0] <= i < silent[1]]
    path.write_text("\r\n".join(lines) + "\r\n", encoding="ascii")


def fixes_by_source(tmp_path: Path, priority: str) -> dict[str, list[Fix]]:
    """A recording of both receivers (one file each: each file is a source), its fixes read back."""
    mast, chart = tmp_path / "gps_mast.nmea", tmp_path / "gps_chart.nmea"
    write_receiver(mast, LAT_MIN + 1.0, 0.0, silent=(120, 180))
    write_receiver(chart, LAT_MIN, 0.3)
    cfg_path, db = tmp_path / "offwatch.toml", tmp_path / "two.sqlite"
    cfg_path.write_text(f"[priority]\nfix = {priority}\n", encoding="ascii")
    cfg = load_config(cfg_path)
    run_replay([str(mast), str(chart)], cfg, record=str(db), progress=False)
    out: dict[str, list[Fix]] = {}
    for r in iter_readings(db, cfg):
        if isinstance(r.sample, Fix):
            out.setdefault(r.source, []).append(r.sample)
    return out


def test_only_the_preferred_receiver_reaches_the_smoother_while_it_is_fresh(tmp_path):
    # GIVEN two receivers a mile apart, the masthead one preferred, silent from 2 to 3 minutes
    by_source = fixes_by_source(tmp_path, '["gps_mast", "gps_chart"]')
    # THEN its fixes come through, the other's only while it was silent (the service's fall-back)
    chart_times = [f.t_s - T0 for f in by_source["gps_chart"]]
    assert len(by_source["gps_mast"]) == 240
    assert chart_times and min(chart_times) > 120 and max(chart_times) < 185
    # and every fix read back is on one track or the other, never mixed within a second
    assert all(abs(f.lat_deg - (50.5 + 1 / 60)) < 1e-6 for f in by_source["gps_mast"])


def test_the_other_order_follows_the_chart_table_receiver_throughout(tmp_path):
    by_source = fixes_by_source(tmp_path, '["gps_chart", "gps_mast"]')
    # (the very first second, before the chart-table receiver is heard, the masthead one is all there is)
    assert len(by_source["gps_chart"]) == 300 and len(by_source.get("gps_mast", [])) <= 1


def test_reading_back_does_not_log_the_selectors_warnings_again(tmp_path, caplog):
    # GIVEN the two receivers a mile apart, the preferred one silent for a minute: the replay that
    # records them logs the fall-back and the disagreement (warnings, as live)
    caplog.set_level(logging.DEBUG, logger="daemon.intake.priority")
    by_source = fixes_by_source(tmp_path, '["gps_mast", "gps_chart"]')
    live = [r.getMessage() for r in caplog.records if r.levelno >= logging.WARNING]
    assert any("now from gps_chart" in m for m in live) and any("disagree" in m for m in live)
    # WHEN the recording is read back again, THEN the selector chooses as before but warns of nothing
    caplog.clear()
    again: dict[str, int] = {}
    for r in iter_readings(tmp_path / "two.sqlite", load_config(tmp_path / "offwatch.toml")):
        if isinstance(r.sample, Fix):
            again[r.source] = again.get(r.source, 0) + 1
    assert again == {k: len(v) for k, v in by_source.items()}
    priority_records = [r for r in caplog.records if r.name == "daemon.intake.priority"]
    assert priority_records and all(r.levelno == logging.DEBUG for r in priority_records)
