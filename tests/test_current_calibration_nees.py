"""NEES of the calibration states [k, d] over seeded runs with a single course change.

The check is Bar-Shalom, Li & Kirubarajan, "Estimation with Applications to
Tracking and Navigation" (2001), sect. 5.4: with M independent runs, M times
the run-averaged normalised estimation error squared of an n-state estimate at
one time step is chi-square with M*n degrees of freedom, so its average lies
in the two-sided 95 % interval chi2(M*n) / M. Here n = 2: the log scale k and
the heading offset d, the part of the state that the filter reports as a
calibration (stw_scale, heading_offset_deg and their sigmas).

Each run: a steady leg, one 90 deg course change, a second leg. The truth
follows the filter's own model (the current walks at the configured rate; k
and d drawn from the prior), and the sensors are what a sailing boat has:
compass at 2 Hz, log and GNSS at 1 Hz, a 6 deg/s turn that sheds 40 % of the
speed. In such a turn the mean heading of a fix interval lags the fix's course
(a rate x lag error of one sign over the whole turn); a filter that fuses the
turn learns that lag as a log scale and an offset and claims sigmas it has not
earned: its average NEES is several times 2.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.stats import chi2

from estimators.current import ID, IK, CurrentEstimator, CurrentParams
from estimators.runner import run
from estimators.samples import Fix
from tests.synth import T0, synth_passage

M, DUR, TURN = 16, 1200, 600
CHECK_S = (TURN + 120, TURN + 300, DUR)   # 2 and 5 minutes after the course change, and the end


def calibration_nees(m: int, p: CurrentParams) -> tuple[list[float], int]:
    """NEES of [k, d] at CHECK_S for run m, and the epochs held through the turn."""
    rng = np.random.default_rng(300 + m)
    k = 1.0 + p.initial_stw_scale_sigma * rng.standard_normal()
    off = p.initial_heading_offset_sigma_deg * rng.standard_normal()
    a = float(rng.uniform(0.0, 360.0))
    syn = synth_passage(400 + m, DUR, [(0.0, a), (float(TURN), a + 90.0)], k=k, offset_deg=off,
                        walk_kn_per_sqrt_h=p.current_walk_kn_per_sqrt_h, heading_hz=2, turn_rate_deg_s=6.0,
                        turn_speed_loss=0.4)
    est = CurrentEstimator(p)
    out = []
    for s, _ in run(est, syn.samples, tick=False):
        if isinstance(s, Fix) and s.t_s - T0 in CHECK_S:
            x, P = est.ekf.x[:, 0], est.ekf.P
            e = np.array([x[IK] - k, x[ID] - math.radians(off)])
            out.append(float(e @ np.linalg.solve(P[IK:, IK:], e)))            # e' P^-1 e over [k, d]
    return out, est.health.turning


def test_calibration_nees_after_one_course_change_is_chi_square():
    # GIVEN M seeded runs with one 90-deg course change, truth following the filter's model
    p = CurrentParams()
    # WHEN the filter runs over each, record the NEES of [k, d] after the course change
    runs = [calibration_nees(m, p) for m in range(M)]
    nees = np.array([r[0] for r in runs])
    # THEN at every check time the run-averaged NEES lies in the 95 % band of chi2(2M)/M (about 2)
    lo, hi = chi2.ppf(0.025, 2 * M) / M, chi2.ppf(0.975, 2 * M) / M
    avg = nees.mean(axis=0)
    assert nees.shape == (M, len(CHECK_S))
    assert np.all((avg > lo) & (avg < hi)), f"average NEES {avg} outside ({lo:.2f}, {hi:.2f})"
    # ... and the turn itself was predicted through, not fused: a few tens of epochs per run, no more
    held = [r[1] for r in runs]
    assert all(0 < h <= 60 for h in held), held
