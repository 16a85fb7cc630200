"""Benchmark of the passage report and the exports on a long recording.

    python -m tools.bench.report [--hours 336] [--keep DIR]

Writes a synthetic recording of ``--hours`` of messages (no raw sentences:
the report and the exports read the messages only) shaped like the live
service's: position and current at 1 Hz (the current with its calibration,
health and sigmas), sea temperature every 2 s, pressure and status (with the
per-sentence input counters) every 10 s, a front crossing every 6 hours with
its caution, a pressure alert now and then. The boat sails at 6 kn, changing
course every 4 hours; the current turns slowly; the sea temperature steps at
each front.

Then it times ``offwatch report`` (reading, decimating, six plots and the page;
the smoother is skipped beyond 48 hours) and ``offwatch export --format csv``
on it, and prints the figures for README. Timing figures belong here, never in
the tests.
"""

from __future__ import annotations

import argparse
import math
import random
import tempfile
import time
from pathlib import Path

from daemon.core.config import load_config
from daemon.core.readings import Message
from daemon.outlets.export import read_track, write_csv
from daemon.outlets.recording.writer import RecordingWriter
from daemon.core.payloads import iso_utc

T0 = 1777867200.0  # 2026-05-04 04:00 UTC, as the invented demo passage
SENTENCES = ("RMC", "GGA", "VTG", "ZDA", "HDG", "VHW", "MTW", "MDA", "MWV", "DPT", "XDR")


def _counts(n: int) -> dict:
    return {"ais": 0, "bad_checksum": 0, "empty": 0, "good": n, "implausible": 0, "last_seen": 0.0,
            "no_checksum": 0, "no_variation": 0, "not_sentence": 0, "proprietary": 0, "unknown": 0,
            "unparseable": 0}


def synthetic_messages(hours: float, seed: int = 1):
    """The messages of a long invented passage, in data-time order."""
    rnd = random.Random(seed)
    lat, lon, course = 41.2, -32.5, 135.0
    temp, msl = 15.5, 1017.0
    n_seconds = int(hours * 3600)
    for k in range(n_seconds):
        t = T0 + k
        iso = iso_utc(t)
        if k % (4 * 3600) == 0:
            course = (course + rnd.uniform(-100, 100)) % 360
        lat += 6.0 / 3600 / 60 * math.cos(math.radians(course))
        lon += 6.0 / 3600 / 60 * math.sin(math.radians(course)) / math.cos(math.radians(lat))
        set_deg = (200 + 60 * math.sin(k / 20000.0)) % 360
        drift = 0.8 + 0.6 * math.sin(k / 7000.0) ** 2
        yield Message(t, "offwatch/position", {"time": iso, "lat": round(lat, 7), "lon": round(lon, 7),
                                               "source": "gnss", "sigma_m": 4.5, "sog_kn": 6.1,
                                               "cog_deg": round(course, 1), "hdop": 0.9}, retain=True)
        yield Message(t, "offwatch/current", {
            "time": iso, "set_deg": round(set_deg, 1), "drift_kn": round(drift, 3),
            "east_kn": round(drift * math.sin(math.radians(set_deg)), 3),
            "north_kn": round(drift * math.cos(math.radians(set_deg)), 3), "set_sigma_deg": 3.3,
            "drift_sigma_kn": 0.05, "quality": "valid", "stw_scale": 1.0518, "heading_offset_deg": -2.48,
            "stw_scale_sigma": 0.0084, "heading_offset_sigma_deg": 0.35,
            "calibration": {"status": "calibrated", "advice": "log scale and heading offset are calibrated; "
                                                              "further course changes keep them fresh"},
            "stale_inputs": [], "log": "trusted", "q_inflation": 1.0,
            "health": {"fused": k, "rejected": 0, "faults": 0, "resets": 0, "duplicates": k, "held": 0,
                       "turning": 42, "no_inputs": 1, "bad_inputs": 0}}, retain=True)
        if k % 2 == 0:
            yield Message(t, "offwatch/sea_temperature", {"time": iso, "temp_c": round(temp, 3),
                                                          "gradient_c_per_nm": 0.0,
                                                          "distance_run_nm": round(k / 600.0, 4)}, retain=True)
        if k % (6 * 3600) == 3 * 3600:
            delta = rnd.choice((-3.0, 3.0))
            temp += delta
            yield Message(t, "offwatch/events", {"time": iso, "kind": "front_crossing", "lat": lat, "lon": lon,
                                                 "delta_c": delta, "gradient_c_per_nm": 5.0, "warmer": delta > 0},
                          retain=False, kind="event")
            for state in ("active", "cleared"):
                yield Message(t, "offwatch/alerts/front", {
                    "time": iso, "id": "front", "priority": "caution", "state": state,
                    "text": "Sea temperature changed at a front.", "since": iso}, retain=True, qos=1, kind="alert")
        if k % 10 == 0:
            msl = 1013.0 + 12.0 * math.sin(2 * math.pi * k / (4 * 86400.0)) + rnd.gauss(0, 0.05)  # a low every 4 days
            yield Message(t, "offwatch/pressure", {"time": iso, "msl_hpa": round(msl, 2), "tendency_3h_hpa": -0.5,
                                                   "rate_hpa_per_h": -0.2, "descriptor": "falling slowly",
                                                   "characteristic": 7}, retain=True)
            yield Message(t, "offwatch/status", {
                "time": iso, "state": "online",
                "sensors": {"fix": 1.0, "heading": 0.5, "water_speed": 0.8, "sea_temperature": 1.5,
                            "pressure": 4.3},
                "inputs": {"nmea": {"sentences": {s: _counts(k) for s in SENTENCES},
                                    "totals": _counts(11 * k)}}}, retain=True, kind="status")


def write_recording(path: Path, hours: float) -> int:
    w = RecordingWriter(path, block_span_s=600.0)
    w.conn.execute("PRAGMA synchronous=OFF")  # a throw-away file: no power-cut safety needed, only speed
    n, next_commit = 0, T0 + 1.0
    for msg in synthetic_messages(hours):
        if msg.t_s >= next_commit:
            w.commit()
            next_commit = msg.t_s + 600.0
        w.add_message(msg)
        n += 1
    w.close()
    return n


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--hours", type=float, default=336.0, help="length of the synthetic passage (336 h: two weeks)")
    ap.add_argument("--keep", metavar="DIR", help="keep the recording and the report here")
    args = ap.parse_args(argv)
    from report.command import make_report  # the report extra: pip install 'offwatch[report]'

    base = Path(args.keep) if args.keep else Path(tempfile.mkdtemp(prefix="offwatch-bench-report-"))
    base.mkdir(parents=True, exist_ok=True)
    db = base / "long.sqlite"
    cfg = load_config(None)
    if not db.exists():
        t = time.perf_counter()
        n = write_recording(db, args.hours)
        print(f"synthetic recording: {args.hours:.0f} h, {n} messages, {db.stat().st_size / 1e6:.0f} MB, "
              f"written in {time.perf_counter() - t:.0f} s")
    t, c = time.perf_counter(), time.process_time()
    _, passage = make_report(db, base / "report", cfg)
    t_report, c_report = time.perf_counter() - t, time.process_time() - c
    print(f"offwatch report: {t_report:.1f} s wall, {c_report:.1f} s CPU; {passage.messages} messages decoded "
          f"(a long recording is read thinned), {len(passage.track.rows)} track points plotted")
    t, c = time.perf_counter(), time.process_time()
    track = read_track(db, cfg)
    write_csv(track, base / "track.csv")
    print(f"offwatch export --format csv: {time.perf_counter() - t:.1f} s wall, {time.process_time() - c:.1f} s CPU, "
          f"{len(track.rows)} points (one a minute)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
