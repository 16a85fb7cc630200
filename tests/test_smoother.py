"""The RTS smoother: same model as the filter, better along the track."""

from __future__ import annotations

import math

import numpy as np

from estimators.current import CurrentEstimator, CurrentParams
from estimators.runner import run
from estimators.samples import Fix
from estimators.smoother import smooth_current
from tests.synth import synth_passage, tacking_legs


def test_smoothed_error_is_lower_than_filtered():
    # GIVEN a seeded tacking run with a wandering current (the filter's own model)
    p = CurrentParams()
    syn = synth_passage(11, 1500, tacking_legs(1500, 300), walk_kn_per_sqrt_h=1.0)
    truth = dict(zip(syn.t, syn.current))
    # WHEN the live filter runs, and the smoother runs over the same samples
    est = CurrentEstimator(p)
    filtered = {}
    for s, _ in run(est, syn.samples, tick=False):
        if isinstance(s, Fix) and est.ekf is not None:
            st = est.state()
            filtered[s.t_s] = (st["east_kn"], st["north_kn"])
    smoothed = {r.t_s: (r.east_kn, r.north_kn) for r in smooth_current(syn.samples, p)}
    common = sorted(set(filtered) & set(smoothed))
    def rms(est_by_t):
        return math.sqrt(np.mean([(est_by_t[t][0] - truth[t][0]) ** 2 + (est_by_t[t][1] - truth[t][1]) ** 2
                                  for t in common]))
    # THEN both cover the run and the smoothed RMS vector error is clearly lower
    assert len(common) > 1400
    assert rms(smoothed) < 0.8 * rms(filtered)
    # ... and the last smoothed state is the filtered one (no future data after it)
    assert smoothed[common[-1]] == filtered[common[-1]]
