"""The current estimator over the demo passage, against the simulator's truth.

The passage is made sample by sample with ``tools.simulator.simulate`` from
``scenarios.demo_passage()`` and the seed that made
``recorded_runs/tern-of-haldane.nmea.gz`` (the simulator's ``DEMO_SEED``, the
default of the regenerating command in recorded_runs/README.md): the same
instruments, faster than replaying the NMEA. The scenario's sensor errors are
the outside check values: the log reads 5 % low (true STW = log / 0.95) and
the compass 2.5 deg high (true = compass - 2.5), one 95 deg course change at
05:50 and back at 06:30, the warm band 07:18 to 09:12 with a 4-kn current.

"Within n sigma" for a 2-D current error is the chi-square ellipse of its
2 x 2 covariance (2 degrees of freedom; 9.21 is the 99 % point, about a
3-sigma ellipse: chi-square table, e.g. Bar-Shalom, Li & Kirubarajan 2001,
sect. 1.5).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.stats import chi2

from tools.simulator import scenarios, simulate
from tools.simulator.__main__ import DEMO_SEED
from estimators.base import Publication
from estimators.current import IE, IN, CurrentEstimator, CurrentParams
from estimators.runner import run
from estimators.samples import Fix

IN_BAND = scenarios.utc(2026, 5, 4, 8, 30)        # mid-band, before the 08:40 GNSS dropout
COURSE_CHANGE = scenarios.utc(2026, 5, 4, 5, 50)
ELLIPSE_99 = chi2.ppf(0.99, 2)                     # 9.21


@pytest.fixture(scope="module")
def demo():
    sim = simulate(scenarios.demo_passage(), DEMO_SEED)
    est = CurrentEstimator(CurrentParams())
    pubs, snaps = [], {}
    for s, outs in run(est, sim.samples):
        pubs.extend(o for o in outs if isinstance(o, Publication) and o.topic == "current")
        if isinstance(s, Fix) and s.t_s >= IN_BAND and "band" not in snaps:
            snaps["band"] = (s.t_s, est.ekf.x[:2, 0].copy(), est.ekf.P[:2, :2].copy(), est.ekf.P_pub[:2, :2].copy())
    snaps["end"] = (est.t_filter, est.ekf.x[:2, 0].copy(), est.ekf.P[:2, :2].copy(), est.ekf.P_pub[:2, :2].copy())
    return sim, est, pubs, snaps


def normalised_error(sim, t_s: float, c: np.ndarray, P: np.ndarray) -> tuple[float, float]:
    """(vector error kn, e' P^-1 e) of the current (east, north) against the truth at t_s."""
    tr = sim.truth_at(t_s)
    e = c - np.array([tr.current_east_kn, tr.current_north_kn])
    return float(np.hypot(*e)), float(e @ np.linalg.solve(P, e))


def test_demo_current_in_the_band_and_at_the_end_is_within_its_sigma(demo):
    # GIVEN the demo passage (log 5 % low, compass 2.5 deg high) run through the estimator
    sim, est, pubs, snaps = demo
    # THEN mid-band (4-kn current) the vector error is below 0.3 kn and inside the 99 % ellipse
    # (the filter's own covariance and the published one, narrower where the water walks slower)
    t_band, c_band, P_band, P_pub_band = snaps["band"]
    assert sim.truth_at(t_band).drift_kn > 3.5                     # really in the band
    for P in (P_band, P_pub_band):
        err, nees = normalised_error(sim, t_band, c_band, P)
        assert err < 0.3 and nees < ELLIPSE_99, (err, nees)
    # ... and the last published current (east_kn, north_kn) is inside the ellipse of the final covariance
    last = pubs[-1]
    t_end, _, P_end, P_pub_end = snaps["end"]
    for P in (P_end, P_pub_end):
        err, nees = normalised_error(sim, t_end, np.array([last.payload["east_kn"], last.payload["north_kn"]]), P)
        assert err < 0.3 and nees < ELLIPSE_99, (err, nees)


def test_demo_says_calibrated_only_with_an_honest_calibration(demo):
    sim, est, pubs, _ = demo
    spec = sim.scenario.sensors
    true_scale, true_offset = 1.0 / spec.stw_scale, -spec.heading_offset_deg     # 1/0.95 and -2.5 deg
    calibrated = [p for p in pubs if p.payload["calibration"]["status"] == "calibrated"]
    # THEN it is not calibrated on the first, steady leg, and it is by the end (after the course change)
    assert calibrated and calibrated[0].t_s > COURSE_CHANGE
    assert pubs[-1].payload["calibration"]["status"] == "calibrated"
    # ... and every "calibrated" payload has both corrections within 2 sigma of the truth
    z_scale = [abs(p.payload["stw_scale"] - true_scale) / p.payload["stw_scale_sigma"] for p in calibrated]
    z_offset = [abs(p.payload["heading_offset_deg"] - true_offset) / p.payload["heading_offset_sigma_deg"]
                for p in calibrated]
    assert max(z_scale) <= 2.0 and max(z_offset) <= 2.0, (max(z_scale), max(z_offset))
    # ... with the turn predicted through rather than fused (two turns: a few tens of epochs)
    assert 0 < est.health.turning < 200
