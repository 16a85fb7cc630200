"""The calibration's batch fit on its own: the model error it reads from the data, not from the params.

Blocks are built directly (the mean ground velocity and water-velocity reading of a minute's steady
sailing), so the truth of the current, the log scale and the compass offset is known exactly.
"""

from __future__ import annotations

import math

import numpy as np

from estimators.current import CurrentParams
from estimators.current.calibration import Block, CalibrationFit, model_error_step, turned

K_TRUE, D_TRUE_DEG, STW_KN = 1.05, 2.0, 6.0
HOURS, BLOCK_S, LEG_S = 3.0, 60.0, 1800.0


def blocks(seed: int, current, noise_kn: float) -> list[Block]:
    """Three hours of one-minute blocks on legs of 0 and 90 deg alternating every half hour."""
    rng = np.random.default_rng(seed)
    out = []
    for i in range(int(HOURS * 3600 / BLOCK_S)):
        t = (i + 0.5) * BLOCK_S
        course = 0.0 if int(t // LEG_S) % 2 == 0 else 90.0
        water = (STW_KN * math.sin(math.radians(course)), STW_KN * math.cos(math.radians(course)))
        m = turned(water, -math.radians(D_TRUE_DEG))                       # the compass reads d low
        m = (m[0] / K_TRUE, m[1] / K_TRUE)                                  # the log reads 1/k of the truth
        ce, cn = current(t / 3600.0)
        g = (ce + water[0] + rng.normal(0.0, noise_kn), cn + water[1] + rng.normal(0.0, noise_kn))
        out.append(Block(t, g, m, STW_KN / K_TRUE, 60))
    return out


def fitted(bl: list[Block]):
    fit = CalibrationFit(CurrentParams(), (1.0, 0.0, 0.05, math.radians(3.0)))
    fit.blocks.extend(bl)
    return fit.fit(bl[-1].t_s, 1.0, 0.0)


def test_paule_mandel_recovers_a_known_excess_variance():
    # GIVEN residuals whose variance is each one's own v_i plus 0.04 shared by all (seeded, 20000 of them)
    rng = np.random.default_rng(5)
    v = rng.uniform(0.005, 0.05, 20000)
    res = rng.normal(0.0, np.sqrt(v + 0.04))
    # WHEN the steps are iterated to convergence (residuals held)
    s = 0.0
    for _ in range(30):
        s += model_error_step(res, v + s, len(res))
    # THEN the shared variance is found (Paule & Mandel 1982: chi-square = dof, a moment estimator)
    assert abs(s - 0.04) < 0.004
    # and residuals with no excess earn none
    assert model_error_step(rng.normal(0.0, np.sqrt(v)) * 0.9, v, len(v)) == 0.0


def test_steady_water_earns_no_model_error_and_a_turning_stream_does():
    steady = lambda h: (0.6, -0.8)                                                     # 1 kn, steady
    turning = lambda h: (2.0 * math.sin(math.radians(30.0 * h)), 2.0 * math.cos(math.radians(30.0 * h)))
    noise = 0.05                                                                      # a block mean's, per axis
    for seed in range(3):
        # GIVEN the same legs over steady water and over a 2-kn stream turning 90 deg in the three hours
        # WHEN the fit runs over each
        calm, tide = fitted(blocks(seed, steady, noise)), fitted(blocks(seed, turning, noise))
        # THEN steady water leaves the model error a small part of the noise; the stream earns one
        assert calm.model_error_kn < 0.3 * noise, calm.model_error_kn
        assert tide.model_error_kn > calm.model_error_kn + 0.02, (tide.model_error_kn, calm.model_error_kn)
        # and both calibrations lie within 2 of their sigmas of the truth
        for r in (calm, tide):
            assert abs(r.k - K_TRUE) <= 2.0 * math.sqrt(r.cov[0, 0]), (r.k, math.sqrt(r.cov[0, 0]))
            assert abs(math.degrees(r.d_rad) - D_TRUE_DEG) <= 2.0 * math.degrees(math.sqrt(r.cov[1, 1]))
