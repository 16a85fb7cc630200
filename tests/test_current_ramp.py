"""The mean-shift test that sees a slow ramp of the current (``control._adapt``,
``estimators.fusion.WindowedMeanShift``).

Checked here: the test's statistic against numpy's quadratic form over its window and, with no bias, against
the chi-square distribution with 2 degrees of freedom it is held to (Willsky & Jones 1976, the GLR for a
constant bias); on a simulated leg, no alarm over steady water and the process noise raised within minutes of
the start of a slow ramp, which the NIS's CUSUM alone did not raise within the hour.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from estimators.current import CurrentEstimator, CurrentParams
from estimators.fusion import WindowedMeanShift
from estimators.runner import run
from estimators.samples import Fix
from tests.synth import synth_passage


def test_the_statistic_is_the_windows_summed_innovation_against_its_summed_covariance():
    rng = np.random.default_rng(11)
    test = WindowedMeanShift(30.0, 0.999)
    steps = []
    for i in range(200):
        t = 1000.0 + 1.3 * i
        y = rng.normal(0.0, 0.2, 2)
        a, d = rng.uniform(0.01, 0.1, 2)
        b = 0.5 * math.sqrt(a * d) * rng.uniform(-1.0, 1.0)
        steps.append((t, y, np.array([[a, b], [b, d]])))
        test.add(t, float(y[0]), float(y[1]), a, b, d)
        # THEN at each step the statistic is (sum y)' (sum S)^-1 (sum y) over the steps of the last 30 s
        window = [(yi, Si) for ti, yi, Si in steps if ti > t - 30.0]
        Y = sum(yi for yi, _ in window)
        S = sum(Si for _, Si in window)
        assert test.statistic == pytest.approx(float(Y @ np.linalg.solve(S, Y)), rel=1e-9)


def test_without_a_bias_the_statistic_is_chi_square_with_two_degrees_of_freedom():
    # GIVEN white Gaussian innovations of a known covariance
    rng = np.random.default_rng(5)
    S = np.array([[0.04, 0.01], [0.01, 0.02]])
    L = np.linalg.cholesky(S)
    test = WindowedMeanShift(60.0, 0.999)
    stats = []
    for i in range(60 * 500):
        y = L @ rng.standard_normal(2)
        test.add(float(i), float(y[0]), float(y[1]), S[0, 0], S[0, 1], S[1, 1])
        if i % 60 == 59:
            stats.append(test.statistic)                    # one per window: independent
    # THEN over 500 windows its mean is chi-square's 2 (its sd 2: a standard error of 0.09, held at 4)
    assert abs(float(np.mean(stats)) - 2.0) < 0.36
    # ... the alarm threshold is chi2_2's 0.999 quantile, -2 ln(0.001) = 13.82 (exponential, mean 2: from memory)
    assert test.threshold == pytest.approx(-2.0 * math.log(0.001))
    # ... and it is passed about once in 1000 windows (none here is as likely as two or more: at most 3)
    assert sum(s > test.threshold for s in stats) <= 3


def ramp_run(seed: int, slope_kn_per_h: float) -> float | None:
    """A 2-h leg on one heading, the water steady for the first hour, then rising at ``slope_kn_per_h`` east: the
    seconds from the ramp's start to the first fix with the process noise raised (None: never). Over the ten
    minutes before the ramp, the steady water, no fix may have it raised."""
    syn = synth_passage(seed, 7200, [(0.0, 60.0)], current_slope_kn_per_h=(slope_kn_per_h, 0.0), slope_from_s=3600)
    est = CurrentEstimator(CurrentParams())
    raised = None
    for s, _ in run(est, syn.samples, tick=False):
        if not isinstance(s, Fix) or est.ekf is None:
            continue
        since_ramp = s.t_s - syn.t[0] - 3600.0
        if -600.0 <= since_ramp < 0.0:
            assert est.q_inflation == 1.0, since_ramp      # steady water: no alarm
        if since_ramp > 0.0 and raised is None and est.q_inflation > 1.0:
            raised = since_ramp
    return raised


@pytest.mark.parametrize("seed", [1, 2])
def test_a_slow_ramp_raises_the_process_noise_within_minutes(seed):
    # GIVEN a steady leg whose current, steady for an hour, then rises at 6 kn/h (0.1 kn a minute: the filter's
    # lag behind it, about its time constant times the slope, a tenth of a knot, well inside one fix's noise)
    raised = ramp_run(seed, 6.0)
    # THEN the process noise is raised within five minutes of the ramp's start (the NIS's CUSUM alone, measured
    # when the test was added, did not raise it within the hour: each fix's NIS a tenth above its mean, far
    # below the reference 2)
    assert raised is not None and raised <= 300.0, raised
