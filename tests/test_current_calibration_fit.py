"""The calibration's batch fit on its own: the model error it reads from the window, not only from the params.

Blocks are built directly (the mean ground velocity and water-velocity reading of a minute's steady
sailing), with the sensors' noise of the params' own block model, so the truth of the current, the log
scale and the compass offset is known exactly.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.stats import chi2

from estimators.current import CurrentParams
from estimators.angles import turned
from estimators.current.calibration import Block, CalibrationFit, excess_variance

K_TRUE, D_TRUE_DEG, STW_KN = 1.05, 2.0, 6.0
BLOCK_S = 60.0
PARAMS = CurrentParams()
PARAMS_WALK = PARAMS.current_walk_kn_per_sqrt_h


def blocks(seed: int, hours: float, walk_kn_per_sqrt_h: float, leg_s: float, noise_over_model: float = 1.0
           ) -> list[Block]:
    """One-minute blocks on legs of 0 and 90 deg alternating every ``leg_s``, over a current that walks, with
    the sensors' noise variance ``noise_over_model`` times the fit's model of it."""
    rng = np.random.default_rng(seed)
    # the block's noise as the fit models it (it depends on the speed and the log scale, not the course)
    probe = Block(0.0, (0.0, 0.0), (0.0, STW_KN / K_TRUE), STW_KN / K_TRUE, 60)
    sensor_sd = math.sqrt(noise_over_model * CalibrationFit(PARAMS, (1.0, 0.0, 0.05, 0.05)).sensor_variances(
        [probe], K_TRUE)[0])
    ce, cn = 0.6, -0.8
    out = []
    for i in range(int(hours * 3600 / BLOCK_S)):
        t = (i + 0.5) * BLOCK_S
        course = 0.0 if int(t // leg_s) % 2 == 0 else 90.0
        water = (STW_KN * math.sin(math.radians(course)), STW_KN * math.cos(math.radians(course)))
        m = turned(water, -math.radians(D_TRUE_DEG))                       # the compass reads d low
        m = (m[0] / K_TRUE, m[1] / K_TRUE)                                  # the log reads 1/k of the truth
        step = walk_kn_per_sqrt_h * math.sqrt(BLOCK_S / 3600.0)
        ce, cn = ce + rng.normal(0.0, step), cn + rng.normal(0.0, step)
        g = (ce + water[0] + rng.normal(0.0, sensor_sd), cn + water[1] + rng.normal(0.0, sensor_sd))
        out.append(Block(t, g, m, STW_KN / K_TRUE, 60))
    return out


def fitted(bl: list[Block]):
    fit = CalibrationFit(PARAMS, (1.0, 0.0, 0.05, math.radians(3.0)))
    fit.blocks.extend(bl)
    return fit.fit(bl[-1].t_s, 1.0, 0.0)


def test_paule_mandel_recovers_a_known_excess_variance():
    # GIVEN residuals whose variance is each one's own v_i plus 0.04 shared by all (seeded, 20000 of them)
    rng = np.random.default_rng(5)
    v = rng.uniform(0.005, 0.05, 20000)
    res = rng.normal(0.0, np.sqrt(v + 0.04))
    # WHEN the shared variance is solved for
    s = excess_variance(res, v, len(res))
    # THEN it is found (Paule & Mandel 1982: weighted sum of squares = degrees of freedom, a moment estimator)
    assert abs(s - 0.04) < 0.004, s
    # ... and residuals with no excess earn none
    assert excess_variance(rng.normal(0.0, np.sqrt(v)) * 0.9, v, len(v)) == 0.0


def test_the_walk_read_follows_the_water_in_both_directions():
    for seed in range(3):
        # GIVEN three hours of half-hour legs over steady water, and over water walking 4 x the params' walk
        # WHEN the fit runs over each
        steady = fitted(blocks(seed, 3.0, 0.0, 1800.0))
        walking = fitted(blocks(seed, 3.0, 4.0 * PARAMS_WALK, 1800.0))
        # THEN steady water reads a walk well below the params' (its model error no longer the params')
        assert steady.water_walk_kn_per_sqrt_h < 0.4 * PARAMS_WALK, steady.water_walk_kn_per_sqrt_h
        # ... and the fast-walking water one above it, uncapped (a random walk's residual after a quadratic)
        assert walking.water_walk_kn_per_sqrt_h > 2.0 * PARAMS_WALK, walking.water_walk_kn_per_sqrt_h
        # ... and over steady water the calibration lies within 2 of its sigmas of the truth
        assert abs(steady.k - K_TRUE) <= 2.0 * math.sqrt(steady.cov[0, 0]), (steady.k, steady.cov[0, 0])
        assert abs(math.degrees(steady.d_rad) - D_TRUE_DEG) <= 2.0 * math.degrees(math.sqrt(steady.cov[1, 1]))


def test_a_few_blocks_stay_near_the_params_walk():
    # GIVEN steady water seen for only eight minutes (two legs of four): few residuals to read a variance from
    # WHEN the fit runs, and over three hours of the same water
    for seed in range(3):
        few = fitted(blocks(seed, 8.0 / 60.0, 0.0, 240.0))
        many = fitted(blocks(seed, 3.0, 0.0, 1800.0))
        # THEN the short window's walk stays within a factor of two of the params' (the params' walk counts
        # as calibration_walk_prior_dof residuals: the conjugate update of a normal variance, Gelman et al.,
        # "Bayesian Data Analysis", sect. 3.3, from memory); the long one reads the steady water's
        assert 0.5 * PARAMS_WALK < few.water_walk_kn_per_sqrt_h <= 1.5 * PARAMS_WALK, few.water_walk_kn_per_sqrt_h
        assert many.water_walk_kn_per_sqrt_h < 0.5 * few.water_walk_kn_per_sqrt_h


@pytest.mark.parametrize("walk", [0.0, 0.05])
def test_the_fits_sigma_is_honest_over_water_walking_slower_than_configured(walk):
    # GIVEN three hours of half-hour legs over steady water and over water walking a fifth of the configured
    # walk, 60 seeds each
    n = 60
    zk, zd, walks, read = [], [], [], []
    for seed in range(n):
        r = fitted(blocks(2000 + seed, 3.0, walk, 1800.0))
        zk.append((r.k - K_TRUE) / math.sqrt(r.cov[0, 0]))
        zd.append((math.degrees(r.d_rad) - D_TRUE_DEG) / math.degrees(math.sqrt(r.cov[1, 1])))
        walks.append(r.covariance_walk_kn_per_sqrt_h)
        read.append(r.water_walk_kn_per_sqrt_h)
    # THEN the log scale's and the offset's mean z^2 lie in the chi-square band of 60 draws (99 %: scipy), where
    # the walk the residuals' sum of squares reads (near 0.06 kn/sqrt(h) over steady water, the configured
    # walk's prior weight) made the sigma about 1.4 times too wide (mean z^2 about 0.5)
    lo, hi = chi2.ppf(0.005, n) / n, chi2.ppf(0.995, n) / n
    assert lo < np.mean(np.square(zk)) < hi, np.mean(np.square(zk))
    assert lo < np.mean(np.square(zd)) < hi, np.mean(np.square(zd))
    # ... over steady water the walk the covariance counts is the one the residuals show in time, below the sum of
    # squares' read (which a walk of 0.05 kn/sqrt(h) brings up to the same, near the truth)
    if walk == 0.0:
        assert np.median(walks) < np.median(read), (np.median(walks), np.median(read))


M2_PERIOD_H = 12.4206  # the principal lunar semidiurnal constituent's period (NOAA's tidal constituent tables; from memory)


def box_in_a_turning_stream(seed: int, start_h: float, hours: float = 3.0, leg_s: float = 1800.0) -> list[Block]:
    """One-minute blocks motoring a box (legs 000, 090, 180, 270 deg of ``leg_s``) in a tidal stream that turns.

    The stream is the tidal box scenario's: an ellipse of 1.6 kn along 060 deg and 0.6 kn across it, turning
    clockwise once per M2 period; ``start_h`` is the window's phase. It is smooth, so the window's quadratic
    leaves a cubic-like error that stays the same from seed to seed: the aliasing the fit's sigma must own.
    """
    rng = np.random.default_rng(seed)
    probe = Block(0.0, (0.0, 0.0), (0.0, STW_KN / K_TRUE), STW_KN / K_TRUE, 60)
    sensor_sd = math.sqrt(CalibrationFit(PARAMS, (1.0, 0.0, 0.05, 0.05)).sensor_variances([probe], K_TRUE)[0])
    axis = math.radians(60.0)
    out = []
    for i in range(int(hours * 3600 / BLOCK_S)):
        t = (i + 0.5) * BLOCK_S
        course = 90.0 * (int(t // leg_s) % 4)
        water = (STW_KN * math.sin(math.radians(course)), STW_KN * math.cos(math.radians(course)))
        m = turned(water, -math.radians(D_TRUE_DEG))
        m = (m[0] / K_TRUE, m[1] / K_TRUE)
        phase = 2.0 * math.pi * (start_h + t / 3600.0) / M2_PERIOD_H
        along, across = 1.6 * math.cos(phase), 0.6 * math.sin(phase)
        ce = along * math.sin(axis) + across * math.cos(axis)
        cn = along * math.cos(axis) - across * math.sin(axis)
        g = (ce + water[0] + rng.normal(0.0, sensor_sd), cn + water[1] + rng.normal(0.0, sensor_sd))
        out.append(Block(t, g, m, STW_KN / K_TRUE, 60))
    return out


def test_a_turning_stream_stays_within_the_fits_sigma():
    # GIVEN three-hour windows of a box motored in a turning tidal stream, at every hour of its cycle, 3 seeds
    zd, zk, sd_deg = [], [], []
    for seed in range(3):
        for start_h in np.arange(0.0, M2_PERIOD_H, 1.0):
            # WHEN the fit runs over each window
            r = fitted(box_in_a_turning_stream(seed, float(start_h)))
            sd_deg.append(math.degrees(math.sqrt(r.cov[1, 1])))
            zd.append((math.degrees(r.d_rad) - D_TRUE_DEG) / sd_deg[-1])
            zk.append((r.k - K_TRUE) / math.sqrt(r.cov[0, 0]))
    zd, zk = np.array(zd), np.array(zk)
    # THEN the offset and the log scale lie within 2 sigma of the truth as often as an honest sigma's do
    # (counting the current's walk as independent from block to block, only 54 % and 79 % did, up to 3 sigma)
    assert np.mean(np.abs(zd) <= 2.0) >= 0.9, zd
    assert np.mean(np.abs(zk) <= 2.0) >= 0.9, zk
    # ... with their mean z^2 near 1, not far below it: honest, not merely wide
    assert 0.25 < np.mean(zd ** 2) < 1.6 and 0.25 < np.mean(zk ** 2) < 1.6, (np.mean(zd ** 2), np.mean(zk ** 2))
    # ... and the offset still counts as calibrated after one window
    assert max(sd_deg) < PARAMS.calibrated_heading_offset_sigma_deg, max(sd_deg)


class _Uncorrected(CalibrationFit):
    """The fit without the correction for the readings' own noise (to show the pull it takes away)."""

    def _gauss_newton(self, blocks, w, walk_w, k, d, dilution):
        return super()._gauss_newton(blocks, w, walk_w, k, d, 0.0)


def noisy_reading_blocks(seed: int, courses: tuple[float, ...], leg_s: float, hours: float,
                         compass_over_model: float = 1.0) -> list[Block]:
    """Steady water seen on gentle course changes, the noise where the instruments put it: the log's along the
    water track and the compass's across it in the reading m, the GNSS's in the ground velocity g (each with
    the variance of the fit's own block model, the compass's ``compass_over_model`` times it)."""
    rng = np.random.default_rng(seed)
    speed = STW_KN / K_TRUE
    fit = CalibrationFit(PARAMS, (1.0, 0.0, 0.05, 0.05))
    moving, still = Block(0.0, (0.0, 0.0), (0.0, speed), speed, 60), Block(0.0, (0.0, 0.0), (0.0, 0.0), 0.0, 60)
    log_var = fit.reading_variances([still])[0]                 # at no speed the compass adds nothing: the log's
    across_var = compass_over_model * (fit.reading_variances([moving])[0] - log_var)
    gnss_sd = math.sqrt(fit.gnss_variances([moving])[0])
    ce, cn = 0.6, -0.8
    out = []
    for i in range(int(hours * 3600 / BLOCK_S)):
        t = (i + 0.5) * BLOCK_S
        course = math.radians(courses[int(t // leg_s) % len(courses)])
        along, across = (math.sin(course), math.cos(course)), (math.cos(course), -math.sin(course))
        water = (STW_KN * along[0], STW_KN * along[1])
        read = turned(water, -math.radians(D_TRUE_DEG))
        a, c = rng.normal(0.0, math.sqrt(log_var)), rng.normal(0.0, math.sqrt(across_var))
        m = (read[0] / K_TRUE + a * along[0] + c * across[0], read[1] / K_TRUE + a * along[1] + c * across[1])
        g = (ce + water[0] + rng.normal(0.0, gnss_sd), cn + water[1] + rng.normal(0.0, gnss_sd))
        out.append(Block(t, g, m, speed, 60))
    return out


def test_the_readings_own_noise_does_not_pull_the_log_scale_low():
    # GIVEN three hours of steady water on legs 20 deg apart (half an hour each), the log's and the compass's
    # noise in the reading m, 80 seeds
    k_fit, k_naive = [], []
    for seed in range(80):
        bl = noisy_reading_blocks(3000 + seed, (80.0, 100.0), 1800.0, 3.0)
        # WHEN the fit runs, with and without its correction for the noise in m
        k_fit.append(fitted(bl).k - K_TRUE)
        naive = _Uncorrected(PARAMS, (1.0, 0.0, 0.05, math.radians(3.0)))
        naive.blocks.extend(bl)
        k_naive.append(naive.fit(bl[-1].t_s, 1.0, 0.0).k - K_TRUE)
    se = np.std(k_fit, ddof=1) / math.sqrt(len(k_fit))
    # THEN without it the least squares' log scale comes out low: noise in a regressor attenuates its
    # coefficient (regression dilution; Fuller, "Measurement Error Models", 1987, sect. 1.1, from memory),
    # strongly here, where only a 20 deg change separates the scale from the current
    assert np.mean(k_naive) < -4.0 * se, (np.mean(k_naive), se)
    # ... and with it the mean error is within 3 standard errors of zero (corrected least squares: the noise's
    # expected share of the sum of squares, k^2 sum w tr(M), taken off the objective)
    assert abs(np.mean(k_fit)) < 3.0 * se, (np.mean(k_fit), se)


class _EvenlyShared(CalibrationFit):
    """The fit with its instruments' scales held at their model (the covariance before they were read)."""

    def _instrument_scales(self, *args) -> tuple[float, float]:
        return 1.0, 1.0


def test_a_compass_quieter_than_its_model_does_not_widen_the_log_scales_sigma():
    # GIVEN three hours of steady water on legs 20 deg apart, the compass's block noise half its model's (wave
    # yaw, a swing of a few seconds, averages out over a minute's block faster than the white noise the model
    # takes it for), the log's as modelled, 80 seeds
    n = 80
    zk, zd, zk_even = [], [], []
    for seed in range(n):
        bl = noisy_reading_blocks(4000 + seed, (80.0, 100.0), 1800.0, 3.0, compass_over_model=0.5)
        # WHEN the fit runs, reading each instrument's scale from the residuals on its own axis, and without
        r = fitted(bl)
        zk.append((r.k - K_TRUE) ** 2 / r.cov[0, 0])
        zd.append((math.degrees(r.d_rad) - D_TRUE_DEG) ** 2 / math.degrees(math.sqrt(r.cov[1, 1])) ** 2)
        even = _EvenlyShared(PARAMS, (1.0, 0.0, 0.05, math.radians(3.0)))
        even.blocks.extend(bl)
        e = even.fit(bl[-1].t_s, 1.0, 0.0)
        zk_even.append((e.k - K_TRUE) ** 2 / e.cov[0, 0])
    lo, hi = chi2.ppf(0.005, n) / n, chi2.ppf(0.995, n) / n
    # THEN on gentle course changes the log scale is read from the legs' difference across the water track (the
    # compass's axis): with the compass's model width its sigma is too wide (mean z^2 below the chi-square band
    # of 80 draws, 99 %: scipy)
    assert np.mean(zk_even) < lo, np.mean(zk_even)
    # ... and with the compass's scale read from the residuals both sigmas are honest, in the band
    assert lo < np.mean(zk) < hi, np.mean(zk)
    assert lo < np.mean(zd) < hi, np.mean(zd)
