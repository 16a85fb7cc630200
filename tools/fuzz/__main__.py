"""The long fuzz run: ``python -m tools.fuzz [--lines 1000000] [--seed 1] [SEED_FILE...]``.

Mutated lines (:mod:`tools.fuzz.mutate`) from real captures and the simulator's
demo passage go through the whole way in: framer, TAG blocks, sentence parsers,
the replay clock (in replay mode) and the receive clock (live), the counters and
their JSON snapshot. Every ``--report`` lines it prints lines done, lines/s and
resident memory, so a growth shows; it ends non-zero if any exception escaped.
The config loader is fuzzed on the side (mutated TOML texts), one file per 1000 lines.
"""

from __future__ import annotations

import argparse
import json
import random
import resource
import sys
import tempfile
import time
import traceback
from pathlib import Path

from tools.fuzz.feed import fuzz_config_text, run_ingest, seed_lines

REPO = Path(__file__).resolve().parents[2]


def _rss_mib() -> float:
    """Current resident set size (Linux /proc), MiB; the peak where /proc is absent."""
    try:
        with open("/proc/self/statm") as f:
            return int(f.read().split()[1]) * resource.getpagesize() / 2**20
    except OSError:
        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def default_seeds() -> list[Path]:
    shared = REPO.parent / "shared" / "real-captures"
    files = sorted(shared.glob("*.nmea")) + sorted((shared / "robustness").rglob("*.*")) if shared.exists() else []
    return files + [REPO / "recorded_runs" / "tern-of-haldane.nmea.gz"]


def main(argv: list[str]) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("seeds", nargs="*", type=Path)
    ap.add_argument("--lines", type=int, default=1_000_000)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--chunk", type=int, default=20_000, help="lines per ingest (a new source each chunk)")
    ap.add_argument("--report", type=int, default=100_000)
    args = ap.parse_args(argv)
    seeds = seed_lines(args.seeds or default_seeds(), per_file=20_000)
    rng = random.Random(args.seed)
    escaped = done = configs = 0
    t0 = time.perf_counter()
    rss_start = None
    print(f"{len(seeds)} seed lines; {args.lines:,} lines to go")
    with tempfile.TemporaryDirectory() as tmp:
        while done < args.lines:
            n = min(args.chunk, args.lines - done)
            try:
                run_ingest(rng, seeds, n, live=rng.random() < 0.3)
            except Exception as exc:  # the whole point: report it, keep going
                escaped += 1
                where = traceback.extract_tb(exc.__traceback__)[-1]
                print(f"ESCAPED after {done:,} lines: {type(exc).__name__}: {exc} "
                      f"at {where.filename}:{where.lineno}", file=sys.stderr)
            for _ in range(n // 1000):
                configs += 1
                fuzz_config_text(rng, Path(tmp) / "fuzz.toml")
            done += n
            if rss_start is None:
                rss_start = _rss_mib()
            if done % args.report < args.chunk or done == args.lines:
                rate = done / (time.perf_counter() - t0)
                print(f"{done:>10,} lines  {rate:>8,.0f} lines/s  rss {_rss_mib():6.1f} MiB", flush=True)
    summary = {"lines": done, "config_files": configs, "escaped": escaped,
               "rss_after_first_chunk_mib": round(rss_start or 0.0, 1), "rss_end_mib": round(_rss_mib(), 1),
               "seconds": round(time.perf_counter() - t0, 1)}
    print(json.dumps(summary))
    return 1 if escaped else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
