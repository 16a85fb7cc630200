"""Benchmark: replay throughput through the whole pipeline, against parsing alone.

``python -m tools.bench.replay [--hours 1 6 24] [FILE...]``

For each passage: sentences per second of ``offwatch replay`` (framing, parsing,
timing, every estimator, alerts, JSON) and of a bare loop that only calls
``pynmea2.parse`` on the same lines, both measured in this run on this machine,
and their ratio (1.0: the whole pipeline is as fast as parsing alone). Each is
timed twice: wall clock and this process's CPU time (``time.process_time``); on a
machine shared with other work the CPU ratio is the steadier figure.

Passages: the first 1 and 6 hours of the demo passage, and a 24-hour passage made
of the demo repeated with its TAG times moved on by the demo's length each time
(the boat jumps back to the start at each seam: fine for throughput, not for
the estimators' figures). Or the files given. Prints a markdown table.

``--compass``: a passage with a 10-Hz compass as well (a row of the table, or the
passage ``--split`` looks at): the simulator's ``tacking_leg``, seed 3, two hours
beating with tacks, made afresh in a temporary folder each run (131 640 lines, 55 %
of them headings; the simulator is seeded, so it is the same passage every time).

``--write FILE``: only write the first passage to FILE (the first hour with ``--hours 1``): the fixed
input whose replay's instructions ``valgrind --tool=callgrind`` counts (the README's row; instructions
repeat to a few in ten thousand on a loaded machine, where CPU seconds vary by a third).

``--split``: where the replay's CPU goes (the first passage only), without
cProfile's cost per call: each estimator's step and tick timed with
``time.process_time``, and the way in (framing, parsing, timing) run alone.
"""

from __future__ import annotations

import argparse
import collections
import gzip
import re
import resource
import sys
import tempfile
import time
from pathlib import Path

import pynmea2

from daemon.commands.replay import run_replay
from daemon.core.assembly import build
from daemon.core.config import load_config
from daemon.intake.replayfiles import iter_replay
from daemon.nmea0183.codec import checksum_hex
from tools.simulator import simulate
from tools.simulator.nmea_writer import run_lines
from tools.simulator.scenarios import tacking_leg

REPO = Path(__file__).resolve().parents[2]
DEMO = REPO / "recorded_runs" / "tern-of-haldane.nmea.gz"
_TAG_TIME = re.compile(r"^\\c:(\d+)")
COMPASS_SEED = 3  # the 10-Hz compass passage: tacking_leg with this seed
COMPASS_NAME = f"tacking_leg seed {COMPASS_SEED}, 10 Hz compass"


def _demo_lines() -> list[str]:
    with gzip.open(DEMO, "rt", encoding="ascii", errors="replace", newline="") as f:
        return f.read().splitlines()


def _tag_ms(line: str) -> int | None:
    m = _TAG_TIME.match(line)
    return int(m.group(1)) if m else None


def _shifted(line: str, shift_ms: int) -> str:
    """The line with its TAG block's c: moved on by ``shift_ms`` (checksum rewritten)."""
    if not line.startswith("\\"):
        return line
    close = line.find("\\", 1)
    body = line[1:close].rsplit("*", 1)[0]
    body = re.sub(r"c:(\d+)", lambda m: f"c:{int(m.group(1)) + shift_ms}", body)
    return f"\\{body}*{checksum_hex(body)}\\" + line[close + 1:]


def passage(hours: float) -> list[str]:
    """The demo cut to ``hours``, or repeated (TAG times moved on) to reach them."""
    demo = _demo_lines()
    times = [t for t in map(_tag_ms, demo) if t is not None]
    start, span = times[0], times[-1] - times[0] + 1000
    want = int(hours * 3600 * 1000)
    out: list[str] = []
    k = 0
    while True:
        for line in demo:
            t = _tag_ms(line)
            if t is not None and t - start + k * span >= want:
                return out
            out.append(_shifted(line, k * span) if k else line)
        k += 1


def compass_passage() -> list[str]:
    """The simulator's 2-hour beat (its sensors' default: a 10-Hz compass, 1-Hz log and fix), seeded."""
    return list(run_lines(simulate(tacking_leg(), COMPASS_SEED)))


def bare_pynmea2(lines: list[str]) -> tuple[float, float]:
    """(wall, CPU) seconds for ``pynmea2.parse`` over every line (errors caught, as a reader must).

    pynmea2 does not read TAG blocks: the loop cuts one off first (that costs time too).
    """
    t0, c0 = time.perf_counter(), time.process_time()
    for line in lines:
        if line.startswith("\\"):
            line = line[line.find("\\", 1) + 1:]
        try:
            pynmea2.parse(line)
        except (pynmea2.ParseError, ValueError, AttributeError, TypeError):
            pass
    return time.perf_counter() - t0, time.process_time() - c0


def whole_replay(path: Path) -> tuple[int, float, float]:
    """(lines, wall s, CPU s) of the replay (every payload made; no output file, as before)."""
    cfg = load_config(None)
    t0, c0 = time.perf_counter(), time.process_time()
    summary = run_replay([str(path)], cfg, progress=False)
    return summary.raw_lines, time.perf_counter() - t0, time.process_time() - c0


def _timed(est, spent: collections.Counter, calls: collections.Counter) -> None:
    """Time every call of the estimator's step and tick into ``spent[est.name]`` (CPU seconds)."""
    for method in ("step", "tick"):
        call = getattr(est, method)

        def timed(*args, _call=call, _name=est.name):
            calls[_name] += 1
            c0 = time.process_time()
            try:
                return _call(*args)
            finally:
                spent[_name] += time.process_time() - c0
        setattr(est, method, timed)


def _timing_cost_s(n: int = 100_000) -> float:
    """CPU seconds one timed call costs beyond the call itself (two process_time() calls are system
    calls, about a microsecond together): the split takes it out of the pipeline's share."""
    class Idle:
        name = "idle"

        def step(self, *args):
            return ()

        def tick(self, *args):
            return ()

    bare, wrapped = Idle(), Idle()
    _timed(wrapped, collections.Counter(), collections.Counter())
    c0 = time.process_time()
    for _ in range(n):
        bare.step(None, None)
    c1 = time.process_time()
    for _ in range(n):
        wrapped.step(None, None)
    c2 = time.process_time()
    return max(0.0, ((c2 - c1) - (c1 - c0)) / n)


def split(path: Path) -> str:
    """The replay's CPU by part: the way in alone, each estimator, and the rest (routing, alerts, payloads)."""
    cfg = load_config(None)
    way_in = build(cfg, [], live=False)
    c0 = time.process_time()
    for _ in iter_replay([str(path)], way_in.make_ingest):
        pass
    way_in_s = time.process_time() - c0
    parts = build(cfg, [], live=False)
    spent: collections.Counter = collections.Counter()
    calls: collections.Counter = collections.Counter()
    for est in parts.pipeline.estimators:
        _timed(est, spent, calls)
    c0 = time.process_time()
    for item in iter_replay([str(path)], parts.make_ingest):
        parts.pipeline.feed(item)
    parts.pipeline.close()
    timed_total_s = time.process_time() - c0
    timing_s = sum(calls.values()) * _timing_cost_s()
    total_s = timed_total_s - timing_s  # the replay without the split's own timing
    estimators_s = sum(spent.values())
    rest_s = total_s - estimators_s - way_in_s
    each = ", ".join(f"{name} {s / total_s:.0%}" for name, s in spent.most_common())
    _, parse_s = bare_pynmea2(path.read_text(encoding="ascii", errors="replace").splitlines())
    return (f"{path.name}: {total_s:.2f} s CPU ({timing_s:.2f} s more to time {sum(calls.values()):,} estimator "
            f"calls, taken out). The way in (framing, parsing, timing) {way_in_s / total_s:.0%} "
            f"({way_in_s / _lines(path) * 1e6:.1f} us a line); estimators {estimators_s / total_s:.0%} ({each}); "
            f"the pipeline's own work (priority, routing, history, alerts, status, payloads) {rest_s / total_s:.0%}. "
            f"{_against_parsing(parse_s, way_in_s, estimators_s)}")


def _against_parsing(parse_s: float, way_in_s: float, estimators_s: float) -> str:
    """The parts against the bare ``pynmea2.parse`` loop over the same lines, in this run.

    The way in alone against parsing alone is the path from the wire's own ratio. The estimators'
    CPU bounds the whole replay's: were the way in and the pipeline free, the ratio could still be
    no more than the bare loop's CPU over the estimators' (their work is per second of data, not per
    line, so the bound rises with the sentences a second)."""
    return (f"Against the bare pynmea2.parse loop ({parse_s:.2f} s CPU, this run): the way in alone "
            f"{parse_s / way_in_s:.2f} of its speed; the estimators alone {parse_s / estimators_s:.2f} "
            f"(the most the whole replay's ratio could be with the way in and the pipeline free)")


def _lines(path: Path) -> int:
    with open(path, "rb") as f:
        return max(1, sum(1 for _ in f))


def measure(name: str, lines: list[str], folder: Path) -> str:
    path = folder / f"{name}.nmea"
    path.write_text("".join(x + "\r\n" for x in lines), encoding="ascii", errors="replace")
    parse_s, parse_cpu = bare_pynmea2(lines)
    n, replay_s, replay_cpu = whole_replay(path)
    return (f"| {name} | {n:,} | {replay_s:.1f} | {replay_cpu:.1f} | {n / replay_s:,.0f} | {n / replay_cpu:,.0f} "
            f"| {len(lines) / parse_s:,.0f} | {len(lines) / parse_cpu:,.0f} "
            f"| {(n / replay_s) / (len(lines) / parse_s):.2f} | {(n / replay_cpu) / (len(lines) / parse_cpu):.2f} |")


def main(argv: list[str]) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("files", nargs="*", type=Path)
    ap.add_argument("--hours", type=float, nargs="*", default=[1.0, 6.0, 24.0])
    ap.add_argument("--split", action="store_true", help="where the CPU goes, for the first passage only")
    ap.add_argument("--compass", action="store_true",
                    help=f"also the simulator's {COMPASS_NAME} (with --split: that passage only)")
    ap.add_argument("--write", type=Path, metavar="FILE",
                    help="only write the first passage (the first of --hours, or --compass) to FILE: a fixed "
                         "input to count a replay's instructions with valgrind --tool=callgrind")
    args = ap.parse_args(argv)
    if args.write:
        lines = compass_passage() if args.compass else passage(args.hours[0])
        args.write.write_text("".join(x + "\r\n" for x in lines), encoding="ascii")
        return 0
    if args.split:
        with tempfile.TemporaryDirectory() as tmp:
            path = args.files[0] if args.files else Path(tmp) / ("compass.nmea" if args.compass else "demo.nmea")
            if not args.files:
                lines = compass_passage() if args.compass else passage(args.hours[0])
                path.write_text("".join(x + "\r\n" for x in lines), encoding="ascii")
            print(split(path))
        return 0
    print("| passage | sentences | replay s | replay CPU s | replay sentences/s | per CPU s "
          "| pynmea2.parse sentences/s | per CPU s | ratio | CPU ratio |")
    print("| --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: |")
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        for f in args.files:
            with (gzip.open(f, "rt", errors="replace") if f.suffix == ".gz" else open(f, errors="replace")) as src:
                print(measure(f.name, src.read().splitlines(), folder), flush=True)
        if not args.files:
            for h in args.hours:
                print(measure(f"demo {h:g} h", passage(h), folder), flush=True)
        if args.compass:
            print(measure(COMPASS_NAME, compass_passage(), folder), flush=True)
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"\npeak resident memory {peak:.0f} MiB")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
