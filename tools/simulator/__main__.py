"""Write a simulated passage as NMEA and its truth as CSV.

    python -m tools.simulator demo --out recorded_runs/tern-of-haldane.nmea.gz \
        --truth recorded_runs/tern-of-haldane.truth.csv.gz
    python -m tools.simulator scenario tidal_box --out /tmp/box.nmea --seed 3
    python -m tools.simulator list
"""

from __future__ import annotations

import argparse
import sys
from datetime import datetime, timezone

from . import scenarios
from .nmea_writer import WriterOptions, write_nmea, write_truth_csv
from .run import simulate

DEMO_SEED = 20260504
# Two deliberately spoiled lines and one of line noise, so the reader's counters show something.
DEMO_MALFORMED = (
    (scenarios.utc(2026, 5, 4, 6, 15, 0.0), "bad_checksum"),
    (scenarios.utc(2026, 5, 4, 8, 5, 0.0), "truncated"),
    (scenarios.utc(2026, 5, 4, 10, 20, 0.0), "garbage"),
)


def _iso(t_s: float) -> str:
    return datetime.fromtimestamp(t_s, tz=timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


def _write(scenario, seed: int, out: str, truth: str | None, opt: WriterOptions, truth_every_s: float) -> None:
    run = simulate(scenario, seed)
    n = write_nmea(run, out, opt)
    print(f"{scenario.name}: {n} lines to {out} (seed {seed}, variation {run.variation_deg:+.1f}°)")
    if truth:
        rows = write_truth_csv(run, truth, truth_every_s)
        print(f"truth: {rows} rows to {truth}")
    for e in run.events:
        print(f"  {_iso(e.t_s)}  {e.kind:18s} {e.lat:9.5f} {e.lon:10.5f}  {e.detail}")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(prog="python -m tools.simulator", description=__doc__.splitlines()[0])
    sub = ap.add_subparsers(dest="cmd", required=True)
    demo = sub.add_parser("demo", help="the demo passage (invented boat, invented place), seeded")
    one = sub.add_parser("scenario", help="any named scenario")
    one.add_argument("name", choices=sorted(scenarios.SCENARIOS))
    sub.add_parser("list", help="the named scenarios")
    for p in (demo, one):
        p.add_argument("--out", required=True, help="NMEA file to write (.gz to compress)")
        p.add_argument("--truth", help="truth CSV to write (.gz to compress)")
        p.add_argument("--seed", type=int, default=DEMO_SEED)
        p.add_argument("--truth-every", type=float, default=5.0, help="seconds between truth rows")
        p.add_argument("--no-tags", action="store_true", help="plain NMEA, no TAG blocks")
    args = ap.parse_args(argv)
    if args.cmd == "list":
        for name, f in scenarios.SCENARIOS.items():
            print(f"{name:20s} {(f.__doc__ or '').splitlines()[0]}")
        return 0
    if args.cmd == "demo":
        opt = WriterOptions(tag_blocks=not args.no_tags, malformed=DEMO_MALFORMED)
        _write(scenarios.demo_passage(), args.seed, args.out, args.truth, opt, args.truth_every)
    else:
        opt = WriterOptions(tag_blocks=not args.no_tags)
        _write(scenarios.SCENARIOS[args.name](), args.seed, args.out, args.truth, opt, args.truth_every)
    return 0


if __name__ == "__main__":
    sys.exit(main())
