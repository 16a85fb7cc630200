"""Benchmark of the current estimator against the plain current triangle.

``python -m tools.bench.current [--seed N] [--scenario NAME ...]``

For each simulated scenario (tools.simulator) it runs, over the same
samples: offwatch's CurrentEstimator; the plain triangle a display shows (log
and compass at face value, 60-s vector EMA); and the same triangle given the
true calibration (a bound: what smoothing alone can do). Figures, against the
simulator's truth at each fix time:

- RMS vector error of the current (kn) after a warm-up (``WARMUP_S``);
- median set error (deg) where the true drift is above 0.5 kn;
- time to converge: the first time after which the vector error stays below
  ``CONVERGED_KN`` for ``CONVERGED_HOLD_S``;
- for scenarios with a GNSS outage: the dead-reckoned position error at the
  outage's end as % of the distance run over the outage. DR integrates
  k * log * u(heading + d) + current over the outage from the last fix, with
  the estimator's state frozen at the outage's start (the plain triangle: its
  last current, log and compass at face value).

Prints a markdown table. Timing belongs here, never in the tests.
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from dataclasses import dataclass

import numpy as np

from tools.simulator import simulate
from tools.simulator.ocean import offset_m
from tools.simulator.scenarios import SCENARIOS
from estimators.angles import KN_TO_MPS, to_east_north
from estimators.current import CurrentEstimator, CurrentParams
from estimators.runner import RunContext, run
from estimators.samples import Fix, Heading, WaterSpeed
from estimators.triangle import PlainTriangle

BENCH_SCENARIOS = ("tacking_leg", "tidal_box", "current_crossing", "gnss_outage")
WARMUP_S = 20 * 60.0
CONVERGED_KN = 0.3
CONVERGED_HOLD_S = 10 * 60.0
SET_MIN_DRIFT_KN = 0.5


@dataclass
class Track:
    """Estimates (east, north) at each fix time, NaN where the estimator had none."""

    t: list
    est: list


@dataclass
class Figures:
    rms_kn: float
    set_err_deg: float
    converge_min: float
    dr_pct: float | None = None


def truth_current(sim, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    tt = sim.truth["t_s"]
    return np.interp(t, tt, sim.truth["current_east_kn"]), np.interp(t, tt, sim.truth["current_north_kn"])


def figures(sim, track: Track, t0: float) -> Figures:
    t = np.array(track.t)
    est = np.array(track.est, dtype=float)
    te, tn = truth_current(sim, t)
    err = np.hypot(est[:, 0] - te, est[:, 1] - tn)
    after = (t - t0 >= WARMUP_S) & np.isfinite(err)
    rms = float(np.sqrt(np.mean(err[after] ** 2)))
    strong = after & (np.hypot(te, tn) > SET_MIN_DRIFT_KN)
    set_true = np.degrees(np.arctan2(te, tn))
    set_est = np.degrees(np.arctan2(est[:, 0], est[:, 1]))
    dset = np.abs((set_est - set_true + 180.0) % 360.0 - 180.0)
    set_err = float(np.median(dset[strong])) if strong.any() else math.nan
    return Figures(rms, set_err, converge_minutes(t, err, t0))


def converge_minutes(t: np.ndarray, err: np.ndarray, t0: float) -> float:
    """First time (min from start) after which the error stays below CONVERGED_KN for CONVERGED_HOLD_S."""
    bad = ~(err < CONVERGED_KN)
    start = None
    for ti, b in zip(t, bad):
        if b:
            start = None
        elif start is None:
            start = ti
        if start is not None and ti - start >= CONVERGED_HOLD_S:
            return (start - t0) / 60.0
    return math.nan


def run_all(sim, params: CurrentParams) -> dict:
    spec = sim.scenario.sensors
    true_scale, true_offset = 1.0 / spec.stw_scale, -spec.heading_offset_deg  # sim: log = scale x true; compass = true + offset
    est = CurrentEstimator(params)
    plain = PlainTriangle()
    bound = PlainTriangle(stw_scale=true_scale, heading_offset_deg=true_offset)
    tracks = {name: Track([], []) for name in ("offwatch", "plain", "bound")}
    frozen: dict = {}
    outage = spec.gnss_outages[0] if spec.gnss_outages else None
    ctx = RunContext()
    for s, _ in run(est, sim.samples, ctx):
        if isinstance(s, float):
            continue
        plain.step(s)
        bound.step(s)
        if outage is not None and s.t_s >= outage[0] and "offwatch" not in frozen:
            st = est.state()
            frozen["offwatch"] = (st["east_kn"], st["north_kn"], st["stw_scale"], st["heading_offset_deg"])
            frozen["plain"] = (*plain.value(), 1.0, 0.0)
            frozen["bound"] = (*bound.value(), true_scale, true_offset)
        if not isinstance(s, Fix):
            continue
        st = est.state()
        for name, v in (("offwatch", (st["east_kn"], st["north_kn"]) if st else None),
                        ("plain", plain.value()), ("bound", bound.value())):
            tracks[name].t.append(s.t_s)
            tracks[name].est.append(v if v is not None else (math.nan, math.nan))
    out = {name: figures(sim, tr, sim.scenario.start_utc) for name, tr in tracks.items()}
    if outage is not None:
        for name, state in frozen.items():
            out[name].dr_pct = dead_reckoning_pct(sim, outage, state)
    out["health"] = est.health.as_dict()
    out["calibration"] = est.calibration()
    out["state"] = est.state()
    out["truth_calibration"] = (true_scale, true_offset)
    out["status"] = est._calibration_words(None)["status"]
    return out


def dead_reckoning_pct(sim, outage: tuple[float, float], state: tuple[float, float, float, float]) -> float:
    """DR position error at the outage's end, % of the (true) distance run over the outage."""
    ce, cn, k, offset = state
    fixes = [s for s in sim.samples if isinstance(s, Fix)]
    last = max((f for f in fixes if f.t_s < outage[0]), key=lambda f: f.t_s)
    back = min((f for f in fixes if f.t_s >= outage[1]), key=lambda f: f.t_s)
    t_end = back.t_s
    heading = log = None
    e = n = 0.0
    t_prev = last.t_s
    for s in sim.samples:
        if s.t_s <= last.t_s - 5.0 or s.t_s > t_end:
            continue
        if isinstance(s, Heading):
            heading = s.true_deg
        elif isinstance(s, WaterSpeed):
            log = s.speed_kn
        if s.t_s <= last.t_s or heading is None or log is None:
            continue
        dt = s.t_s - t_prev
        we, wn = to_east_north(k * log, heading + offset)           # water velocity, calibrated
        e += (we + ce) * KN_TO_MPS * dt                               # p += (w + c) dt
        n += (wn + cn) * KN_TO_MPS * dt
        t_prev = s.t_s
    truth_start, truth_end = sim.truth_at(last.t_s), sim.truth_at(t_end)
    te, tn = offset_m(truth_start.lat, truth_start.lon, truth_end.lat, truth_end.lon)
    mask = (sim.truth["t_s"] >= last.t_s) & (sim.truth["t_s"] <= t_end)
    run_m = float(np.sum(sim.truth["sog_kn"][mask]) * KN_TO_MPS * sim.scenario.truth_dt_s)
    return 100.0 * math.hypot(e - te, n - tn) / run_m


def fmt(v: float | None, digits: int) -> str:
    if v is None:
        return "–"
    return "n/a" if not math.isfinite(v) else f"{v:.{digits}f}"


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(prog="python -m tools.bench.current", description=__doc__.splitlines()[0])
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--scenario", action="append", choices=sorted(SCENARIOS), help="default: the four current scenarios")
    args = ap.parse_args(argv)
    params = CurrentParams()
    rows = []
    t_all = time.perf_counter()
    for name in args.scenario or BENCH_SCENARIOS:
        t_start = time.perf_counter()
        sim = simulate(SCENARIOS[name](), args.seed)
        r = run_all(sim, params)
        rows.append((name, r, time.perf_counter() - t_start))
    print(f"Current estimator vs the plain triangle (seed {args.seed}; errors after {WARMUP_S / 60:.0f} min warm-up; "
          f"converged: error < {CONVERGED_KN} kn for {CONVERGED_HOLD_S / 60:.0f} min)\n")
    print("| scenario | RMS err kn: offwatch / plain / bound | median set err deg (drift > 0.5 kn): offwatch / plain / bound "
          "| converge min: offwatch / plain / bound | DR err % of run: offwatch / plain / bound | run s |")
    print("| --- | --- | --- | --- | --- | --- |")
    for name, r, secs in rows:
        o, p, b = r["offwatch"], r["plain"], r["bound"]
        print(f"| {name} | {fmt(o.rms_kn, 3)} / {fmt(p.rms_kn, 3)} / {fmt(b.rms_kn, 3)} "
              f"| {fmt(o.set_err_deg, 1)} / {fmt(p.set_err_deg, 1)} / {fmt(b.set_err_deg, 1)} "
              f"| {fmt(o.converge_min, 1)} / {fmt(p.converge_min, 1)} / {fmt(b.converge_min, 1)} "
              f"| {fmt(o.dr_pct, 2)} / {fmt(p.dr_pct, 2)} / {fmt(b.dr_pct, 2)} | {secs:.1f} |")
    print()
    for name, r, _ in rows:
        c, st = r["calibration"], r["state"]
        k_true, d_true = r["truth_calibration"]
        zk = (st["stw_scale"] - k_true) / st["stw_scale_sigma"]                  # error in the filter's own sigmas
        zd = (st["heading_offset_deg"] - d_true) / st["heading_offset_sigma_deg"]
        print(f"- {name}: {r['status']}; reported stw_scale {c.stw_scale:.4f} ± {c.stw_scale_sigma:.4f}, heading offset "
              f"{c.heading_offset_deg:+.2f} ± {c.heading_offset_sigma_deg:.2f} deg; filter k {st['stw_scale']:.4f} "
              f"(truth {k_true:.4f}, {zk:+.1f} sigma), d {st['heading_offset_deg']:+.2f} deg (truth {d_true:+.2f}, "
              f"{zd:+.1f} sigma); health {r['health']}")
    print(f"\ntotal {time.perf_counter() - t_all:.1f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
