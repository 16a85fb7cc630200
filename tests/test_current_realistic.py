"""The current estimator on the simulator's realistic small-boat sensor model (correlated log and compass
noise, wave surge and yaw, GNSS latency, speed loss in tacks): honest sigma, and a calibration that moves
only where the data earns it. The full figures over many seeds are the benchmark's (tools/bench/current.py).

Consistency: NEES over Monte-Carlo runs (Bar-Shalom, Li & Kirubarajan, "Estimation with Applications to
Tracking and Navigation", 2001, sect. 5.4); the 95 % two-sided chi-square band from scipy.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from scipy.stats import chi2

from estimators.current import IE, IN, CurrentEstimator, CurrentParams
from estimators.runner import RunContext, run
from estimators.samples import Fix
from tools.simulator import Steer, simulate
from tools.simulator.scenarios import H, beat, ordinary_passage, tidal_box_realistic


def true_calibration(sim) -> tuple[float, float]:
    """(k, d deg) the estimator should find: the simulator's log reads scale x truth, its compass truth + offset."""
    spec = sim.scenario.sensors
    return 1.0 / spec.stw_scale, -spec.heading_offset_deg


def publications(sim, params: CurrentParams | None = None):
    est = CurrentEstimator(params or CurrentParams())
    ctx = RunContext()
    pubs = []
    for s, outs in run(est, sim.samples, ctx):
        pubs += [o for o in outs if getattr(o, "topic", None) == "current" and o.payload["east_kn"] is not None]
    return est, pubs


SMALL_CHANGE_SEEDS = range(1, 7)


def test_small_course_changes_keep_the_calibration_at_its_prior_or_within_its_sigma_of_the_truth():
    # GIVEN five hours of 1-hour legs whose headings differ by 15-30 deg (log 2 % slow, compass 1 deg off), six seeds
    legs = tuple(Steer(h, 6.0, 1 * H) for h in (80.0, 105.0, 90.0, 60.0, 85.0))
    p = CurrentParams()
    z = {"k": [], "d": []}
    for seed in SMALL_CHANGE_SEEDS:
        sim = simulate(replace(ordinary_passage(), duration_s=5 * H, helm=legs), seed)
        k_true, d_true = true_calibration(sim)
        # WHEN the estimator runs over it
        est, pubs = publications(sim)
        for pub in pubs:
            c = pub.payload
            at_prior_k = c["stw_scale"] == 1.0 and c["stw_scale_sigma"] == pytest.approx(p.initial_stw_scale_sigma)
            at_prior_d = c["heading_offset_deg"] == 0.0 and c["heading_offset_sigma_deg"] == pytest.approx(
                p.initial_heading_offset_sigma_deg)
            if not at_prior_k:
                z["k"].append(abs(c["stw_scale"] - k_true) / c["stw_scale_sigma"])
            if not at_prior_d:
                z["d"].append(abs(c["heading_offset_deg"] - d_true) / c["heading_offset_sigma_deg"])
    # THEN each half of the calibration is the prior (1, 0 with the prior's sigma) or near the truth as its
    # sigma says: small course changes never walk it away (the failure this guards against ran the log scale
    # 8 % from the truth over half an hour). Never beyond 3 of its sigmas; within 2 at 90 % of the moments or
    # more (an honest sigma: 95.4 %, the normal distribution's two-sided 2-sigma share; a run's moments share
    # their errors, so the pooled share of six runs scatters). "Within 2 sigma at every moment" holds only for
    # a sigma wider than its errors: before each instrument's noise was read on its own axis the log scale
    # never passed 1.8 sigma here while its errors' mean z^2 was about 0.6, and even then one seed of eight
    # put the offset 2.2 sigma off (tools/bench/NOTES.md, "Each instrument on its own axis")
    for name, values in z.items():
        assert values, name
        assert max(values) <= 3.0, (name, max(values))
        assert np.mean(np.array(values) <= 2.0) >= 0.90, (name, np.mean(np.array(values) <= 2.0))


TACK_SEEDS = range(1, 7)


def test_a_tack_sequence_converges_to_a_calibration_within_two_sigma():
    # GIVEN beats with tacks every 25-35 min, log 6 % slow, compass 3 deg low, 1.2 kn current (2.5 hours, six seeds)
    within = {"k": [], "d": []}
    for seed in TACK_SEEDS:
        sim = simulate(replace(beat(), duration_s=2.5 * H), seed)
        k_true, d_true = true_calibration(sim)
        # WHEN the estimator runs
        est, pubs = publications(sim)
        # THEN it says 'calibrated' before the end, and then at the end the values are within 2 sigma
        calibrated = [p.payload for p in pubs if p.payload["calibration"]["status"] == "calibrated"]
        assert calibrated, f"never calibrated on a beat (seed {seed})"
        zk = np.array([(c["stw_scale"] - k_true) / c["stw_scale_sigma"] for c in calibrated])
        zd = np.array([(c["heading_offset_deg"] - d_true) / c["heading_offset_sigma_deg"] for c in calibrated])
        assert abs(zk[-1]) <= 2.0 and abs(zd[-1]) <= 2.0, (seed, zk[-1], zd[-1])
        # ... never 3 sigma off while it says 'calibrated'
        assert np.abs(zk).max() <= 3.0 and np.abs(zd).max() <= 3.0, (seed, np.abs(zk).max(), np.abs(zd).max())
        within["k"].append(np.mean(np.abs(zk) <= 2.0))
        within["d"].append(np.mean(np.abs(zd) <= 2.0))
        # ... and the current at the end is within 0.15 kn of the truth
        end = pubs[-1]
        truth = sim.truth_at(end.t_s)
        assert math.hypot(end.payload["east_kn"] - truth.current_east_kn,
                          end.payload["north_kn"] - truth.current_north_kn) < 0.15, seed
    # ... and 'calibrated' is within 2 sigma of the truth as often as a fair estimate is: 95.4 % of the time for a
    # Gaussian error (the normal distribution's two-sided 2-sigma share); a run's error lasts for hours (one
    # fit's data), so over six runs at least 90 %
    assert np.mean(within["k"]) >= 0.9 and np.mean(within["d"]) >= 0.9, within


M_RUNS = 6


def test_nees_of_the_current_under_correlated_noise_is_near_its_dimension():
    # GIVEN M seeded runs of the tidal box (a stream that turns, four course changes an hour) under the
    # realistic sensor model, 100 minutes each
    nees_by_time = []
    for m in range(M_RUNS):
        sim = simulate(replace(tidal_box_realistic(), duration_s=100 * 60.0), 10 + m)
        est = CurrentEstimator(CurrentParams())
        row = []
        t0 = sim.scenario.start_utc
        next_t = t0 + 30 * 60.0
        for s, _ in run(est, sim.samples, tick=False):
            # WHEN, once a minute after 30 min, the current's error is normalised by the filter's covariance
            if isinstance(s, Fix) and s.t_s >= next_t and est.ekf is not None:
                tr = sim.truth_at(s.t_s)
                e = np.array([est.ekf.x[IE, 0] - tr.current_east_kn, est.ekf.x[IN, 0] - tr.current_north_kn])
                row.append(float(e @ np.linalg.solve(est.ekf.P[:2, :2], e)))
                next_t += 60.0
        nees_by_time.append(row[:70])
    nees = np.array([r for r in nees_by_time if len(r) == 70])
    # THEN the run-averaged NEES (2 states) is rarely above the 95 % chi-square band (over-confidence, the
    # dangerous failure), and on the whole neither over-confident nor useless. On a stream that turns
    # more slowly than the model's walk the expectation is about half the dimension, not 2: a filter
    # allowing a change that does not happen carries error variance sqrt(qR)/2 against its covariance
    # sqrt(qR) (steady-state random walk). Measured: a mean of 0.95, with R from the sensor model's
    # independent and correlated parts (it was 0.85 with the compass's wave yaw counted as correlated).
    avg = nees.mean(axis=0)
    n = nees.shape[0]
    hi = chi2.ppf(0.975, 2 * n) / n
    assert np.mean(avg > hi) <= 0.10, (avg.round(2), hi)
    assert 0.75 < avg.mean() < 2.6, avg.mean()  # about 1 expected (above), 2 at most
