"""NEES/NIS consistency of the current filter over seeded Monte-Carlo runs.

The check is Bar-Shalom, Li & Kirubarajan, "Estimation with Applications to
Tracking and Navigation" (2001), sect. 5.4: with M runs, M times the run-averaged
normalised estimation error squared at a time step is chi-square with M*n
degrees of freedom (n = 4 states); its two-sided 95 % interval bounds the
average. Likewise the normalised innovation squared with n_z = 2.
The truth follows the filter's own model (current random walk at the
configured rate; log scale and offset drawn from the prior), so a consistent
filter must fall inside the bounds.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.stats import chi2

from estimators.current import ID, IE, IK, IN, CurrentEstimator, CurrentParams
from estimators.runner import run
from estimators.samples import Fix
from tests.synth import synth_passage, tacking_legs

M, DUR = 8, 900


def test_nees_and_nis_within_chi_square_bounds():
    # GIVEN M seeded tacking runs whose truth follows the filter's model: white noise, so the
    # filter is told its noise has no correlated part
    p = CurrentParams(noise_correlation_s=0.5, heading_correlation_s=0.5, log_correlated_sigma_kn=0.0,
                      heading_correlated_sigma_deg=0.0)
    nees = np.zeros((M, DUR))
    nis = np.full((M, DUR), np.nan)
    for m in range(M):
        rng = np.random.default_rng(100 + m)
        k = 1.0 + p.initial_stw_scale_sigma * rng.standard_normal()
        off = p.initial_heading_offset_sigma_deg * rng.standard_normal()
        syn = synth_passage(200 + m, DUR, tacking_legs(DUR, 240), k=k, offset_deg=off,
                            walk_kn_per_sqrt_h=p.current_walk_kn_per_sqrt_h)
        est = CurrentEstimator(p)
        i = 0
        # WHEN the filter runs, record its normalised errors against the truth
        for s, _ in run(est, syn.samples, tick=False):
            if not isinstance(s, Fix):
                continue
            if est.ekf is not None:
                x, P = est.ekf.x[:, 0], est.ekf.P
                e = np.array([x[IE] - syn.current[i][0], x[IN] - syn.current[i][1], x[IK] - k, x[ID] - math.radians(off)])
                nees[m, i] = e @ np.linalg.solve(P, e)
                if est.last_report is not None and est.last_report.t_s == s.t_s:
                    nis[m, i] = est.last_report.nis
            i += 1
    # THEN the run-averaged NEES lies in the 95 % chi-square band (4 states) at most time steps
    avg = nees[:, 10:].mean(axis=0)
    lo, hi = chi2.ppf(0.025, 4 * M) / M, chi2.ppf(0.975, 4 * M) / M
    inside = np.mean((avg > lo) & (avg < hi))
    assert inside >= 0.85, f"NEES inside the band at {inside:.0%} of steps (lo {lo:.2f}, hi {hi:.2f})"
    assert lo < avg.mean() < hi
    # ... and the NIS (2 measurements) averages to its dimension within the band of all epochs
    all_nis = nis[:, 60:][~np.isnan(nis[:, 60:])]  # after the first minute (the start's linearisation)
    n = all_nis.size
    # both bounds are the chi-square ones (99.9 %, two-sided): neither over- nor under-confident
    lo_nis, hi_nis = chi2.ppf(0.0005, 2 * n) / n, chi2.ppf(0.9995, 2 * n) / n
    assert lo_nis < all_nis.mean() < hi_nis, f"mean NIS {all_nis.mean():.3f} outside ({lo_nis:.3f}, {hi_nis:.3f})"
