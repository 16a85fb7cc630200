"""The published sigma: P_pub, the error covariance of the current filter if the water walks as the data shows.

The filter (x, P, its gain) is untouched; the walk behind P_pub is read from the measured current by
maximum likelihood of a local level model (``estimators.current.walk``). Checked here: the likelihood
against the joint Gaussian density written out independently, the walk read by it against known walks,
steady and fast water through the estimator, the estimates unchanged, P_pub never above P while its
walk is slower, and the published sigma's coverage on a steady passage (NEES: Bar-Shalom, Li &
Kirubarajan, "Estimation with Applications to Tracking and Navigation", 2001, sect. 5.4).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.stats import multivariate_normal

from estimators.current import IE, IN, CurrentEstimator, CurrentParams
from estimators.current import control, estimator
from estimators.current.walk import NOISE_SCALES, Series, fit_walk, level_loglik
from estimators.runner import RunContext, run
from estimators.samples import Fix
from tests.synth import synth_passage, tacking_legs

S_PER_H = 3600.0
CONFIGURED = CurrentParams().current_walk_kn_per_sqrt_h
# the synthetic sensor model's noise is white: the filter is told so (as in test_current_consistency)
WHITE = dict(noise_correlation_s=0.5, heading_correlation_s=0.5, log_correlated_sigma_kn=0.0,
             heading_correlated_sigma_deg=0.0)


def rate(walk_kn_per_sqrt_h: float) -> float:
    return walk_kn_per_sqrt_h ** 2 / S_PER_H


def block_means(rng: np.random.Generator, walk: float, noise_sd: float, minutes: int = 60) -> Series:
    """One-minute means of a 1-s random walk on two axes, plus white noise, with a two-minute gap (a tack)
    every quarter hour: what the estimator hands the walk's reading."""
    n_s = minutes * 60
    levels = np.cumsum(rng.standard_normal((2, n_s)) * math.sqrt(rate(walk)), axis=1)
    starts = [m * 60 for m in range(minutes) if m % 15 not in (13, 14)]
    y = np.array([[levels[a, s:s + 60].mean() for s in starts] for a in range(2)])
    y += noise_sd * rng.standard_normal(y.shape)
    t0 = np.array(starts, dtype=float)
    return Series(t0, t0 + 60.0, y, np.full(y.shape, noise_sd ** 2))


def test_the_likelihood_is_the_joint_gaussian_density_of_the_block_means():
    # GIVEN block means of irregular spans with gaps, on one axis
    rng = np.random.default_rng(5)
    t0 = np.array([0.0, 70.0, 130.0, 400.0, 460.0, 520.0])
    t1 = t0 + np.array([60.0, 55.0, 60.0, 40.0, 60.0, 30.0])
    h = np.array([2e-4, 3e-4, 1e-4, 5e-4, 2e-4, 4e-4])
    y = 0.5 + 0.03 * rng.standard_normal(6)
    q = rate(0.3)
    # WHEN the Kalman filter's prediction error decomposition is evaluated
    ll = float(level_loglik(np.array([q]), Series(t0, t1, y[None, :], h[None, :]))[0])
    # THEN it equals the density of the differences y_i - y_0 (a diffuse level drops out of them) written
    # out from the Brownian motion: cov of two block means = q x mid-time of the earlier block, of one
    # block with itself q (start + span / 3), plus each mean's noise (Harvey 1989 ch. 3: the prediction
    # error decomposition is the joint density; from memory)
    mid = 0.5 * (t0 + t1)
    C = np.array([[t0[i] + (t1[i] - t0[i]) / 3.0 if i == j else mid[min(i, j)] for j in range(6)] for i in range(6)])
    cov = q * C + np.diag(h)
    D = np.hstack([-np.ones((5, 1)), np.eye(5)])
    direct = multivariate_normal(np.zeros(5), D @ cov @ D.T).logpdf(D @ y)
    assert ll == pytest.approx(direct, abs=1e-9)
    # ... and with the means' noise scaled, the density with h times the scale
    scaled = float(level_loglik(np.array([q]), Series(t0, t1, y[None, :], h[None, :]), np.array([0.4]))[0])
    direct_scaled = multivariate_normal(np.zeros(5), D @ (q * C + np.diag(0.4 * h)) @ D.T).logpdf(D @ y)
    assert scaled == pytest.approx(direct_scaled, abs=1e-9)


@pytest.mark.parametrize("walk", [0.25, 0.08])
def test_the_walk_read_covers_a_known_walk_as_often_as_its_confidence_says(walk):
    # GIVEN an hour of one-minute means of a known walk with noise like the filter's (0.04 kn per mean)
    inside, reads = 0, []
    seeds = 150
    for seed in range(seeds):
        s = block_means(np.random.default_rng(seed), walk, 0.04)
        # WHEN the walk is read with its 95 % likelihood-ratio interval (ceiling far above)
        fit = fit_walk(s, 100.0 * rate(CONFIGURED), 0.95)
        inside += fit.lower <= rate(walk) <= fit.upper
        reads.append(math.sqrt(fit.q_hat * S_PER_H))
    # THEN the interval holds the truth about 95 % of the time (Wilks 1938: the likelihood ratio is
    # chi-square with 1 degree of freedom in large samples; 0.95 +- 3 binomial standard errors, 150 runs)
    se = math.sqrt(0.95 * 0.05 / seeds)
    assert 0.95 - 3 * se <= inside / seeds <= min(1.0, 0.95 + 3 * se), inside / seeds
    # ... and the maximum-likelihood walk is about the truth (median within 15 %)
    assert np.median(reads) == pytest.approx(walk, rel=0.15)


@pytest.mark.parametrize("told_over_true", [1.0, 2.0, 3.0])
def test_the_noise_read_with_the_walk_finds_noise_overstated_by_R(told_over_true):
    # GIVEN an hour of one-minute means of a known walk whose noise variance is 1/1, 1/2 or 1/3 of what R says
    inside, scales = 0, []
    seeds = 150
    for seed in range(seeds):
        s = block_means(np.random.default_rng(1000 + seed), 0.08, 0.04)
        told = Series(s.t0, s.t1, s.y, s.h * told_over_true)
        # WHEN the walk is read with the noise's scale (1/4 to 1, as the estimator reads it)
        fit = fit_walk(told, 100.0 * rate(CONFIGURED), 0.95, NOISE_SCALES)
        inside += fit.lower <= rate(0.08) <= fit.upper
        scales.append(fit.noise_scale)
    # THEN the scale read is the truth's (median within 10 %; at 1, the grid's end, the median is 1) ...
    assert np.median(scales) == pytest.approx(1.0 / told_over_true, rel=0.10)
    # ... and the walk's interval, from the profile likelihood over the scale, still holds the truth about 95 %
    # of the time (Wilks 1938 for a profile likelihood; 0.95 +- 3 binomial standard errors, 150 runs)
    se = math.sqrt(0.95 * 0.05 / seeds)
    assert 0.95 - 3 * se <= inside / seeds <= min(1.0, 0.95 + 3 * se), inside / seeds


def steady_run(params: CurrentParams, seed: int, duration_s: int, walk: float, **synth) -> tuple:
    """A tacking passage (quarter-hour legs) run through the estimator; per fix: time from the start, the
    current's error, P, P_pub, the current and the truth (and on the estimator the change detector's largest
    inflation of Q)."""
    syn = synth_passage(seed, duration_s, tacking_legs(duration_s, 900), walk_kn_per_sqrt_h=walk, **synth)
    est = CurrentEstimator(params)
    est.records = []
    est.max_inflation = 1.0
    rows, i = [], 0
    for s, _ in run(est, syn.samples, tick=False):
        if not isinstance(s, Fix):
            continue
        if est.ekf is not None:
            est.max_inflation = max(est.max_inflation, est.q_inflation)
            e = est.ekf.x[[IE, IN], 0] - np.array(syn.current[i])
            rows.append((s.t_s - syn.t[0], e, est.ekf.P.copy(), est.ekf.P_pub.copy(), est.ekf.x[:2, 0].copy(),
                         np.array(syn.current[i])))
        i += 1
    return est, rows


def consistency(rows: list, published: bool = True, after_s: float = 2400.0) -> tuple[float, float]:
    """The current's mean NEES against P_pub (or the filter's P) and the share of fixes whose drift is within
    2 of its sigmas (along the drift), after ``after_s``."""
    nees, covered = [], []
    for t, e, P, P_pub, x, truth in rows:
        if t < after_s:
            continue
        C = (P_pub if published else P)[:2, :2]
        nees.append(e @ np.linalg.solve(C, e))
        u = x / np.hypot(*x)
        covered.append(abs(np.hypot(*x) - np.hypot(*truth)) <= 2.0 * math.sqrt(u @ C @ u))
    return float(np.mean(nees)), float(np.mean(covered))


@pytest.fixture(scope="module")
def steady_runs():
    """Four 80-minute tacking passages over water walking 0.05 kn/sqrt(h), a fifth of the configured walk."""
    return [steady_run(CurrentParams(**WHITE), 300 + seed, 4800, 0.05) for seed in range(4)]


def test_steady_water_reads_a_walk_far_below_the_configured_one(steady_runs):
    for est, rows in steady_runs:
        # THEN once the window is full the walk published is a fraction of the configured walk, near the water's
        assert est.water_walk.last is not None
        assert est.water_walk.walk_kn_per_sqrt_h < 0.5 * CONFIGURED
        # ... and so the published drift sigma is below the filter's own
        P, P_pub = rows[-1][2], rows[-1][3]
        assert P_pub[IE, IE] + P_pub[IN, IN] < 0.8 * (P[IE, IE] + P[IN, IN])


def test_the_published_sigma_covers_the_truth_as_a_95_percent_sigma_should(steady_runs):
    # GIVEN the steady passages after 40 minutes (the walk read, the calibration learnt at the tacks)
    rows = [row for _, run_rows in steady_runs for row in run_rows]
    nees_pub, covered = consistency(rows)
    nees_filter, covered_filter = consistency(rows, published=False)
    # THEN the current's NEES against the published covariance is about its 2 degrees of freedom
    # (the errors are correlated over minutes: a band, not the chi-square bounds of independent draws),
    # where against the filter's own P it is about half of it (the walk the water does not make)
    assert 1.4 < nees_pub < 2.8, nees_pub
    assert nees_filter < 1.4, nees_filter
    # ... and the drift lies within 2 published sigmas about 19 times in 20 (the target 0.93-0.97, loosened
    # by the few independent stretches four passages hold), where the filter's own sigma covers at 0.99
    assert 0.90 <= covered <= 0.98, covered
    assert covered_filter > covered


def test_the_published_sigma_narrows_where_the_instruments_are_quieter_than_R_says(steady_runs):
    # GIVEN the steady passages again, with GNSS, log and compass noise variances half of what R says
    quiet = dict(gnss_sigma=0.1 / math.sqrt(2.0), log_sigma=0.1 / math.sqrt(2.0), heading_sigma_deg=1.5 / math.sqrt(2.0))
    runs = [steady_run(CurrentParams(**WHITE), 300 + seed, 4800, 0.05, **quiet) for seed in range(4)]
    # THEN the noise read with the walk is about half of R's (the means' variance: each noise term halved)
    for est, _ in runs:
        assert 0.35 <= est.water_walk.noise_scale <= 0.7, est.water_walk.noise_scale
    # ... and the published covariance narrows with it: its NEES stays near the one with R right (within
    # 20 %; read with R's noise it fell to about 60 %), where the filter's own P keeps R and is about twice
    # as wide as the errors
    rows = [row for _, run_rows in runs for row in run_rows]
    nees_pub, covered = consistency(rows)
    nees_filter, _ = consistency(rows, published=False)
    nees_right, _ = consistency([row for _, run_rows in steady_runs for row in run_rows])
    assert nees_pub >= 0.8 * nees_right, (nees_pub, nees_right)
    assert nees_filter < 0.5 * nees_pub, nees_filter
    assert covered <= 0.99, covered


def test_published_covariance_is_never_above_the_filters_while_its_walk_is_slower(steady_runs):
    # GIVEN a passage with a jump of the current (the change detector inflates Q) as well as the steady ones
    est, jump = steady_run(CurrentParams(**WHITE), 7, 2400, 0.05, current_steps=((1800, (2.0, 0.5)),))
    assert est.max_inflation > 1.0
    for rows in [jump] + [rows for _, rows in steady_runs]:
        for _t, _e, P, P_pub, _x, _truth in rows:
            # THEN P - P_pub stays positive semidefinite: same gain, less process noise (the difference
            # obeys D+ = (I - K H) D (I - K H)' and grows by Q - Q_pub >= 0 at each predict)
            assert np.linalg.eigvalsh(P - P_pub).min() >= -1e-12 * np.trace(P)


def test_fast_water_publishes_the_configured_walk():
    # GIVEN water walking four times faster than the configured walk
    est, rows = steady_run(CurrentParams(**WHITE), 11, 4200, 4.0 * CONFIGURED)
    # THEN the walk read is capped at the configured one (never more than the filter's own model) ...
    assert est.water_walk.last is not None and est.water_walk.last.upper >= est.water_walk.ceiling
    assert est.water_walk.rate == est.water_walk.ceiling
    # ... and the published covariance is the filter's own, to rounding
    P, P_pub = rows[-1][2], rows[-1][3]
    np.testing.assert_allclose(P_pub, P, rtol=1e-6, atol=1e-12)


def test_the_current_payload_carries_the_walk_and_the_noise_behind_its_sigmas():
    # GIVEN 40 minutes of a tacking passage over water walking 0.05 kn/sqrt(h), run with its publications
    syn = synth_passage(31, 2400, tacking_legs(2400, 900), walk_kn_per_sqrt_h=0.05)
    est = CurrentEstimator(CurrentParams(**WHITE))
    ctx = RunContext()
    for _ in run(est, syn.samples, ctx):
        pass
    payload = ctx.latest("current").payload
    # THEN the payload says the walk and the noise scale the published covariance assumed at the end
    assert est.water_walk.last is not None
    assert payload["water_walk_kn_per_sqrt_h"] == round(est.water_walk.walk_kn_per_sqrt_h, 3)
    assert payload["water_walk_kn_per_sqrt_h"] < CONFIGURED
    assert payload["noise_scale"] == round(est.water_walk.noise_scale, 2)
    assert 0.25 <= payload["noise_scale"] <= 1.0


def test_the_walk_is_the_configured_one_until_the_window_holds_enough_blocks():
    est, _ = steady_run(CurrentParams(**WHITE), 12, 900, 0.0)
    # 15 minutes: fewer blocks than water_walk_min_blocks (20)
    assert len(est.water_walk.blocks) < est.params.water_walk_min_blocks
    assert est.water_walk.rate == est.water_walk.ceiling and est.water_walk.last is None


def records_of(params: CurrentParams) -> tuple[list, list]:
    est, rows = steady_run(params, 21, 1500, 0.05, current_steps=((1200, (1.8, 0.2)),))
    return [(r.x_post.tobytes(), r.P_post.tobytes()) for r in est.records], rows


def test_the_estimates_are_the_same_with_and_without_the_published_covariance(monkeypatch):
    # GIVEN one passage run as it is ...
    base, _ = records_of(CurrentParams(**WHITE))
    # ... and, with the filter's own walk held at the configured one (the floor at it: the water's walk read
    # then sets only what is published), with the walk read early and published at another confidence
    held = dict(WHITE, current_walk_floor_kn_per_sqrt_h=CurrentParams().current_walk_kn_per_sqrt_h)
    held_base, rows = records_of(CurrentParams(**held))
    other, rows_other = records_of(CurrentParams(**held, water_walk_min_blocks=3, published_walk_confidence=0.95))
    # ... and with P_pub never updated at all (the Joseph step with the filter's gain a no-op)
    monkeypatch.setattr(estimator, "joseph_with_gain_rows", lambda Pl, K, h0, h1, Rl: np.array(Pl))
    monkeypatch.setattr(control, "joseph_with_gain", lambda P, K, H, R: P)
    # ... and with the lag behind the water's slope never moved (walk: the lag's part of what is published)
    monkeypatch.setattr(estimator, "lag_updated", lambda lag, K: lag)
    monkeypatch.setattr(estimator, "lag_predicted", lambda lag, dt: lag)
    without, _ = records_of(CurrentParams(**WHITE))
    # THEN every state and the filter's own covariance are identical to the bit: P_pub and the lag never
    # reach the estimates, nor does the published walk's confidence where the filter's walk is held
    assert base == without
    assert held_base == other
    assert any(not np.allclose(a[3], b[3]) for a, b in zip(rows, rows_other))
