"""Benchmark (not a test): the live service's figures at an ordinary sentence rate.

    python -m tools.bench.live [--runs 3] [--minutes 3] [--config-runs 5]

Each run starts the real service, ``offwatch run``, in a process of its own
with a config of its own in a temp directory: one TCP input to a multiplexer
the bench plays on a free loopback port, MQTT to a Mosquitto the bench starts
on a free port, the recording on, and ``NOTIFY_SOCKET`` naming a datagram
socket the bench reads (systemd's sd_notify protocol, sd_notify(3)).

- start: from the exec to the ``READY=1`` datagram (target under 2 s).
- the feed: a simulated passage (tools/simulator: a 20 Hz compass, a 5 Hz
  GNSS, log, wind, sounder, thermometer, barometer: about 40 sentences a
  second) beginning at the run's own wall time, sent without TAG blocks as a
  multiplexer sends them, each line when the wall clock reaches its data time.
- CPU: utime + stime of the process (``/proc/<pid>/stat`` fields 14 and 15, in
  clock ticks: proc(5)) over the feed after its first 30 s (a warm-up), as a
  share of one core (target under 2 %); and each thread's share over the same
  span (``/proc/<pid>/task/<tid>/stat``), named by the order the service
  starts them (``THREAD_ROLES``).
- memory: VmRSS (``/proc/<pid>/status``) sampled each second: the largest and
  the last (target under 120 MB).
- a bad config: from the exec of ``offwatch run --config BAD`` to its non-zero
  exit, for a misspelt key and a value out of range, and whether the message
  names the key (target under 0.5 s).

The start and the bad config are also given in CPU seconds of the process
(its own, whatever else the machine runs). ``--profile FILE`` runs the
service under cProfile (``python -m cProfile``), which writes FILE when the
service stops on SIGTERM: where the idle and feeding path spends its time.

Several runs each; min / median / max printed. The figures depend on the
machine and on what else runs on it (the load average is printed with them): they
go into the README's benchmark table, never into a test.
"""

from __future__ import annotations

import argparse
import os
import signal
import socket
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from dataclasses import dataclass
from pathlib import Path

from tests.helpers import NotifyListener  # the service manager's end of sd_notify, as the service test has it

REPO = Path(__file__).resolve().parents[2]
CLOCK_TICKS = os.sysconf("SC_CLK_TCK")
WARM_UP_S = 30.0  # the estimators converge and the first recording blocks are merged before CPU is counted
PREFIX = "benchboat"


def offwatch(*args: str) -> list[str]:
    return [sys.executable, "-m", "daemon", *args]


def installed_env() -> dict[str, str]:
    """The environment of the service as installed: its modules compiled to bytecode, as pip does.

    A checkout run with PYTHONDONTWRITEBYTECODE compiles every module of its
    own at every start (a quarter of a second of CPU here); the bench compiles
    them once into their ``__pycache__`` (ignored by git), as a first start
    without that variable would, so a start costs what it costs on a boat.
    """
    env = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}
    env["PYTHONUNBUFFERED"] = "1"
    subprocess.run([sys.executable, "-m", "compileall", "-q", "daemon", "estimators"], cwd=REPO, env=env,
                   check=True, stdout=subprocess.DEVNULL)
    return env


# -- the feed -------------------------------------------------------------------------------------

def simulated_feed(t0: float, seconds: float, seed: int) -> list[tuple[float, bytes]]:
    """(data time, line as a multiplexer sends it) of an invented passage that begins at ``t0``."""
    from daemon.nmea0183.codec import split_tag
    from tools.simulator import (Ocean, PressureField, Scenario, SeaTemperatureField, SensorSpec, Steer,
                                 SteadyCurrent, WindField, simulate)
    from tools.simulator.nmea_writer import WriterOptions, write_nmea

    lat, lon = 41.2, -28.4
    ocean = Ocean(currents=(SteadyCurrent(30.0, 1.2),), sea_temp=SeaTemperatureField(15.0, lat, lon),
                  pressure=PressureField(((t0, 1015.0), (t0 + seconds, 1013.5))), wind=WindField(((t0, 220.0, 12.0),)))
    scenario = Scenario(name="bench_live", start_utc=t0, duration_s=seconds, start_lat=lat, start_lon=lon,
                        helm=(Steer(90.0, 6.0, seconds / 2), Steer(160.0, 6.0, seconds / 2)), ocean=ocean,
                        sensors=SensorSpec(heading_hz=20.0, fix_hz=5.0))
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "feed.nmea"
        write_nmea(simulate(scenario, seed), path, WriterOptions())
        lines = path.read_text(encoding="ascii").splitlines()
    feed = []
    for line in lines:
        status, t, _, sentence = split_tag(line)  # the TAG block's c: gives the data time; the wire has none
        if status == "ok" and t is not None:
            feed.append((t, sentence.encode("ascii") + b"\r\n"))
    return feed


class Multiplexer:
    """A TCP server on loopback that sends the feed to the one client that connects, paced by data time."""

    def __init__(self, feed: list[tuple[float, bytes]]) -> None:
        self.feed = feed
        self.server = socket.create_server(("127.0.0.1", 0))
        self.port = self.server.getsockname()[1]
        self.sent = 0
        self.stop = threading.Event()
        self.thread = threading.Thread(target=self._serve, daemon=True)
        self.thread.start()

    def _serve(self) -> None:
        self.server.settimeout(0.5)
        while not self.stop.is_set():
            try:
                conn, _ = self.server.accept()
            except socket.timeout:
                continue
            with conn:
                self._send(conn)
            return

    def _send(self, conn: socket.socket) -> None:
        for t, line in self.feed:
            delay = t - time.time()
            if delay > 0 and self.stop.wait(delay):
                return
            if t < time.time() - 5.0:  # connected late: what a multiplexer had before is gone
                continue
            try:
                conn.sendall(line)
            except OSError:
                return
            self.sent += 1

    def close(self) -> None:
        self.stop.set()
        self.thread.join(timeout=5)
        self.server.close()


# -- the process -----------------------------------------------------------------------------------

def cpu_s(pid: int) -> float:
    """utime + stime of a process in seconds (proc(5): /proc/<pid>/stat fields 14 and 15)."""
    return cpu_s_of(Path(f"/proc/{pid}/stat"))


def cpu_s_of(stat: Path) -> float:
    text = stat.read_text()
    fields = text[text.rindex(")") + 2:].split()  # after the command name, which may hold spaces
    return (int(fields[11]) + int(fields[12])) / CLOCK_TICKS  # fields 14, 15 counted from 1, from field 3 on


# The service's threads in the order it starts them (Service.__init__, then run): a thread's id grows
# with its start on Linux, so the n-th thread after the main one is the n-th started.
# numpy's BLAS starts a pool thread when the assembly imports it (idle: the filters' matrices are 4 x 4).
THREAD_ROLES = ("the loop", "the recorder", "the MQTT outbox", "paho's network", "numpy's BLAS pool", "the input")


def thread_cpu_s(pid: int) -> dict[int, float]:
    """utime + stime of each thread of a process, by thread id (/proc/<pid>/task/<tid>/stat)."""
    out = {}
    for task in Path(f"/proc/{pid}/task").iterdir():
        try:
            out[int(task.name)] = cpu_s_of(task / "stat")
        except (FileNotFoundError, ProcessLookupError):
            continue  # the thread ended meanwhile
    return out


def thread_shares(before: dict[int, float], after: dict[int, float], seconds: float) -> dict[str, float]:
    """Each thread's share of one core between two samples, named by its place in THREAD_ROLES."""
    tids = sorted(after)
    names = {tid: THREAD_ROLES[k] if k < len(THREAD_ROLES) else f"thread {k}" for k, tid in enumerate(tids)}
    return {names[tid]: (after[tid] - before.get(tid, 0.0)) / seconds for tid in tids}


def rss_mb(pid: int) -> float:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1]) * 1024 / 1e6  # kB (KiB) in proc(5), MB here
    return float("nan")


@dataclass
class LiveRun:
    ready_s: float
    ready_cpu_s: float
    cpu_share: float
    rss_max_mb: float
    rss_end_mb: float
    threads: dict[str, float]  # each thread's share of one core over the same span
    sentences: int  # sent to the service
    rate: float  # the feed's sentences per second of data time


def write_config(work: Path, mux_port: int, broker_port: int) -> Path:
    cfg = work / "live.toml"
    cfg.write_text(f'[inputs.mux]\nkind = "tcp"\nhost = "127.0.0.1"\nport = {mux_port}\n\n'
                   f'[mqtt]\nurl = "mqtt://127.0.0.1:{broker_port}"\nprefix = "{PREFIX}"\n\n'
                   f'[state]\ndir = "{work / "state"}"\n\n[recording]\nper = "start"\n', encoding="utf-8")
    return cfg


def wait_ready(notify: NotifyListener, proc: subprocess.Popen, t_exec: float, timeout_s: float = 30.0) -> float:
    """Seconds from the exec (``time.monotonic()``) to READY=1."""
    while not notify.times_of("READY=1"):
        if proc.poll() is not None:
            raise RuntimeError(f"offwatch run exited with {proc.returncode} before READY=1")
        if time.monotonic() - t_exec > timeout_s:
            raise RuntimeError(f"no READY=1 within {timeout_s:.0f} s")
        time.sleep(0.005)
    return notify.times_of("READY=1")[0] - t_exec


def live_run(work: Path, env: dict[str, str], broker_port: int, seconds: float, seed: int,
             profile: Path | None = None) -> LiveRun:
    t0 = float(int(time.time())) + 2.0
    mux = Multiplexer(simulated_feed(t0, seconds + 5.0, seed))
    cfg = write_config(work, mux.port, broker_port)
    notify = NotifyListener(work / "notify")
    env = dict(env, NOTIFY_SOCKET=notify.name)
    t_exec = time.monotonic()
    # cProfile writes its figures when the service returns from SIGTERM (a normal exit)
    command = offwatch("run", "--config", str(cfg)) if profile is None else \
        [sys.executable, "-m", "cProfile", "-o", str(profile), "-m", "daemon", "run", "--config", str(cfg)]
    proc = subprocess.Popen(command, cwd=REPO, env=env,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        ready_s = wait_ready(notify, proc, t_exec)
        ready_cpu_s = cpu_s(proc.pid)
        time.sleep(WARM_UP_S)
        rss = [rss_mb(proc.pid)]
        c0, w0, t0_threads = cpu_s(proc.pid), time.perf_counter(), thread_cpu_s(proc.pid)
        t_end = w0 + seconds - WARM_UP_S
        while time.perf_counter() < t_end:
            time.sleep(1.0)
            rss.append(rss_mb(proc.pid))
        c1, w1, t1_threads = cpu_s(proc.pid), time.perf_counter(), thread_cpu_s(proc.pid)
        if proc.poll() is not None:
            raise RuntimeError(f"offwatch run exited with {proc.returncode} during the feed")
    finally:
        proc.send_signal(signal.SIGTERM)
        try:
            proc.wait(timeout=30)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
        mux.close()
        notify.close()
    return LiveRun(ready_s=ready_s, ready_cpu_s=ready_cpu_s, cpu_share=(c1 - c0) / (w1 - w0), rss_max_mb=max(rss), rss_end_mb=rss[-1],
                   threads=thread_shares(t0_threads, t1_threads, w1 - w0), sentences=mux.sent, rate=len(mux.feed) / (mux.feed[-1][0] - mux.feed[0][0]))


# -- a bad config ----------------------------------------------------------------------------------

BAD_CONFIGS = {  # what is wrong, the config, the key its message must name
    "misspelt key": ('[inputs.mux]\nkind = "tcp"\nhost = "127.0.0.1"\n\n[current]\nq_curent = 0.01\n', "q_curent"),
    "value out of range": ('[inputs.mux]\nkind = "tcp"\nhost = "127.0.0.1"\n\n[mqtt]\nkeepalive_s = 1\n',
                           "keepalive_s"),
}


def bad_config_run(work: Path, env: dict[str, str], text: str, key: str) -> tuple[float, float, int, bool]:
    """(wall seconds from exec to exit, CPU seconds of the process, exit status, whether stderr names the key)."""
    cfg = work / "bad.toml"
    cfg.write_text(text, encoding="utf-8")
    err = work / "bad.err"
    t = time.perf_counter()
    with open(err, "wb") as f:
        proc = subprocess.Popen(offwatch("run", "--config", str(cfg)), cwd=REPO, stdout=subprocess.DEVNULL,
                                stderr=f, env=dict(env, NOTIFY_SOCKET=""))
        _, status, usage = os.wait4(proc.pid, 0)  # getrusage(2) of the child: its own CPU, whatever the load
    wall = time.perf_counter() - t
    proc.returncode = os.waitstatus_to_exitcode(status)
    return wall, usage.ru_utime + usage.ru_stime, proc.returncode, key in err.read_text(errors="replace")


# -- the figures -----------------------------------------------------------------------------------

def spread(values: list[float], fmt: str) -> str:
    return f"min {min(values):{fmt}} / median {statistics.median(values):{fmt}} / max {max(values):{fmt}}"


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=3, help="service runs fed live (0: the bad configs only)")
    ap.add_argument("--minutes", type=float, default=3.0, help="length of each run's feed")
    ap.add_argument("--config-runs", type=int, default=5, help="runs of each bad config")
    ap.add_argument("--seed", type=int, default=20261202)
    ap.add_argument("--profile", metavar="FILE", help="run the service under cProfile (one run), figures to FILE")
    args = ap.parse_args(argv)
    from tests.helpers import Mosquitto

    print(f"load: {os.getloadavg()[0]:.1f} {os.getloadavg()[1]:.1f} {os.getloadavg()[2]:.1f} "
          f"on {os.cpu_count()} cores")
    with tempfile.TemporaryDirectory(prefix="offwatch-bench-live-") as tmp:
        base = Path(tmp)
        env = installed_env()
        for what, (text, key) in (BAD_CONFIGS.items() if args.config_runs > 0 else ()):
            runs = [bad_config_run(base, env, text, key) for _ in range(args.config_runs)]
            print(f"bad config, {what}: exec to exit {spread([r[0] for r in runs], '.2f')} s over {len(runs)} runs, "
                  f"CPU {spread([r[1] for r in runs], '.2f')} s; exit status {sorted({r[2] for r in runs})}; "
                  f"the message names {key!r}: {sum(r[3] for r in runs)}/{len(runs)}")
        if args.runs < 1:  # the bad-config figures alone
            return 0
        (base / "broker").mkdir()
        broker = Mosquitto(base / "broker", persistence=False)
        broker.start()
        try:
            runs = []
            for k in range(args.runs):
                work = base / f"run{k}"
                work.mkdir()
                profile = Path(args.profile).resolve() if args.profile else None
                runs.append(live_run(work, env, broker.port, args.minutes * 60.0, args.seed + k, profile))
                r = runs[-1]
                print(f"run {k + 1}: READY after {r.ready_s:.2f} s ({r.ready_cpu_s:.2f} s CPU); {r.sentences} sentences sent, "
                      f"{r.rate:.1f}/s; CPU {100 * r.cpu_share:.2f} % of a core; resident "
                      f"{r.rss_max_mb:.0f} MB at most, {r.rss_end_mb:.0f} MB at the end", flush=True)
                print("  by thread: " + ", ".join(f"{name} {100 * share:.2f} %" for name, share in r.threads.items()),
                      flush=True)
        finally:
            broker.stop()
    print(f"start to READY=1: {spread([r.ready_s for r in runs], '.2f')} s over {len(runs)} runs, "
          f"CPU {spread([r.ready_cpu_s for r in runs], '.2f')} s")
    print(f"CPU at ~{statistics.median(r.rate for r in runs):.0f} sentences/s: "
          f"{spread([100 * r.cpu_share for r in runs], '.2f')} % of one core")
    print(f"resident memory: {spread([r.rss_max_mb for r in runs], '.0f')} MB (largest sample of each run)")
    print(f"load at the end: {os.getloadavg()[0]:.1f} {os.getloadavg()[1]:.1f} {os.getloadavg()[2]:.1f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
