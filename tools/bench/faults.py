"""Benchmark (not a test): the README's reliability figures, measured the hard way.

    python -m tools.bench.faults [--kills 15] [--restarts 5] [--flood-s 20]

Three measurements, each against the real program in a subprocess:

- kills: an ``offwatch replay --record`` of a simulated passage, paced at 60x,
  killed with SIGKILL at a random moment, again and again, each run recording
  into a new file. After each kill: ``PRAGMA integrity_check``, the recording
  replays, and the data time it lost: from the last line kept to where the
  replay had got (its JSONL, written line by line, says how far it read) -
  about one commit interval of wall time, i.e. up to a minute of data at 60x.
- restarts: one paced replay of the same passage with ``--mqtt`` to a real
  Mosquitto, the broker restarted (SIGTERM, start) ``--restarts`` times
  during it; a display with a persistent session counts every alert change of
  the replay's JSONL that it received, in order.
- flood: ``offwatch run`` with a UDP input on loopback, flooded for
  ``--flood-s`` seconds with datagrams of distinct unknown sentence types and
  good ones; its resident memory (VmRSS from /proc) sampled each second.

The figures depend on the machine; they go into the README's reliability
table, never into a test.
"""

from __future__ import annotations

import argparse
import json
import os
import random
import signal
import socket
import sqlite3
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
PREFIX = "benchboat"


def simulated_passage(out_dir: Path, minutes: int = 30) -> Path:
    """Half an hour of an invented boat in an invented current, with a front and a pressure fall."""
    from tools.simulator import (Front, Ocean, PressureField, Scenario, SeaTemperatureField, SensorSpec, Steer,
                                 SteadyCurrent, WindField, simulate)
    from tools.simulator.nmea_writer import WriterOptions, write_nmea
    from tools.simulator.scenarios import MIN, along, utc

    t0, lat, lon = utc(2026, 6, 3, 5), 41.2, -28.4
    front = Front(*along(lat, lon, 90.0, 1.6), along_deg=0.0, delta_c=3.0, width_nm=0.3)
    ocean = Ocean(currents=(SteadyCurrent(30.0, 3.0),), sea_temp=SeaTemperatureField(15.0, lat, lon, fronts=(front,)),
                  pressure=PressureField(((t0, 1015.0), (t0 + 60 * MIN, 1003.0))),
                  wind=WindField(((t0, 220.0, 12.0),)))
    scenario = Scenario(name="bench_faults", start_utc=t0, duration_s=minutes * MIN, start_lat=lat, start_lon=lon,
                        helm=(Steer(90.0, 6.0, minutes * MIN),), ocean=ocean,
                        sensors=SensorSpec(heading_hz=1.0, gnss_outages=((t0 + 4 * MIN, t0 + 4 * MIN + 40),)))
    path = out_dir / "passage.nmea"
    write_nmea(simulate(scenario, 11), path, WriterOptions())
    cfg = out_dir / "bench.toml"
    cfg.write_text(f'[mqtt]\nprefix = "{PREFIX}"\n\n[pressure]\nearly_window_s = 900.0\n\n'
                   "[alerts]\nclear_after_by_id = { gnss_lost = 5.0 }\n")
    return path


def offwatch(*args: str) -> list[str]:
    return [sys.executable, "-m", "daemon", *args]


# -- kills ---------------------------------------------------------------------------------------

def last_jsonl_time(path: Path) -> float | None:
    if not path.exists():
        return None
    lines = path.read_bytes().split(b"\n")[:-1]
    return json.loads(lines[-1])["t"] if lines else None


def bench_kills(passage: Path, cfg: Path, work: Path, kills: int, rng: random.Random) -> dict:
    from daemon.outlets.recording.reading import iter_raw
    sound, replayed, lost_s, no_file = 0, 0, [], 0
    for k in range(kills):
        rec, jsonl = work / f"kill{k}.sqlite", work / f"kill{k}.jsonl"
        proc = subprocess.Popen(offwatch("replay", str(passage), "--config", str(cfg), "--record", str(rec),
                                         "--jsonl", str(jsonl), "--speed", "60", "--quiet"),
                                cwd=REPO, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        deadline = time.monotonic() + 60
        while not rec.exists() and time.monotonic() < deadline and proc.poll() is None:
            time.sleep(0.05)  # start-up takes seconds on a busy machine: kill while it records
        time.sleep(rng.uniform(0.0, 6.0))
        reached = last_jsonl_time(jsonl)
        proc.send_signal(signal.SIGKILL)
        proc.wait()
        if not rec.exists():
            no_file += 1
            continue
        with sqlite3.connect(rec) as db:
            sound += db.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        kept = [line.t_s for line in iter_raw(rec)]
        again = subprocess.run(offwatch("replay", str(rec), "--config", str(cfg), "--quiet"), cwd=REPO,
                               capture_output=True)
        replayed += again.returncode == 0
        if reached is not None:
            lost_s.append(max(0.0, reached - (kept[-1] if kept else reached)))
    return {"kills": kills, "no_file_yet": no_file, "sound": sound, "replayed": replayed,
            "lost_data_s_max": max(lost_s, default=0.0),
            "lost_data_s_median": sorted(lost_s)[len(lost_s) // 2] if lost_s else 0.0}


# -- broker restarts ---------------------------------------------------------------------------------

def bench_restarts(passage: Path, cfg: Path, work: Path, restarts: int) -> dict:
    from tests.helpers import Display, Mosquitto, wait_until
    from tests.test_mqtt_end_to_end import alert_changes, missing_in_order, read_jsonl, received_alerts

    broker_dir = work / "broker"
    broker_dir.mkdir()
    broker = Mosquitto(broker_dir)
    broker.start()
    display = Display(broker.host, broker.port, prefix=PREFIX, persistent=True)
    time.sleep(1.5)  # mosquitto saves the display's session every second
    out = work / "restarts.jsonl"
    proc = subprocess.Popen(offwatch("replay", str(passage), "--config", str(cfg), "--jsonl", str(out),
                                     "--mqtt", f"mqtt://{broker.host}:{broker.port}", "--speed", "60", "--quiet"),
                            cwd=REPO, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    try:
        time.sleep(3.0)
        for _ in range(restarts):
            broker.restart()
            time.sleep(3.0)
        proc.wait(timeout=180)
        expected = alert_changes(read_jsonl(out))
        wait_until(lambda: not missing_in_order(expected, received_alerts(display)), 30)
        missing = missing_in_order(expected, received_alerts(display))
        got = received_alerts(display)
    finally:
        if proc.poll() is None:
            proc.kill()
        display.close()
        broker.stop()
    return {"restarts": restarts, "exit": proc.returncode, "alert_changes": len(expected),
            "missing": len(missing), "received_with_repeats": len(got)}


# -- UDP flood ---------------------------------------------------------------------------------------

def rss_mib(pid: int) -> float:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1]) / 1024
    return float("nan")


def nmea(body: str) -> bytes:
    cs = 0
    for ch in body.encode():
        cs ^= ch
    return f"${body}*{cs:02X}\r\n".encode()


def bench_flood(passage: Path, work: Path, seconds: float) -> dict:
    with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as probe:
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
    state = work / "flood-state"
    cfg = work / "flood.toml"
    cfg.write_text(f'[inputs.wifi]\nkind = "udp"\nbind = "127.0.0.1"\nport = {port}\n\n'
                   f'[state]\ndir = "{state}"\n\n[recording]\nper = "start"\n')
    good = [line.encode() + b"\r\n" for line in passage.read_text().splitlines()[:2000]]
    proc = subprocess.Popen(offwatch("run", "--config", str(cfg)), cwd=REPO, stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL)
    samples, sent = [], 0
    try:
        time.sleep(3.0)
        start_rss = rss_mib(proc.pid)
        tx = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
        t_end = time.monotonic() + seconds
        next_sample = time.monotonic() + 1.0
        while time.monotonic() < t_end:
            # distinct unknown sentence types (each a new name) between good lines
            tx.sendto(nmea(f"GPK{sent}X,1") if sent % 2 else good[(sent // 2) % len(good)], ("127.0.0.1", port))
            sent += 1
            if time.monotonic() >= next_sample:
                samples.append(rss_mib(proc.pid))
                next_sample += 1.0
        tx.close()
        time.sleep(2.0)
        end_rss = rss_mib(proc.pid)
        alive = proc.poll() is None
    finally:
        proc.send_signal(signal.SIGTERM)
        proc.wait(timeout=30)
    return {"seconds": seconds, "datagrams": sent, "rss_start_mib": start_rss, "rss_max_mib": max(samples),
            "rss_end_mib": end_rss, "alive": alive}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--kills", type=int, default=15)
    ap.add_argument("--restarts", type=int, default=5)
    ap.add_argument("--flood-s", type=float, default=20.0)
    ap.add_argument("--seed", type=int, default=20260603)
    args = ap.parse_args()
    rng = random.Random(args.seed)
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        passage = simulated_passage(work)
        cfg = work / "bench.toml"
        if args.kills:
            k = bench_kills(passage, cfg, work, args.kills, rng)
            print(f"kills: {k['kills']} SIGKILLs of replay --record; {k['no_file_yet']} before the file existed; "
                  f"{k['sound']} files passed integrity_check, {k['replayed']} replayed; data lost per kill: "
                  f"median {k['lost_data_s_median']:.0f} s, max {k['lost_data_s_max']:.0f} s of data at 60x, i.e. "
                  f"{k['lost_data_s_median'] / 60:.1f} and {k['lost_data_s_max'] / 60:.1f} s of wall time "
                  f"(commits every 1 s)")
        if args.restarts:
            r = bench_restarts(passage, cfg, work, args.restarts)
            print(f"restarts: {r['restarts']} broker restarts during a replay --mqtt (exit {r['exit']}); "
                  f"{r['alert_changes']} alert changes, {r['missing']} missing at the display, "
                  f"{r['received_with_repeats']} received (QoS 1 repeats and republished states included)")
        if args.flood_s:
            f = bench_flood(passage, work, args.flood_s)
            print(f"flood: {f['datagrams']} UDP datagrams in {f['seconds']:.0f} s (half distinct unknown "
                  f"sentence types); resident memory {f['rss_start_mib']:.0f} MiB before, max "
                  f"{f['rss_max_mib']:.0f} MiB, {f['rss_end_mib']:.0f} MiB after; still running: {f['alive']}")


if __name__ == "__main__":
    os.environ.setdefault("PYTHONUNBUFFERED", "1")
    main()
