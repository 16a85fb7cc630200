"""Benchmark of the recording: bytes per sentence and commit latency.

    python -m tools.bench.recording [--minutes 60] [--rate 25] [--captures DIR]

Feeds NMEA sentences (the demo passage in recorded_runs/ when there is one,
TAG blocks taken off; else the real captures beside the repository, or
``--captures DIR``) to a RecordingWriter
at ``--rate`` sentences per second of data time, committing once per second of
data, as the live service does, with about 4 messages per second (position,
current, sea temperature, sea state at 1 Hz; pressure, status every 10 s) and
an alert change now and then. Two time stampings are measured:

- ``ms``: data times on whole milliseconds (TAG ``c:`` times, simulator);
- ``live``: receive-clock times with microsecond jitter (no exact ms).

It prints bytes per sentence (raw blocks only, and the whole file), the
extrapolation to 24 hours, and the commit latency (median, 95 %, max), which
on an SD card is mostly the fsync that ``synchronous=FULL`` asks for.
Timing figures belong here, never in the tests.
"""

from __future__ import annotations

import argparse
import gzip
import random
import sqlite3
import statistics
import tempfile
import time
from pathlib import Path

from daemon.core.readings import Message, RawLine
from daemon.outlets.recording.reading import iter_raw
from daemon.outlets.recording.tag_nmea import parse_tag_line
from daemon.outlets.recording.writer import RecordingWriter

REPO = Path(__file__).resolve().parents[2]
CAPTURE_NAMES = ("under-way-94min-hdg-hdt-rmc.nmea", "sounder-survey-43min-dpt-mtw.nmea",
                 "berth-13min-mda-pressure.nmea")


def _read_text(path: Path) -> str:
    try:
        data = gzip.open(path).read() if path.suffix == ".gz" else path.read_bytes()
    except EOFError:  # a gzip file still being written: take what is there
        with gzip.open(path) as f:
            data = b"".join(iter(lambda: _read_some(f), b""))
    return data.decode("ascii", errors="replace")


def _read_some(f) -> bytes:
    try:
        return f.read(65536)
    except EOFError:
        return b""


def load_sentences(captures: Path | None) -> tuple[list[str], str]:
    """Realistic sentences: the demo passage if committed, else the real captures; TAG blocks taken off
    (live instruments send none; the recorder keeps whatever arrives)."""
    demo = sorted((REPO / "recorded_runs").glob("*.nmea*")) if (REPO / "recorded_runs").is_dir() else []
    if captures is None and demo:
        files = demo
    else:
        base = captures or REPO.parent / "shared" / "real-captures"
        files = [base / name for name in CAPTURE_NAMES if (base / name).exists()]
    if not files:
        raise SystemExit("no NMEA sentences found: give --captures DIR")
    lines: list[str] = []
    for f in files:
        text = _read_text(f)
        lines += [parse_tag_line(s.strip("\x00\r ")).text if s.startswith("\\") else s.strip("\x00\r ")
                  for s in text.replace("\r", "\n").split("\n")]
    return [s for s in lines if s.startswith(("$", "!"))], ", ".join(f.name for f in files)


def _payloads(t: float, rng: random.Random) -> list[tuple[str, dict, str]]:
    """Messages of one second, with full-precision floats as the estimators give them."""
    iso = time.strftime("%Y-%m-%dT%H:%M:%S", time.gmtime(t)) + ".000Z"
    out = [
        ("offwatch/position", {"time": iso, "lat": 47.1 + rng.random() * 1e-3, "lon": -4.2 + rng.random() * 1e-3,
                               "source": "gnss", "sigma_m": 3 + rng.random()}, "state"),
        ("offwatch/current", {"time": iso, "set_deg": rng.uniform(0, 360), "drift_kn": rng.uniform(0, 2),
                              "east_kn": rng.gauss(0, 1), "north_kn": rng.gauss(0, 1),
                              "set_sigma_deg": rng.uniform(2, 20), "drift_sigma_kn": rng.uniform(0.05, 0.3),
                              "quality": "valid", "stw_scale": 1 + rng.gauss(0, 0.01),
                              "heading_offset_deg": rng.gauss(0, 1)}, "state"),
        ("offwatch/sea_temperature", {"time": iso, "temp_c": 14 + rng.random(),
                                      "gradient_c_per_nm": rng.gauss(0, 0.05)}, "state"),
        ("offwatch/sea_state", {"time": iso, "true_wind_from_deg": rng.uniform(0, 360),
                                "true_wind_kn": rng.uniform(5, 25), "ground_wind_from_deg": rng.uniform(0, 360),
                                "ground_wind_kn": rng.uniform(5, 25), "opposing_current_kn": rng.uniform(0, 1),
                                "height_factor": rng.uniform(1, 1.5), "length_factor": rng.uniform(0.8, 1),
                                "steepness_factor": rng.uniform(1, 1.6)}, "state"),
    ]
    if int(t) % 10 == 0:
        out.append(("offwatch/pressure", {"time": iso, "msl_hpa": 1013 + rng.gauss(0, 2),
                                          "tendency_3h_hpa": rng.gauss(0, 1), "rate_hpa_per_h": rng.gauss(0, 0.3),
                                          "descriptor": "steady", "characteristic": 4}, "state"))
        out.append(("offwatch/status", {"time": iso, "state": "online",
                                        "sensors": {"gnss": 0.2, "heading": 0.1, "sea_temperature": 1.1}},
                    "status"))
    if int(t) % 600 == 0:
        out.append(("offwatch/alerts/front", {"time": iso, "id": "front", "priority": "caution",
                                              "state": "active", "text": "sea temperature changed 1.2 C within "
                                              "0.3 nm; check the chart for a front", "since": iso}, "alert"))
    return out


def _rounded(payload: dict) -> dict:
    """The payload as a pipeline that rounds to display resolution would publish it."""
    return {k: (round(v, 6 if k in ("lat", "lon") else 3) if isinstance(v, float) else v)
            for k, v in payload.items()}


def run(sentences: list[str], minutes: float, rate: int, stamping: str, messages: str,
        directory: Path) -> dict:
    """One case; ``messages`` is "none", "full" (17-digit floats) or "rounded"."""
    rng = random.Random(7)
    path = directory / f"bench-{stamping}-{messages}.sqlite"
    writer = RecordingWriter(path, now_utc=1_777_000_000.0)
    t0_ms = 1_777_000_000_000
    n = int(minutes * 60 * rate)
    latencies = []
    for i in range(n):
        ms = t0_ms + i * 1000 // rate
        t = ms / 1000 if stamping == "ms" else ms / 1000 + rng.uniform(0, 0.0009)
        source = "gnss" if sentences[i % len(sentences)][3:6] in ("RMC", "GGA", "VTG", "GLL", "ZDA") else "nmea0"
        writer.add_raw(RawLine(source, t, t, sentences[i % len(sentences)]))
        if (i + 1) % rate == 0:  # one second of data: the service's commit
            if messages != "none":
                for topic, payload, kind in _payloads(t, rng):
                    payload = _rounded(payload) if messages == "rounded" else payload
                    writer.add_message(Message(t, topic, payload, retain=kind != "event",
                                               qos=1 if kind == "alert" else 0, kind=kind))
            started = time.perf_counter()
            writer.commit()
            latencies.append(time.perf_counter() - started)
    writer.close()
    conn = sqlite3.connect(path)
    raw_bytes = conn.execute("SELECT SUM(LENGTH(data)) FROM raw_block").fetchone()[0]
    msg_bytes, msg_n = conn.execute("SELECT SUM(LENGTH(data)), SUM(n_lines) FROM message_block").fetchone()
    conn.close()
    assert sum(1 for _ in iter_raw(path)) == n
    size = path.stat().st_size
    per_day = 24 * 3600 * rate
    latencies.sort()
    return {"stamping": stamping, "messages": messages, "sentences": n,
            "raw_blob_bytes_per_sentence": raw_bytes / n,
            "blob_bytes_per_message": (msg_bytes or 0) / (msg_n or 1), "file_bytes_per_sentence": size / n,
            "mb_per_24h": size / n * per_day / 1e6,
            "commit_ms_median": 1000 * statistics.median(latencies),
            "commit_ms_p95": 1000 * latencies[int(0.95 * (len(latencies) - 1))],
            "commit_ms_max": 1000 * latencies[-1]}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--minutes", type=float, default=60.0, help="data time to record per case")
    ap.add_argument("--rate", type=int, default=25, help="sentences per second")
    ap.add_argument("--captures", type=Path, default=None, help="directory of NMEA captures to use")
    ap.add_argument("--dir", type=Path, default=None, help="where to write (default: a temporary dir)")
    args = ap.parse_args()
    sentences, origin = load_sentences(args.captures)
    print(f"{len(sentences)} sentences from {origin}; {args.minutes} min at {args.rate}/s per case")
    with tempfile.TemporaryDirectory() as tmp:
        directory = args.dir or Path(tmp)
        for stamping, messages in (("ms", "none"), ("live", "none"), ("live", "full"), ("live", "rounded")):
            r = run(sentences, args.minutes, args.rate, stamping, messages, directory)
            print(f"times={r['stamping']:4} messages={r['messages']:7} "
                  f"raw blocks {r['raw_blob_bytes_per_sentence']:5.2f} B/sentence, "
                  f"messages {r['blob_bytes_per_message']:5.1f} B/message, "
                  f"file {r['file_bytes_per_sentence']:5.2f} B/sentence -> {r['mb_per_24h']:5.1f} MB/24 h; "
                  f"commit median {r['commit_ms_median']:.1f} ms, p95 {r['commit_ms_p95']:.1f} ms, "
                  f"max {r['commit_ms_max']:.1f} ms")


if __name__ == "__main__":
    main()
