"""Benchmark: what starting the service costs: import time and resident memory.

``python -m tools.bench.startup [--runs 5]``: imports the modules ``offwatch run``
and ``offwatch replay`` load, in a fresh interpreter each run, and prints the
median wall time of the imports and the resident memory after them (peak RSS).
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys

# the service imports the assembly (every estimator, numpy) only once its config is read: counted here
MODULES = ["daemon.commands.cli", "daemon.commands.service", "daemon.core.assembly", "daemon.commands.replay"]
_CODE = ("import importlib, json, resource, time\n"
         "t0 = time.perf_counter()\n"
         f"for n in {MODULES!r}: importlib.import_module(n)\n"
         "dt = time.perf_counter() - t0\n"
         "print(json.dumps([dt, resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024]))")


def main(argv: list[str]) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=5)
    args = ap.parse_args(argv)
    runs = [json.loads(subprocess.run([sys.executable, "-c", _CODE], capture_output=True, text=True,
                                      check=True).stdout) for _ in range(args.runs)]
    print(f"imports: median {statistics.median(r[0] for r in runs):.2f} s over {args.runs} runs; "
          f"resident memory {statistics.median(r[1] for r in runs):.0f} MiB")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
