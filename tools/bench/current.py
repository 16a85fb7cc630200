"""Benchmark of the current estimator against the plain current triangle, over many seeds.

``python -m tools.bench.current [--seeds N] [--quick] [--scenario NAME ...] [--set KEY=VALUE ...]``

Each scenario (``tools.simulator.scenarios.CURRENT_BENCH``: an ordinary
passage of small course changes, a beat, a tidal box, a jet crossing, a
straight leg with a GNSS outage) is read through the realistic small-boat
sensor model (``tools.simulator.sensors.REALISTIC``) and run over ``--seeds``
seeds. Over the same samples it runs offwatch's CurrentEstimator; the plain
triangle a display shows (log and compass at face value, a vector EMA of
``TRIANGLE_SMOOTHING_S``); and the same triangle given the true calibration
(what smoothing alone can do). Against the simulator's truth at each fix,
after ``WARMUP_S``, pooled over the seeds:

- RMS vector error (kn) of offwatch / plain triangle / true-calibration triangle;
- 2-sigma coverage: share of fixes whose drift error is within 2 published
  drift sigmas (a consistent filter: about 0.95); under the table, seed by
  seed against ``COVERAGE_BAND``: a run's fixes share its errors, so the
  pooled share is only as sure as the seeds' scatter says;
- minutes 'valid' while confidently wrong: quality ``valid`` while the vector
  error is over ``WRONG_KN`` and over 3 sigma (Mahalanobis distance in the
  published along/across sigmas);
- for the outage: the dead-reckoned position error at the outage's end, % of
  the distance run (the estimator's state frozen at the outage's start);
- the calibration at the end: the share of runs whose 'calibrated' values
  lie within 2 sigma of the truth;
- the same RMS and coverage counted only from the calibration's becoming
  observable: after the first course change of ``OBSERVABLE_TURN_DEG`` or more
  (the true heading against any earlier one). Before it nobody can know the log
  scale and the compass offset, while the true-calibration triangle is given
  them; a scenario without such a change (one course, small course changes)
  has no figure there. The whole-run figures stay in the table beside them.

``--sigma-parts`` also splits each fix's drift error and published variance (along the drift, u' P_pub u:
the published covariance, ``estimators.current.walk``) into the part a calibration error explains,
P_c,kd P_kd^-1 (x_kd - truth), and the rest: the share
error variance / covariance of each, pooled (1 for an honest sigma; a random walk the water does not
make leaves the rest near 1/2 in steady state), over the whole run and from the first course change
(before it the calibration's part is its prior's).

``--calibration-from-prior`` draws, per seed, the boat's true log scale and compass offset from the
estimator's own prior (normal about its prior calibration, the params' initial sigmas) in place of the
scenario's fixed errors: coverage is defined over the prior (a filter whose prior says 5 % should cover
the truth 95 % of the time when the truth is drawn from it; Bar-Shalom, Li & Kirubarajan 2001, ch. 5,
from memory), and where one course leaves the calibration unobservable the fixed errors, well inside
the prior, say little. The draw comes from a child stream of the seed's, so the seed's noise and waves
are those of the ordinary run (and a seed draws the same calibration in every scenario); the drawn
values are summed up under the table and, with ``--calibration``, shown as each run's truth.

``--set KEY=VALUE`` runs the estimator with a ``[current]`` parameter changed (the value written as in
the config file, filled and checked by the config's own loader): a trial of another setting against the
defaults over the same seeds.

Prints a markdown table. Timing belongs here, never in the tests.
"""

from __future__ import annotations

import argparse
import math
import sys
import time
import tomllib
from dataclasses import dataclass, field, replace

import numpy as np

from daemon.core.config import ConfigError, fill
from estimators.angles import KN_TO_MPS, to_east_north
from estimators.current import CurrentEstimator, CurrentParams
from estimators.runner import RunContext, run
from estimators.samples import Fix, Heading, WaterSpeed
from estimators.triangle import PlainTriangle
from tools.simulator import Scenario, SensorSpec, simulate
from tools.simulator.ocean import offset_m
from tools.simulator.scenarios import CURRENT_BENCH, SCENARIOS

WARMUP_S = 20 * 60.0
TRIANGLE_SMOOTHING_S = 120.0
WRONG_KN = 0.25
WRONG_SIGMAS = 3.0
COVERAGE_BAND = (0.93, 0.97)  # a consistent filter covers 0.95; the README's target band about it
OBSERVABLE_TURN_DEG = 60.0  # the course change that makes the calibration observable (the estimator's advice)


@dataclass
class Pooled:
    """Per-fix errors pooled over seeds."""

    err: dict[str, list[float]] = field(default_factory=lambda: {"offwatch": [], "plain": [], "bound": []})
    covered: list[bool] = field(default_factory=list)
    err_observable: dict[str, list[float]] = field(default_factory=lambda: {"offwatch": [], "plain": [], "bound": []})
    covered_observable: list[bool] = field(default_factory=list)
    wrong_valid_s: float = 0.0
    valid_s: float = 0.0
    dr_pct: dict[str, list[float]] = field(default_factory=lambda: {"offwatch": [], "plain": [], "bound": []})
    cal_runs: int = 0
    cal_ok: int = 0
    cal_lines: list[str] = field(default_factory=list)
    seconds: float = 0.0
    sigma_parts: list[tuple[float, float, float, float]] = field(default_factory=list)  # see sigma_parts
    sigma_parts_observable: list[tuple[float, float, float, float]] = field(default_factory=list)
    seed_mse: list[tuple[float, float]] = field(default_factory=list)  # each run's (offwatch, plain) mean squared error
    seed_coverage: list[float] = field(default_factory=list)  # each run's share of fixes with the drift within 2 sigma


def truth_current(sim, t: float) -> tuple[float, float]:
    r = sim.truth_series
    return float(r("current_east_kn", t)), float(r("current_north_kn", t))


def observable_from(sim) -> float:
    """Data time of the first true heading at least OBSERVABLE_TURN_DEG from an earlier one (inf: never)."""
    t, heading = sim.truth["t_s"], sim.truth["heading_true_deg"]
    seen = np.zeros(360, dtype=bool)
    bins = np.arange(360)
    for i in range(0, len(t), max(1, int(10.0 / sim.scenario.truth_dt_s))):   # every 10 s
        h = int(heading[i]) % 360
        apart = np.abs((bins - h + 180) % 360 - 180)
        if np.any(seen & (apart >= OBSERVABLE_TURN_DEG)):
            return float(t[i])
        seen[h] = True
    return math.inf


def mahalanobis(de: float, dn: float, payload: dict) -> float:
    """Distance of an error (east, north) in the published sigmas: along the drift and across it."""
    drift, sd, ss = payload["drift_kn"], payload["drift_sigma_kn"], payload["set_sigma_deg"]
    if drift < 1e-6 or sd <= 0.0:
        return math.inf
    ue, un = payload["east_kn"] / drift, payload["north_kn"] / drift
    along, across = de * ue + dn * un, de * un - dn * ue
    sx = max(1e-6, drift * math.radians(ss))
    return math.hypot(along / sd, across / sx)


def sigma_parts(est: CurrentEstimator, te: float, tn: float, k_true: float, d_true_rad: float
                ) -> tuple[float, float, float, float]:
    """Along the drift: (error^2, variance) of the part a calibration error explains, then of the rest.

    The current's error given (k, d) is the conditional mean's: e_c = A e_kd + r with A = P_c,kd P_kd^-1,
    the explained part's covariance A P_kd,c and the rest's P_cc - A P_kd,c (Schur complement), all of
    the published covariance P_pub.
    """
    x, P = est.ekf.x[:, 0], est.published_covariance()
    e_c = np.array([x[0] - te, x[1] - tn])
    A = P[:2, 2:] @ np.linalg.inv(P[2:, 2:])
    e_cal = A @ np.array([x[2] - k_true, x[3] - d_true_rad])
    P_cal = A @ P[2:, :2]
    drift = math.hypot(x[0], x[1])
    u = np.array([x[0], x[1]]) / max(drift, 1e-6)
    return (float(u @ e_cal) ** 2, float(u @ P_cal @ u), float(u @ (e_c - e_cal)) ** 2, float(u @ (P[:2, :2] - P_cal) @ u))


def true_calibration(spec: SensorSpec) -> tuple[float, float]:
    """The estimator's (log scale, heading offset deg) that undo a sensor model's errors.

    The simulated log reads ``stw_scale`` x the true speed and the compass ``heading_offset_deg`` more
    than the true heading; the estimator's true speed is log x scale, its true heading compass + offset.
    """
    return 1.0 / spec.stw_scale, -spec.heading_offset_deg


def with_true_calibration(scenario: Scenario, stw_scale: float, heading_offset_deg: float) -> Scenario:
    """The scenario with its log and compass errors those whose true calibration is the one given
    (the inverse of ``true_calibration``)."""
    sensors = replace(scenario.sensors, stw_scale=1.0 / stw_scale, heading_offset_deg=-heading_offset_deg)
    return replace(scenario, sensors=sensors)


def prior_draw(params: CurrentParams, seed: int) -> tuple[float, float]:
    """A true (log scale, heading offset deg) drawn from the estimator's prior (normal), reproducible per seed.

    The prior is what a fresh estimator reports as its calibration; the draw comes from a child of the
    seed's stream, independent of the simulation's own draws from the seed.
    """
    prior = CurrentEstimator(params).calibration()
    rng = np.random.default_rng(np.random.SeedSequence(seed).spawn(1)[0])
    z = rng.standard_normal(2)
    return (prior.stw_scale + prior.stw_scale_sigma * float(z[0]),
            prior.heading_offset_deg + prior.heading_offset_sigma_deg * float(z[1]))


def draws_summary(params: CurrentParams, seeds: range) -> str:
    """The drawn calibrations' range and their spread in the prior's sigmas (mean z^2: 1 over many seeds).

    Where the calibration cannot be seen the calibration part of the drift's error follows these few
    draws, so its ratio (``--sigma-parts``) is to be read against their own spread, not against 1.
    """
    prior = CurrentEstimator(params).calibration()
    draws = np.array([prior_draw(params, seed) for seed in seeds])
    zk = (draws[:, 0] - prior.stw_scale) / prior.stw_scale_sigma
    zd = (draws[:, 1] - prior.heading_offset_deg) / prior.heading_offset_sigma_deg
    return (f"Drawn from the prior (seeds {seeds.start}-{seeds.stop - 1}): log scale {draws[:, 0].min():.3f}-"
            f"{draws[:, 0].max():.3f}, offset {draws[:, 1].min():+.2f} to {draws[:, 1].max():+.2f}°; "
            f"mean z² (1 over many seeds): scale {np.mean(zk ** 2):.2f}, offset {np.mean(zd ** 2):.2f}; "
            f"largest |z|: scale {np.abs(zk).max():.1f}, offset {np.abs(zd).max():.1f}")


def one_run(sim, params: CurrentParams, pooled: Pooled, parts: bool = False) -> None:
    spec = sim.scenario.sensors
    true_scale, true_offset = true_calibration(spec)
    est = CurrentEstimator(params)
    plain = PlainTriangle(TRIANGLE_SMOOTHING_S)
    bound = PlainTriangle(TRIANGLE_SMOOTHING_S, stw_scale=true_scale, heading_offset_deg=true_offset)
    outage = spec.gnss_outages[0] if spec.gnss_outages else None
    frozen: dict = {}
    ctx = RunContext()
    t0 = sim.scenario.start_utc
    t_observable = observable_from(sim)
    t_prev = None
    first_fix, first_covered = len(pooled.err["offwatch"]), len(pooled.covered)
    for s, _ in run(est, sim.samples, ctx):
        if isinstance(s, float):
            continue
        plain.step(s)
        bound.step(s)
        if outage is not None and s.t_s >= outage[0] and "offwatch" not in frozen and est.state() is not None:
            st = est.state()
            frozen["offwatch"] = (st["east_kn"], st["north_kn"], st["stw_scale"], st["heading_offset_deg"])
            frozen["plain"] = (*plain.value(), 1.0, 0.0)
            frozen["bound"] = (*bound.value(), true_scale, true_offset)
        if not isinstance(s, Fix) or s.t_s - t0 < WARMUP_S:
            continue
        pub = ctx.latest("current")
        if pub is None or pub.payload["east_kn"] is None:
            continue
        p = pub.payload
        te, tn = truth_current(sim, s.t_s)
        observable = s.t_s >= t_observable
        for name, v in (("offwatch", (p["east_kn"], p["north_kn"])), ("plain", plain.value()), ("bound", bound.value())):
            e = math.hypot(v[0] - te, v[1] - tn) if v is not None else math.nan
            pooled.err[name].append(e)
            if observable:
                pooled.err_observable[name].append(e)
        if parts:
            split = sigma_parts(est, te, tn, true_scale, math.radians(true_offset))
            pooled.sigma_parts.append(split)
            if observable:
                pooled.sigma_parts_observable.append(split)
        drift_true = math.hypot(te, tn)
        covered = abs(p["drift_kn"] - drift_true) <= 2.0 * p["drift_sigma_kn"]
        pooled.covered.append(covered)
        if observable:
            pooled.covered_observable.append(covered)
        dt = 0.0 if t_prev is None else min(5.0, s.t_s - t_prev)
        t_prev = s.t_s
        if p["quality"] == "valid":
            pooled.valid_s += dt
            de, dn = p["east_kn"] - te, p["north_kn"] - tn
            if math.hypot(de, dn) > WRONG_KN and mahalanobis(de, dn, p) > WRONG_SIGMAS:
                pooled.wrong_valid_s += dt
    pooled.seed_mse.append(run_mse(pooled.err["offwatch"][first_fix:], pooled.err["plain"][first_fix:]))
    if len(pooled.covered) > first_covered:
        pooled.seed_coverage.append(float(np.mean(pooled.covered[first_covered:])))
    if outage is not None and frozen:
        for name, state in frozen.items():
            pooled.dr_pct[name].append(dead_reckoning_pct(sim, outage, state))
    calibration_check(est, true_scale, true_offset, pooled, sim.seed)


def calibration_check(est: CurrentEstimator, k_true: float, d_true: float, pooled: Pooled, seed: int) -> None:
    """At the end: whether the reported calibration (where it says 'calibrated') is within 2 sigma of the truth."""
    c = est.calibration()
    status = est._calibration_words()["status"]
    zk = (c.stw_scale - k_true) / c.stw_scale_sigma
    zd = (c.heading_offset_deg - d_true) / c.heading_offset_sigma_deg
    pooled.cal_runs += 1
    pooled.cal_ok += abs(zk) <= 2.0 and abs(zd) <= 2.0
    pooled.cal_lines.append(f"seed {seed}: {status}; k {c.stw_scale:.4f} ± {c.stw_scale_sigma:.4f} "
                            f"(truth {k_true:.4f}, {zk:+.1f} σ), d {c.heading_offset_deg:+.2f} ± "
                            f"{c.heading_offset_sigma_deg:.2f}° (truth {d_true:+.2f}, {zd:+.1f} σ)")


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


def parts_cells(parts: list[tuple[float, float, float, float]]) -> str:
    """The two ratios error variance / published variance (with the published sigma) of sigma_parts, pooled."""
    if not parts:
        return "– | –"
    a = np.array(parts)
    return (f"{a[:, 0].mean() / a[:, 1].mean():.2f} ({math.sqrt(a[:, 1].mean()):.3f}) "
            f"| {a[:, 2].mean() / a[:, 3].mean():.2f} ({math.sqrt(a[:, 3].mean()):.3f})")


def run_mse(offwatch: list[float], plain: list[float]) -> tuple[float, float]:
    """One run's mean squared vector error of offwatch and of the plain triangle, over the fixes where both have one."""
    a, b = np.array(offwatch, dtype=float), np.array(plain, dtype=float)
    both = np.isfinite(a) & np.isfinite(b)
    return float(np.mean(a[both] ** 2)), float(np.mean(b[both] ** 2))


def mean_and_se(values: np.ndarray) -> tuple[float, float]:
    """The mean of independent values (one a seed) and its standard error, sample standard deviation / sqrt(n)."""
    return float(values.mean()), float(values.std(ddof=1) / math.sqrt(values.size))


def paired_row(name: str, r: Pooled) -> str:
    """Seed by seed against the plain triangle: each run's mean squared error, offwatch's less the triangle's.

    The seeds share nothing but the scenario, so their differences are independent: their mean and its standard
    error (sample standard deviation / sqrt(n)) say whether the pooled figures differ by more than the seeds'
    scatter. A paired comparison (Student's t on the differences; from memory: with 10 seeds, 2 standard errors
    is about a 93 % two-sided interval). Within 2 standard errors of zero: level.
    """
    d = np.array([ow - pl for ow, pl in r.seed_mse])
    if d.size < 2:
        return f"| {name} | – | – | – |"
    mean, se = mean_and_se(d)
    verdict = "better" if mean + 2.0 * se < 0.0 else "worse" if mean - 2.0 * se > 0.0 else "level"
    return (f"| {name} | {mean * 1e4:+.1f} ± {se * 1e4:.1f} | {int((d < 0.0).sum())} of {d.size} | {verdict} |")


def coverage_row(name: str, r: Pooled) -> str:
    """Seed by seed, the 2-sigma coverage against its band (COVERAGE_BAND): each run's share, their mean and its
    standard error.

    A run's fixes share its draw of the calibration's error and the water's walk, so they are far from independent:
    the seeds are (as in paired_row). Within 2 standard errors of the band: consistent with it.
    """
    c = np.array(r.seed_coverage)
    if c.size < 2:
        return f"| {name} | – | – | – |"
    mean, se = mean_and_se(c)
    low, high = COVERAGE_BAND
    verdict = ("in the band" if low <= mean <= high else
               "above the band" if mean - 2.0 * se > high else
               "below the band" if mean + 2.0 * se < low else "within 2 standard errors of the band")
    return f"| {name} | {mean:.3f} ± {se:.3f} | {c.min():.3f}-{c.max():.3f} | {verdict} |"


def rms(values: list[float]) -> float:
    a = np.array(values, dtype=float)
    a = a[np.isfinite(a)]
    return float(np.sqrt(np.mean(a * a))) if a.size else math.nan


def per_fix_cost(params: CurrentParams) -> str:
    """CPU time per fix of the estimator alone (a 2-hour beat, 10-Hz compass, 1-Hz log and fix)."""
    from dataclasses import replace

    from tools.simulator.scenarios import H, beat
    sc = beat()
    sim = simulate(replace(sc, duration_s=2 * H, sensors=replace(sc.sensors, heading_hz=10.0)), 1)
    est = CurrentEstimator(params)
    samples = [s for s in sim.samples if isinstance(s, est.accepts)]
    t = time.process_time()
    for _ in run(est, samples, tick=False):
        pass
    cpu = time.process_time() - t
    n = sum(isinstance(s, Fix) for s in samples)
    return f"{1000.0 * cpu / n:.2f} ms CPU per fix (10-Hz compass, 1-Hz log and fix; {n} fixes)"


def observable_cell(r: Pooled) -> str:
    """RMS and coverage from the calibration's becoming observable; '–' where it never does."""
    if not r.err_observable["offwatch"]:
        return "–"
    ow, pl, bd = (rms(r.err_observable[k]) for k in ("offwatch", "plain", "bound"))
    return f"{ow:.3f} / {pl:.3f} / {bd:.3f} ({ow / bd:.1f} ×), {np.mean(r.covered_observable):.3f}"


def trial_params(settings: list[str]) -> CurrentParams:
    """The [current] parameters with each KEY=VALUE of ``--set`` (TOML values), checked as a config file is."""
    table: dict = {}
    for item in settings:
        key, sep, value = item.partition("=")
        if not sep:
            raise ConfigError(f"--set {item!r}: expected KEY=VALUE")
        try:
            table.update(tomllib.loads(f"{key.strip()} = {value.strip()}"))
        except tomllib.TOMLDecodeError as e:
            raise ConfigError(f"--set {item!r}: {e}") from None
    return fill(CurrentParams, table, "--set")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(prog="python -m tools.bench.current", description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, default=10, help="seeds per scenario (default 10)")
    ap.add_argument("--quick", action="store_true", help="3 seeds: a check, not the README's figures")
    ap.add_argument("--first-seed", type=int, default=1, help="first seed (to share a run among processes)")
    ap.add_argument("--scenario", action="append", choices=sorted(SCENARIOS), help="default: the current benchmark's five")
    ap.add_argument("--calibration", action="store_true", help="print each run's final calibration")
    ap.add_argument("--calibration-from-prior", action="store_true",
                    help="each seed's true log scale and compass offset drawn from the estimator's prior")
    ap.add_argument("--per-fix", action="store_true", help="only the estimator's CPU time per fix")
    ap.add_argument("--sigma-parts", action="store_true",
                    help="also the drift's error variance / covariance, calibration part and the rest")
    ap.add_argument("--set", action="append", default=[], metavar="KEY=VALUE",
                    help="a [current] parameter changed for a trial (TOML value), repeatable")
    args = ap.parse_args(argv)
    try:
        params = trial_params(args.set)
    except ConfigError as e:
        ap.error(str(e))
    if args.per_fix:
        print(per_fix_cost(params))
        return 0
    seeds = range(args.first_seed, args.first_seed + (3 if args.quick else args.seeds))
    t_all = time.perf_counter()
    results = []
    for name in args.scenario or CURRENT_BENCH:
        pooled = Pooled()
        t_start = time.perf_counter()
        for seed in seeds:
            scenario = SCENARIOS[name]()
            if args.calibration_from_prior:
                scenario = with_true_calibration(scenario, *prior_draw(params, seed))
            one_run(simulate(scenario, seed), params, pooled, args.sigma_parts)
        pooled.seconds = time.perf_counter() - t_start
        results.append((name, pooled))
    changed = f"; changed: {', '.join(args.set)}" if args.set else ""
    if args.calibration_from_prior:
        changed += "; true log scale and compass offset drawn from the estimator's prior per seed"
    print(f"Current estimator vs the plain triangle ({len(seeds)} seeds per scenario, realistic sensor model; "
          f"after {WARMUP_S / 60:.0f} min; triangles smoothed over {TRIANGLE_SMOOTHING_S:.0f} s{changed})\n")
    print("| scenario | RMS vector error kn: offwatch / plain / true-calibration triangle | 2σ coverage "
          "| min 'valid' while > 3σ and 0.25 kn off (of min valid) | calibration within 2σ at the end "
          "| DR error % of run: offwatch / plain / true cal. "
          f"| after the first course change ≥ {OBSERVABLE_TURN_DEG:.0f}°: RMS offwatch / plain / true cal. (× true cal.), 2σ coverage "
          "| run s |")
    print("| --- | --- | --- | --- | --- | --- | --- | --- |")
    for name, r in results:
        dr = " / ".join(f"{np.mean(r.dr_pct[k]):.1f}" for k in ("offwatch", "plain", "bound")) if r.dr_pct["offwatch"] else "–"
        print(f"| {name} | {rms(r.err['offwatch']):.3f} / {rms(r.err['plain']):.3f} / {rms(r.err['bound']):.3f} "
              f"| {np.mean(r.covered):.3f} | {r.wrong_valid_s / 60:.1f} ({r.valid_s / 60:.0f}) "
              f"| {r.cal_ok}/{r.cal_runs} | {dr} | {observable_cell(r)} | {r.seconds:.0f} |")
    print("\nSeed by seed against the plain triangle (each run's mean squared vector error, offwatch's less the "
          "triangle's: mean ± standard error over the seeds; within 2 standard errors of zero is level):\n")
    print("| scenario | difference, 10⁻⁴ kn² | offwatch lower | verdict |")
    print("| --- | --- | --- | --- |")
    for name, r in results:
        print(paired_row(name, r))
    print("\n2σ coverage seed by seed (each run's share of fixes: mean ± standard error over the seeds, the "
          f"runs' range; within 2 standard errors of {COVERAGE_BAND[0]:.2f}-{COVERAGE_BAND[1]:.2f}: consistent):\n")
    print("| scenario | coverage | runs | verdict |")
    print("| --- | --- | --- | --- |")
    for name, r in results:
        print(coverage_row(name, r))
    if args.sigma_parts:
        print("\nAlong the drift, error variance / published variance (1: honest), pooled after the warm-up:\n")
        print("| scenario | calibration part: ratio (its sigma, kn) | the rest: ratio (its sigma, kn) "
              f"| after the first course change ≥ {OBSERVABLE_TURN_DEG:.0f}°: calibration part | the rest |")
        print("| --- | --- | --- | --- | --- |")
        for name, r in results:
            print(f"| {name} | {parts_cells(r.sigma_parts)} | {parts_cells(r.sigma_parts_observable)} |")
    if args.calibration_from_prior:
        print("\n" + draws_summary(params, seeds))
    if args.calibration:
        for name, r in results:
            print(f"\n{name}:")
            for line in r.cal_lines:
                print("  -", line)
    print(f"\ntotal {time.perf_counter() - t_all:.0f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
