"""Benchmark of true wind, the opposing current and the wind_against_current caution.

``python -m tools.bench.sea_state [--seeds N] [--leeway K]``

Runs the three wind-over-current scenarios of tools.simulator (a reach across
a 4.5-kn current band with the wind against it, with it, and no band) through
the current and sea-state estimators over many seeds, as the pipeline steps
them (the current estimator first, then the sea state reading its output).
Against the simulator's truth at each sea_state publication after a warm-up:

- median and 95th-percentile error of the true wind over water, direction
  (deg) and speed (kn), on the whole reach and inside the band; the truth is
  what the instrument is meant to show: the vector mean of the simulated true
  wind over the water, gusts included, over the same window as the estimate
  (``mean_window_s``, WMO-No. 8's 10-minute mean);
- the gust's error: ``true_wind_gust_kn`` against the highest 3-s mean of the
  same gusty true wind over the last ``gust_window_s`` (WMO-No. 8's gust);
- the same for the instrument's own true wind (MWV T, computed aboard from the
  log and compass at face value): what a typical display shows, each reading
  against the gusty true wind of its own moment;
- median and 95th-percentile error of ``opposing_current_kn`` on the whole reach, the band's
  edges included (truth: the true current's component into the true wind over water);
- when the caution came after entering the band (its first edge crossed),
  and whether it came at all where wind and current run together or there is
  no current.

Each case runs twice: offwatch as the service runs it (the current estimator
learning the log and compass), and the bound (``true calibration``): the same
sea-state estimator fed the simulator's true log scale, compass offset and
current in place of the current estimator's publication, so the row says how
far offwatch is from the best its wind averaging can do.

``--leeway K`` runs the wind-against reach instead with a hull that makes
leeway (K heel / STW^2), offwatch not told and told that K.

Prints a markdown table. Timing belongs here, never in the tests.
"""

from __future__ import annotations

import argparse
import dataclasses
import math
import statistics
import time
from collections.abc import Iterable, Sequence
from typing import Any

import numpy as np

from estimators.angles import from_east_north, to_east_north, wrap_180
from estimators.base import Condition, EstimatorBase, Output, Publication
from estimators.current import CurrentEstimator, CurrentParams
from estimators.runner import run
from estimators.samples import Fix, GroundVelocity, Sample, WaterWind
from estimators.sea_state import SeaStateEstimator, SeaStateParams
from tools.simulator import simulate
from tools.simulator.scenarios import SCENARIOS

WARMUP_S = 50 * 60.0  # the calibration run south and back on the reach
CASES = ("wind_against_current", "wind_with_current", "wind_no_current")
METRICS = ("dir", "spd", "gust", "dir_band", "spd_band", "opp", "inst_dir", "inst_spd")


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


class TrueCurrent(EstimatorBase):
    """The bound: publishes ``current`` from the simulator's truth at each fix (its true current, and
    the log scale and compass offset that undo the simulated sensors' errors exactly)."""

    name = "current"
    accepts = (Fix, GroundVelocity)

    def __init__(self, sim: Any) -> None:
        spec = sim.scenario.sensors
        self.sim = sim
        self.stw_scale = 1.0 / spec.stw_scale  # the log reads stw_scale x the truth: true STW = log / stw_scale
        self.heading_offset_deg = -spec.heading_offset_deg  # the compass reads the offset high

    def step(self, sample: Sample, ctx: Any) -> list[Output]:
        east = float(self.sim.truth_series("current_east_kn", sample.t_s))
        north = float(self.sim.truth_series("current_north_kn", sample.t_s))
        drift, set_deg = from_east_north(east, north)
        return [Publication(sample.t_s, "current", {
            "set_deg": set_deg, "drift_kn": drift, "east_kn": east, "north_kn": north,
            "set_sigma_deg": 0.0, "drift_sigma_kn": 0.0, "quality": "valid",
            "stw_scale": self.stw_scale, "heading_offset_deg": self.heading_offset_deg})]


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


def run_case(name: str, seed: int, params: SeaStateParams | None = None, bound: bool = False,
             leeway_k: float = 0.0, told: bool = True) -> dict[str, Any]:
    """One seeded run of a case: offwatch (``bound`` False) or the true-calibration bound.

    ``leeway_k``: the simulated hull makes leeway (lambda = K heel / STW^2); ``told``: offwatch's
    ``[current] leeway_coefficient`` is that K (else 0, the default: no leeway).
    """
    params = params or SeaStateParams()
    scenario = SCENARIOS[name]()
    if leeway_k:
        scenario = dataclasses.replace(scenario, boat=dataclasses.replace(scenario.boat, leeway_k=leeway_k))
    sim = simulate(scenario, seed)
    cpu: dict[str, float] = {}
    hull = CurrentParams(leeway_coefficient=leeway_k if told else 0.0)
    first = TrueCurrent(sim) if bound else CurrentEstimator(hull)
    outs = drive([first, SeaStateEstimator(params, hull)], sim.samples, cpu)
    t_start = sim.scenario.start_utc + WARMUP_S
    entry = band_entry_s(sim)
    r: dict[str, Any] = {k: [] for k in METRICS}
    for o in outs:
        if not (isinstance(o, Publication) and o.topic == "sea_state") or o.t_s < t_start:
            continue
        row = sim.truth_at(o.t_s)
        p = o.payload
        true_from, true_kn = sim.gusty_wind_mean(o.t_s, params.mean_window_s)  # gusts included, the same window
        r["dir"].append(abs(wrap_180(p["true_wind_from_deg"] - true_from)))
        r["spd"].append(abs(p["true_wind_kn"] - true_kn))
        if p["true_wind_gust_kn"] is not None:
            r["gust"].append(abs(p["true_wind_gust_kn"] - sim.gusty_wind_gust(o.t_s, params.gust_window_s)))
        if row.drift_kn > 3.0:  # the band: 4.5 kn core, less the 0.6-kn wind drift against it
            r["dir_band"].append(r["dir"][-1])
            r["spd_band"].append(r["spd"][-1])
        if p["opposing_current_kn"] is not None:  # edges included
            r["opp"].append(abs(p["opposing_current_kn"] - truth_opposing_kn(row)))
    air = sim.air
    for s in sim.samples_of(WaterWind):  # each reading against the gusty air of its own vane time
        i = int(np.searchsorted(air.t_s, s.t_s, side="right")) - 1
        if s.t_s >= t_start and i >= 0:
            true_from = float(np.mod(np.degrees(np.arctan2(-air.east_kn[i], -air.north_kn[i])), 360.0))
            r["inst_dir"].append(abs(wrap_180(s.from_true_deg - true_from)))
            r["inst_spd"].append(abs(s.speed_kn - math.hypot(air.east_kn[i], air.north_kn[i])))
    raised = [o.t_s for o in outs if isinstance(o, Condition) and o.alert_id == "wind_against_current" and o.active]
    r.update({
        "caution_after_entry_s": (raised[0] - entry) if raised and entry is not None else None,
        "cautions": len(raised),
        "cpu_ms_per_data_s": 1000.0 * cpu.get("sea_state", 0.0) / sim.scenario.duration_s,
    })
    return r


def _q(xs: list[float], q: float) -> float:
    if not xs:
        return math.nan
    xs = sorted(xs)
    return xs[min(len(xs) - 1, int(q * len(xs)))]


def _row(label: str, runs: list[dict[str, Any]], seeds: int) -> str:
    agg: dict[str, list[float]] = {k: [x for r in runs for x in r[k]] for k in METRICS}
    delays = [r["caution_after_entry_s"] / 60.0 for r in runs if r["cautions"] and r["caution_after_entry_s"] is not None]
    with_caution = sum(1 for r in runs if r["cautions"])
    delay = f"{statistics.median(delays):.1f} (max {max(delays):.1f})" if delays else "none"
    band = f"{_q(agg['dir_band'], .5):.1f} / {_q(agg['spd_band'], .5):.2f}" if agg["dir_band"] else "–"  # no band
    return (f"| {label} | {_q(agg['dir'], .5):.1f} / {_q(agg['dir'], .95):.1f} | {_q(agg['spd'], .5):.2f} / "
            f"{_q(agg['spd'], .95):.2f} | {_q(agg['gust'], .5):.2f} / {_q(agg['gust'], .95):.2f} | "
            f"{band} | "
            f"{_q(agg['inst_dir'], .5):.1f} / {_q(agg['inst_spd'], .5):.2f} | "
            f"{_q(agg['opp'], .5):.2f} / {_q(agg['opp'], .95):.2f} | {delay} | {with_caution}/{seeds} |")


def main(argv: list[str] | None = None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, default=5)
    ap.add_argument("--leeway", type=float, default=0.0, metavar="K",
                    help="instead: the wind-against reach with a hull making leeway K heel / STW^2, offwatch told "
                         "K ([current] leeway_coefficient) and not told")
    args = ap.parse_args(argv)
    t0 = time.perf_counter()
    seeds = range(1, args.seeds + 1)
    print("| case | true wind dir median / p95 (deg) | speed median / p95 (kn) | gust median / p95 (kn) "
          "| in the band dir / speed | instrument's true wind dir / speed (median) | opposing current error "
          "median / p95 (kn) | caution after entering the band (min) | seeds with a caution |")
    print("| --- | --- | --- | --- | --- | --- | --- | --- | --- |")
    cpu_all: list[float] = []
    if args.leeway:
        k, name = args.leeway, "wind_against_current"
        for told in (False, True):
            runs = [run_case(name, s, leeway_k=k, told=told) for s in seeds]
            print(_row(f"{name}, leeway K = {k:g}, offwatch {'told' if told else 'not told'} K", runs, args.seeds))
            cpu_all += [r["cpu_ms_per_data_s"] for r in runs]
    else:
        for name in CASES:
            runs = [run_case(name, s) for s in seeds]
            print(_row(name, runs, args.seeds))
            cpu_all += [r["cpu_ms_per_data_s"] for r in runs]
            if name == "wind_against_current":  # the bound: the best this averaging can do on the reach
                print(_row(f"{name}, true calibration and current", [run_case(name, s, bound=True) for s in seeds],
                           args.seeds))
    print(f"\n{args.seeds} seeds per case, {time.perf_counter() - t0:.0f} s on this machine; the sea-state "
          f"estimator took {statistics.median(cpu_all):.2f} ms of CPU per second of data (median of runs).")


if __name__ == "__main__":
    main()
