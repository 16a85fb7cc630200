"""The demo passage at its sharp edges: how fast the published current follows the stream's edge.

The demo passage (``recorded_runs/``, invented) crosses a current band twice; at each edge the drift
rises from about 0.3 to 5 kn within 0.8 nm, some 8 minutes at the boat's speed. This replays the
whole passage through the pipeline as the service runs it (its own config), finds each edge in the
truth as the moment the true current changes fastest (the near edge before the band's middle, the far
edge after it), and over the half hour around each prints:

- the RMS vector error of the published current (east, north) against the truth, kn;
- the seconds published ``valid`` while more than 3 sigma and 0.25 kn off (the current benchmark's
  "confidently wrong", the error measured in the published sigmas along and across the drift);
- the seconds ``degraded`` and ``valid`` in the window.

Run: ``python -m tools.bench.demo_edge`` (about a minute and a half). The figures go to the README's
"The demo passage at its sharp edge"; the test of this tool is tests/test_bench_demo_edge.py.
"""

from __future__ import annotations

import argparse
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from tools.bench.current import mahalanobis
from tools.simulator import read_truth_csv

REPO = Path(__file__).resolve().parents[2]
TRUTH = REPO / "recorded_runs" / "tern-of-haldane.truth.csv.gz"
HALF_WINDOW_S = 900.0   # the half hour around each edge
WRONG_SIGMAS = 3.0      # as tools.bench.current counts "valid and wrong"
WRONG_KN = 0.25


@dataclass(frozen=True)
class Truth:
    """The truth's current, one row every few seconds: times (UNIX s) and east, north (kn)."""

    t_s: np.ndarray
    east_kn: np.ndarray
    north_kn: np.ndarray

    def at(self, t: float) -> tuple[float, float]:
        return float(np.interp(t, self.t_s, self.east_kn)), float(np.interp(t, self.t_s, self.north_kn))


@dataclass(frozen=True)
class EdgeFigures:
    mid_s: float          # the moment the true current changes fastest
    rms_kn: float
    valid_wrong_s: float
    valid_s: float
    degraded_s: float
    fixes: int


def read_truth(path: Path = TRUTH) -> Truth:
    cols = read_truth_csv(path)
    return Truth(cols["t_s"], cols["current_east_kn"], cols["current_north_kn"])


def edge_times(truth: Truth) -> tuple[float, float]:
    """(near, far): where the true current vector changes fastest before and after the band's middle."""
    rate = np.hypot(np.gradient(truth.east_kn, truth.t_s), np.gradient(truth.north_kn, truth.t_s))
    drift = np.hypot(truth.east_kn, truth.north_kn)
    inside = np.flatnonzero(drift > 0.5 * drift.max())
    middle = 0.5 * (truth.t_s[inside[0]] + truth.t_s[inside[-1]])
    before = truth.t_s <= middle
    near = truth.t_s[before][np.argmax(rate[before])]
    far = truth.t_s[~before][np.argmax(rate[~before])]
    return float(near), float(far)


def current_payloads(config: str | None = None) -> list[tuple[float, dict]]:
    """(data time, payload) of every ``current`` state the pipeline publishes over the demo passage."""
    from daemon.commands.demo import demo_files
    from daemon.commands.replay import run_replay
    from daemon.core.config import load_config

    files, demo_cfg = demo_files()
    kept: list[tuple[float, dict]] = []

    class KeepCurrent:  # a Sink (daemon/core/readings.py) that keeps only the current's states
        def raw(self, line) -> None:
            pass

        def message(self, msg) -> None:
            if msg.kind == "state" and msg.topic.rsplit("/", 1)[-1] == "current":
                kept.append((msg.t_s, dict(msg.payload)))

        def close(self) -> None:
            pass

    run_replay(files, load_config(config or demo_cfg), extra_sinks=[KeepCurrent()], progress=False)
    return kept


def edge_figures(payloads: list[tuple[float, dict]], truth: Truth, mid_s: float,
                 half_window_s: float = HALF_WINDOW_S) -> EdgeFigures:
    """The figures over mid_s ± half_window_s; each publication counts until the next one."""
    window = [(t, p) for t, p in payloads if abs(t - mid_s) <= half_window_s and p.get("east_kn") is not None]
    squares, valid_wrong, valid, degraded = [], 0.0, 0.0, 0.0
    for (t, p), (t_next, _) in zip(window, window[1:] + [(window[-1][0] + 1.0, None)]):
        held = t_next - t
        te, tn = truth.at(t)
        de, dn = p["east_kn"] - te, p["north_kn"] - tn
        squares.append(de * de + dn * dn)
        if p["quality"] == "valid":
            valid += held
            if math.hypot(de, dn) > WRONG_KN and mahalanobis(de, dn, p) > WRONG_SIGMAS:
                valid_wrong += held
        elif p["quality"] == "degraded":
            degraded += held
    return EdgeFigures(mid_s, math.sqrt(sum(squares) / len(squares)), valid_wrong, valid, degraded, len(window))


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--config", help="a config to replay with instead of the demo's (e.g. a [current] trial)")
    args = ap.parse_args(argv)
    truth = read_truth()
    payloads = current_payloads(args.config)
    print(f"Demo passage, the current over {2 * HALF_WINDOW_S / 60:.0f} min around each edge "
          f"('valid and wrong': more than {WRONG_SIGMAS:.0f} sigma and {WRONG_KN} kn off)")
    print("edge   mid (UTC)  fixes  RMS kn  valid and wrong s  valid s  degraded s")
    for name, mid in zip(("near", "far"), edge_times(truth)):
        f = edge_figures(payloads, truth, mid)
        clock = np.datetime64(int(mid), "s").astype(str)[11:19]
        print(f"{name:5}  {clock}  {f.fixes:5d}  {f.rms_kn:6.3f}  {f.valid_wrong_s:17.0f}  {f.valid_s:7.0f}  "
              f"{f.degraded_s:10.0f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
