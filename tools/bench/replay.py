"""Benchmark: replay throughput (sentences per second) through the whole pipeline.

``python -m tools.bench.replay [FILE...]``: defaults to the demo passage and the
real under-way capture beside the repository when present. Prints a markdown table.
"""

from __future__ import annotations

import resource
import sys
import time
from pathlib import Path

from daemon.core.config import load_config
from daemon.commands.replay import run_replay

REPO = Path(__file__).resolve().parents[2]


def default_files() -> list[Path]:
    files = sorted((REPO / "recorded_runs").glob("*.nmea.gz"))[:1]
    real = REPO.parent / "shared" / "real-captures" / "under-way-94min-hdg-hdt-rmc.nmea"
    if real.exists():
        files.append(real)
    return files


def bench(path: Path) -> tuple[int, float]:
    cfg = load_config(None)
    t0 = time.perf_counter()
    summary = run_replay([str(path)], cfg, progress=False)
    return summary.raw_lines, time.perf_counter() - t0


def main(argv: list[str]) -> int:
    files = [Path(a) for a in argv] or default_files()
    print("| file | lines | seconds | lines/s |")
    print("| --- | ---: | ---: | ---: |")
    for f in files:
        n, dt = bench(f)
        print(f"| {f.name} | {n} | {dt:.1f} | {n / dt:,.0f} |")
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"\npeak resident memory {peak:.0f} MiB")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
