"""The published sigma's trend: a local linear trend over the measured current's one-minute means, and the
filter's lag behind a current that changes steadily (``estimators.current.walk``).

Checked here: the trend's likelihood against the joint Gaussian density of the stacked means (scipy), with the
means' covariance integrated numerically from the continuous process's own covariance function; its diffuse
form against the restricted likelihood; the slope read from synthetic trends; the lag per unit slope against
the filter's own mean error behind a ramp; and the published covariance covering a steadily changing current
(NEES: Bar-Shalom, Li & Kirubarajan, "Estimation with Applications to Tracking and Navigation", 2001, sect. 5.4).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import dblquad
from scipy.stats import multivariate_normal

from estimators.current import IE, IN, CurrentEstimator, CurrentParams
from estimators.current.walk import Series, fit_trend, fit_walk, lag_covariance, trend_pass
from estimators.runner import RunContext, run
from estimators.samples import Fix
from tests.synth import synth_passage, tacking_legs

S_PER_H = 3600.0
CEILING = CurrentParams().current_walk_kn_per_sqrt_h ** 2 / S_PER_H
WHITE = dict(noise_correlation_s=0.5, heading_correlation_s=0.5, log_correlated_sigma_kn=0.0,
             heading_correlated_sigma_deg=0.0)

# irregular blocks with gaps, as turns and held fixes leave them
T0 = np.array([0.0, 70.0, 130.0, 400.0, 460.0, 520.0])
T1 = T0 + np.array([60.0, 55.0, 60.0, 40.0, 60.0, 30.0])
H = np.array([2e-4, 3e-4, 1e-4, 5e-4, 2e-4, 4e-4])


def means_covariance(q_level: float, q_slope: float, prior_cov: np.ndarray, noise: np.ndarray) -> np.ndarray:
    """Covariance of the block means, each the time average of level(t) = m + b t + W(t) + int_0^t V, W and V
    Brownian motions of rates q_level and q_slope: cov(level(t), level(u)) = P_mm + (t + u) P_mb + t u P_bb
    + q_level min(t, u) + q_slope (s^2 S / 2 - s^3 / 6), s = min, S = max (the integrated Brownian motion's
    covariance, from its definition), averaged over both blocks by scipy's adaptive quadrature."""

    def k(t: float, u: float) -> float:
        s, big = min(t, u), max(t, u)
        return (prior_cov[0, 0] + (t + u) * prior_cov[0, 1] + t * u * prior_cov[1, 1] + q_level * s
                + q_slope * (s * s * big / 2.0 - s ** 3 / 6.0))

    n = len(T0)
    C = np.empty((n, n))
    for i in range(n):
        for j in range(i, n):
            integral = dblquad(lambda u, t: k(t, u), T0[i], T1[i], T0[j], T1[j], epsabs=1e-11, epsrel=1e-9)[0]
            C[i, j] = C[j, i] = integral / ((T1[i] - T0[i]) * (T1[j] - T0[j]))
    return C + np.diag(noise)


def test_the_trend_likelihood_is_the_joint_gaussian_density_of_the_block_means():
    # GIVEN block means on one axis and a known state (level, slope) at the first block's start
    y = 0.5 + 0.03 * np.random.default_rng(5).standard_normal(6)
    q_level, q_slope, scale = 0.3 ** 2 / S_PER_H, 1e-11, 0.7
    mean0, cov0 = np.array([[0.45, 2e-4]]), np.array([[0.04, 1e-5], [1e-5, 1e-8]])
    # WHEN the trend's Kalman filter evaluates the prediction error decomposition
    ll = trend_pass(np.array([q_level]), np.array([q_slope]), Series(T0, T1, y[None, :], H[None, :]),
                    np.array([scale]), prior=(mean0, cov0)).ll[0]
    # THEN it is the density of the stacked means (scipy.stats.multivariate_normal), their mean the line at
    # each block's middle and their covariance integrated from the process's covariance function
    mid = 0.5 * (T0 + T1)
    direct = multivariate_normal(mean0[0, 0] + mean0[0, 1] * mid,
                                 means_covariance(q_level, q_slope, cov0, scale * H)).logpdf(y)
    assert ll == pytest.approx(direct, abs=1e-6)


def test_the_diffuse_trend_likelihood_ranks_parameters_as_the_restricted_likelihood_does():
    # GIVEN the same means, the level and slope unknown (diffuse), and two parameter sets
    y = 0.5 + 1e-4 * 0.5 * (T0 + T1) + 0.03 * np.random.default_rng(6).standard_normal(6)
    sets = [(0.3 ** 2 / S_PER_H, 1e-11, 0.7), (0.05 ** 2 / S_PER_H, 1e-9, 0.4)]
    # WHEN the trend's filter starts diffuse
    ll = trend_pass(np.array([s[0] for s in sets]), np.array([s[1] for s in sets]),
                    Series(T0, T1, y[None, :], H[None, :]), np.array([s[2] for s in sets])).ll

    # THEN the difference of the two log-likelihoods is that of the restricted (REML) likelihood of the means
    # with the line's level and slope as fixed effects (Harville, J. Am. Stat. Assoc. 72, 1977; a diffuse
    # initial state's likelihood equals it up to a constant: Francke, Koopman & de Vos, J. Time Ser. Anal. 31,
    # 2010; both from memory)
    def reml(q_level: float, q_slope: float, scale: float) -> float:
        C = means_covariance(q_level, q_slope, np.zeros((2, 2)), scale * H)
        X = np.column_stack([np.ones(6), 0.5 * (T0 + T1)])
        Ci = np.linalg.inv(C)
        A = X.T @ Ci @ X
        proj = Ci - Ci @ X @ np.linalg.solve(A, X.T @ Ci)
        return -0.5 * (np.linalg.slogdet(C)[1] + np.linalg.slogdet(A)[1] + y @ proj @ y)

    assert ll[0] - ll[1] == pytest.approx(reml(*sets[0]) - reml(*sets[1]), abs=1e-5)


def trend_means(rng: np.random.Generator, slope_kn_per_h: tuple[float, float], walk: float, noise_sd: float,
                minutes: int = 60) -> Series:
    """One-minute means of a current changing steadily by ``slope_kn_per_h`` and walking ``walk`` kn/sqrt(h) per
    second, plus white noise, a two-minute gap every quarter hour."""
    n_s = minutes * 60
    steps = rng.standard_normal((2, n_s)) * walk / math.sqrt(S_PER_H) + np.array(slope_kn_per_h)[:, None] / S_PER_H
    levels = np.cumsum(steps, axis=1)
    starts = [m * 60 for m in range(minutes) if m % 15 not in (13, 14)]
    y = np.array([[levels[a, s:s + 60].mean() for s in starts] for a in range(2)])
    y += noise_sd * rng.standard_normal(y.shape)
    t0 = np.array(starts, dtype=float)
    return Series(t0, t0 + 60.0, y, np.full(y.shape, noise_sd ** 2))


@pytest.mark.parametrize("walk", [0.0, 0.02])
def test_the_slope_read_from_a_steady_trend_is_the_trends_within_its_sigma(walk):
    # GIVEN an hour of one-minute means of a current changing 0.8 kn/h east and -0.4 north (a tidal stream's
    # rate near its strongest), still or walking 0.02 kn/sqrt(h), noise 0.03 kn per mean, over 100 seeds
    truth = np.array([0.8, -0.4]) / S_PER_H
    z = []
    for seed in range(100):
        fit = fit_trend(trend_means(np.random.default_rng(seed), (0.8, -0.4), walk, 0.03), CEILING, 0.95)
        z.extend((np.array(fit.slope) - truth) / np.sqrt(fit.slope_var))
    z = np.array(z)
    # THEN the slope read is the truth's within its own sigma about as a fair estimate is (normal quantiles):
    # mean z^2 near 1 and within 2 sigma near 0.95. The sigma is the one at the likelihood's maximum: where
    # the water walks a little, about half the hours read no walk at all and their sigma is the straight
    # line's, a little narrow (mean z^2 about 1.5 at 0.02 kn/sqrt(h); its part in the published covariance,
    # lag^2 x the slope's variance, is below 0.002 kn there)
    assert 0.6 <= float(np.mean(z * z)) <= 1.6, float(np.mean(z * z))
    assert 0.88 <= float(np.mean(np.abs(z) <= 2.0)) <= 0.99
    assert abs(float(np.mean(z))) < 0.25                        # no bias: a mean over 200 draws of sd 1/14


def test_a_steady_trend_reads_as_a_slope_where_a_local_level_reads_a_walk():
    # GIVEN an hour of means of water changing steadily 1 kn/h and barely walking (0.01 kn/sqrt(h))
    walks_trend, walks_level = [], []
    for seed in range(20):
        s = trend_means(np.random.default_rng(100 + seed), (1.0, 0.0), 0.01, 0.03)
        walks_trend.append(math.sqrt(fit_trend(s, CEILING, 0.95).upper * S_PER_H))
        walks_level.append(math.sqrt(fit_walk(s, CEILING, 0.95).upper * S_PER_H))
    # THEN the trend's walk (the upper end of its 95 % interval) is well below the local level's, which reads
    # the steady change as a walk (a random walk's increments over 55 minutes ~ 1 kn: 0.25 kn/sqrt(h) or more)
    assert np.median(walks_trend) < 0.1, np.median(walks_trend)
    assert np.median(walks_level) > 2.0 * np.median(walks_trend), (np.median(walks_level), np.median(walks_trend))


def test_the_lag_covariance_is_the_lag_times_the_slopes_second_moment():
    # L E[b b'] L' written out against numpy's matrix product
    lag = ((-70.0, 3.0), (-2.0, -80.0))
    moment = ((4e-8, 1e-9), (1e-9, 9e-8))
    expected = np.array(lag) @ np.array(moment) @ np.array(lag).T
    np.testing.assert_allclose(np.array(lag_covariance(lag, moment)), expected, rtol=1e-12)


def ramp_run(seed: int, slope_kn_per_h: tuple[float, float], duration_s: int = 5400) -> tuple[CurrentEstimator, list]:
    """A tacking passage (quarter-hour legs) over water changing steadily: per fix after the first 40 minutes,
    the current's error, the published covariance (the lag's part in it) and P_pub alone, and the lag."""
    syn = synth_passage(seed, duration_s, tacking_legs(duration_s, 900), current_slope_kn_per_h=slope_kn_per_h)
    est = CurrentEstimator(CurrentParams(**WHITE))
    rows, i = [], 0
    for s, _ in run(est, syn.samples, tick=False):
        if not isinstance(s, Fix):
            continue
        if est.ekf is not None and s.t_s - syn.t[0] >= 2400.0:
            e = est.ekf.x[[IE, IN], 0] - np.array(syn.current[i])
            rows.append((e, est.published_covariance()[:2, :2], est.ekf.P_pub[:2, :2].copy(), np.array(est.ekf.lag)))
        i += 1
    return est, rows


@pytest.fixture(scope="module")
def ramp_runs():
    """Four 90-minute passages in water changing 1.5 kn/h east and 0.5 kn/h south: a strong stream's
    rise (the filter's lag behind it comparable to its noise)."""
    return [ramp_run(400 + seed, (1.5, -0.5)) for seed in range(4)]


def test_the_lag_per_unit_slope_is_the_filters_mean_error_behind_a_ramp(ramp_runs):
    slope = np.array([1.5, -0.5]) / S_PER_H
    errors = np.array([e for _, rows in ramp_runs for e, *_ in rows])
    predicted = np.array([lag @ slope for _, rows in ramp_runs for *_, lag in rows])
    # THEN the lag carried beside the filter is its mean error behind the ramp: error = -(time constant) x slope
    # on each axis, the recursion's mean within the errors' own scatter (their standard error: about 0.03 kn
    # per fix, correlated over the filter's ~1-minute memory, so a few hundred independent values)
    assert np.all(predicted.mean(axis=0) * np.sign(slope) < 0.0)                  # behind, not ahead
    np.testing.assert_allclose(errors.mean(axis=0), predicted.mean(axis=0), atol=0.006)
    assert np.all(np.abs(predicted.mean(axis=0)) > 0.005)                        # a lag the test can see


def test_the_published_covariance_covers_a_steadily_changing_current(ramp_runs):
    rows = [row for _, run_rows in ramp_runs for row in run_rows]
    nees = np.array([e @ np.linalg.solve(C, e) for e, C, _, _ in rows])
    nees_without_lag = np.array([e @ np.linalg.solve(P_pub, e) for e, _, P_pub, _ in rows])
    # THEN the current's NEES against the published covariance is about its 2 degrees of freedom (a band:
    # the errors are correlated over minutes), and the lag's part is what brings it there
    assert 1.4 < float(nees.mean()) < 2.8, float(nees.mean())
    assert float(nees_without_lag.mean()) > float(nees.mean())
    # ... and the error lies within the 2-dof chi-square's 95 % ellipse (5.99) about 19 times in 20
    assert 0.90 <= float(np.mean(nees <= 5.99)) <= 0.98, float(np.mean(nees <= 5.99))
    # ... with the slope read (the published trend) near the truth at the end
    for est, _ in ramp_runs:
        fit = est.water_walk.trend
        assert fit is not None and est.water_walk.trending
        assert np.array(fit.slope) * S_PER_H == pytest.approx([1.5, -0.5], abs=0.3)


def published_current(seed: int, slope_kn_per_h: tuple[float, float], duration_s: int) -> tuple[CurrentEstimator, dict]:
    """The current payload at the end of a tacking passage over water changing at ``slope_kn_per_h``."""
    syn = synth_passage(seed, duration_s, tacking_legs(duration_s, 900), current_slope_kn_per_h=slope_kn_per_h)
    est, ctx = CurrentEstimator(CurrentParams(**WHITE)), RunContext()
    for _ in run(est, syn.samples, ctx):
        pass
    return est, ctx.latest("current").payload


def test_the_payload_carries_the_waters_steady_change_where_the_hour_shows_one():
    est, payload = published_current(410, (1.5, -0.5), 5400)
    # THEN the payload says the slope the published sigma counted the lag for, in kn/h (0.01 kn/h: payloads' table)
    slope = np.array(est.water_walk.trend.slope) * S_PER_H
    assert (payload["water_trend_east_kn_per_h"], payload["water_trend_north_kn_per_h"]) == \
        (round(float(slope[0]), 2), round(float(slope[1]), 2))
    # ... and that is the water's own change: the synthetic stream's 1.5 kn/h east and 0.5 kn/h south, within
    # the slope's scatter over an hour of minute means (the ramp test's tolerance above)
    assert payload["water_trend_east_kn_per_h"] == pytest.approx(1.5, abs=0.3)
    assert payload["water_trend_north_kn_per_h"] == pytest.approx(-0.5, abs=0.3)


def test_the_payload_says_no_trend_before_the_hour_has_enough_minutes():
    est, payload = published_current(411, (1.5, -0.5), 900)
    # 15 minutes: fewer blocks than water_walk_min_blocks (20), so no walk or trend read yet
    assert est.water_walk.trend is None
    assert payload["water_trend_east_kn_per_h"] is None and payload["water_trend_north_kn_per_h"] is None


@pytest.mark.parametrize("rows", [1, 2, 3, 5])
def test_the_walk_reads_sum_their_axes_and_blocks_as_numpys_sum_does_to_the_bit(rows):
    # GIVEN terms of a likelihood per block, axis and parameter set, spread over many orders of magnitude
    # (so that another order of the additions would round differently)
    from estimators.current.walk import _rows_added
    rng = np.random.default_rng(rows)
    terms = rng.standard_normal((rows, 2, 997)) * 10.0 ** rng.integers(-8, 8, (rows, 2, 997))
    # WHEN they are added row after row, as the walk's and the trend's passes add them
    total = None
    for block in terms:
        total = _rows_added(total, block)
    # THEN the sums are numpy's over the leading axes bit for bit (numpy sums pairwise only along the fast axis
    # and adds along a leading one row after row: from memory, and held here): the published sigmas do not move
    assert np.array_equal(total, np.sum(terms, axis=(0, 1)))
    assert np.array_equal(_rows_added(None, terms[0]), np.sum(terms[0], axis=0))
