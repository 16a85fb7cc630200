"""Benchmark of true wind, the opposing current and the wind_against_current caution.

``python -m tools.bench.sea_state [--seeds N]``

Runs the three wind-over-current scenarios of tools.simulator (a reach across
a 4.5-kn current band with the wind against it, with it, and no band) through
the current and sea-state estimators over many seeds, as the pipeline steps
them (the current estimator first, then the sea state reading its output).
Against the simulator's truth at each sea_state publication after a warm-up:

- median and 95th-percentile error of the true wind over water, direction
  (deg) and speed (kn), on the whole reach and inside the band;
- the same for the instrument's own true wind (MWV T, computed aboard from the
  log and compass at face value): what a typical display shows;
- median and 95th-percentile error of ``opposing_current_kn`` on the whole reach, the band's
  edges included (truth: the true current's component into the true wind over water);
- when the caution came after entering the band (its first edge crossed),
  and whether it came at all where wind and current run together or there is
  no current.

Prints a markdown table. Timing belongs here, never in the tests.
"""

from __future__ import annotations

import argparse
import math
import statistics
import time
from collections.abc import Iterable, Sequence
from typing import Any

from estimators.angles import to_east_north, wrap_180
from estimators.base import Condition, Output, Publication
from estimators.current import CurrentEstimator
from estimators.runner import run
from estimators.samples import Sample, WaterWind
from estimators.sea_state import SeaStateEstimator, SeaStateParams
from tools.simulator import simulate
from tools.simulator.scenarios import SCENARIOS

WARMUP_S = 50 * 60.0  # the calibration run south and back on the reach
CASES = ("wind_against_current", "wind_with_current", "wind_no_current")


class _Timed:
    """An estimator whose step and tick are timed (process time, by its name, into ``cpu_s``)."""

    def __init__(self, est: Any, cpu_s: dict[str, float]) -> None:
        self.est, self.cpu_s = est, cpu_s
        self.name, self.accepts = est.name, est.accepts

    def _timed(self, fn: Any, arg: Any, ctx: Any) -> Any:
        t = time.process_time()
        try:
            return fn(arg, ctx)
        finally:
            self.cpu_s[self.name] = self.cpu_s.get(self.name, 0.0) + time.process_time() - t

    def step(self, sample: Sample, ctx: Any) -> Any:
        return self._timed(self.est.step, sample, ctx)

    def tick(self, t_s: float, ctx: Any) -> Any:
        return self._timed(self.est.tick, t_s, ctx)


def drive(estimators: Sequence[Any], samples: Iterable[Sample],
          cpu_s: dict[str, float] | None = None) -> list[Output]:
    """Every output of the estimators over the samples, driven as the service does (estimators.runner).

    ``cpu_s``, when given, collects each estimator's time in step and tick (seconds, by name).
    """
    ests = [_Timed(e, cpu_s) for e in estimators] if cpu_s is not None else list(estimators)
    return [o for _, outs in run(ests, samples) for o in outs]


def truth_opposing_kn(row: Any) -> float:
    """The true current's component into the true wind over water (positive against the wind sea)."""
    ue, un = to_east_north(1.0, row.water_wind_from_deg)
    return row.current_east_kn * ue + row.current_north_kn * un


def band_entry_s(sim: Any) -> float | None:
    edges = [e.t_s for e in sim.events if e.kind == "band_edge"]
    return edges[0] if edges else None


def run_case(name: str, seed: int, params: SeaStateParams | None = None) -> dict[str, Any]:
    sim = simulate(SCENARIOS[name](), seed)
    cpu: dict[str, float] = {}
    outs = drive([CurrentEstimator(), SeaStateEstimator(params)], sim.samples, cpu)
    t_start = sim.scenario.start_utc + WARMUP_S
    entry = band_entry_s(sim)
    dir_err, spd_err, dir_band, spd_band, opp_err = [], [], [], [], []
    for o in outs:
        if not (isinstance(o, Publication) and o.topic == "sea_state") or o.t_s < t_start:
            continue
        row = sim.truth_at(o.t_s)
        p = o.payload
        dir_err.append(abs(wrap_180(p["true_wind_from_deg"] - row.water_wind_from_deg)))
        spd_err.append(abs(p["true_wind_kn"] - row.water_wind_kn))
        in_core = row.drift_kn > 3.0  # the band: 4.5 kn core, less the 0.6-kn wind drift against it
        if in_core:
            dir_band.append(dir_err[-1])
            spd_band.append(spd_err[-1])
        if p["opposing_current_kn"] is not None:  # edges included
            opp_err.append(abs(p["opposing_current_kn"] - truth_opposing_kn(row)))
    inst_dir, inst_spd = [], []
    for s in sim.samples_of(WaterWind):
        if s.t_s >= t_start:
            row = sim.truth_at(s.t_s)
            inst_dir.append(abs(wrap_180(s.from_true_deg - row.water_wind_from_deg)))
            inst_spd.append(abs(s.speed_kn - row.water_wind_kn))
    raised = [o.t_s for o in outs if isinstance(o, Condition) and o.alert_id == "wind_against_current" and o.active]
    return {
        "dir": dir_err, "spd": spd_err, "dir_band": dir_band, "spd_band": spd_band, "opp": opp_err,
        "inst_dir": inst_dir, "inst_spd": inst_spd,
        "caution_after_entry_s": (raised[0] - entry) if raised and entry is not None else None,
        "cautions": len(raised),
        "cpu_ms_per_data_s": 1000.0 * cpu.get("sea_state", 0.0) / sim.scenario.duration_s,
    }


def _q(xs: list[float], q: float) -> float:
    if not xs:
        return math.nan
    xs = sorted(xs)
    return xs[min(len(xs) - 1, int(q * len(xs)))]


def main(argv: list[str] | None = None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, default=5)
    args = ap.parse_args(argv)
    t0 = time.perf_counter()
    cpu_all: list[float] = []
    print("| case | true wind dir median / p95 (deg) | speed median / p95 (kn) | in the band dir / speed "
          "| instrument's true wind dir / speed (median) | opposing current error median (kn) "
          "/ p95 | caution after entering the band (min) | seeds with a caution |")
    print("| --- | --- | --- | --- | --- | --- | --- | --- |")
    for name in CASES:
        agg: dict[str, list[float]] = {k: [] for k in ("dir", "spd", "dir_band", "spd_band", "opp", "inst_dir", "inst_spd")}
        delays, with_caution = [], 0
        cpu_ms: list[float] = []
        for seed in range(1, args.seeds + 1):
            r = run_case(name, seed)
            cpu_ms.append(r["cpu_ms_per_data_s"])
            for k in agg:
                agg[k] += r[k]
            if r["cautions"]:
                with_caution += 1
                if r["caution_after_entry_s"] is not None:
                    delays.append(r["caution_after_entry_s"] / 60.0)
        delay = (f"{statistics.median(delays):.1f} (max {max(delays):.1f})" if delays else "none")
        print(f"| {name} | {_q(agg['dir'], .5):.1f} / {_q(agg['dir'], .95):.1f} | {_q(agg['spd'], .5):.2f} / "
              f"{_q(agg['spd'], .95):.2f} | {_q(agg['dir_band'], .5):.1f} / {_q(agg['spd_band'], .5):.2f} | "
              f"{_q(agg['inst_dir'], .5):.1f} / {_q(agg['inst_spd'], .5):.2f} | {_q(agg['opp'], .5):.2f} / {_q(agg['opp'], .95):.2f} | "
              f"{delay} | {with_caution}/{args.seeds} |")
        cpu_all.extend(cpu_ms)
    print(f"\n{args.seeds} seeds per case, {time.perf_counter() - t0:.0f} s on this machine; the sea-state "
          f"estimator took {statistics.median(cpu_all):.2f} ms of CPU per second of data (median of runs).")


if __name__ == "__main__":
    main()
