"""The filter's own walk (``CurrentEstimator.filter_rate``): the water's, as the published sigma reads it, down
to ``current_walk_floor_kn_per_sqrt_h``; the configured walk where the water's slope is evident; the change
detectors' inflation on top.

Checked here: on steady water the filter's walk falls to the floor and its error over the last hour is smaller
than with the configured walk (a random walk's steady-state Kalman variance grows with its process noise:
P = (q + sqrt(q^2 + 4 q r)) / 2 for a scalar walk of q per step under noise r, from memory); a floor at or above
the configured walk leaves the configured one; on a steadily rising current the filter keeps the configured
walk; and a step of the current is caught as fast as with the configured walk.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from estimators.current import CurrentEstimator, CurrentParams
from estimators.current.params import S_PER_H
from estimators.runner import run
from estimators.samples import Fix
from tests.synth import synth_passage


def walk_kn_per_sqrt_h(est: CurrentEstimator) -> float:
    return math.sqrt(est.filter_rate() * S_PER_H)


def leg(params: CurrentParams, seed: int, **kw) -> tuple[CurrentEstimator, list[float], list[float]]:
    """A 2-h leg on one heading: the estimator at its end, each fix's time from the start and vector error, kn."""
    syn = synth_passage(seed, 7200, [(0.0, 60.0)], **kw)
    truth = dict(zip(syn.t, syn.current))
    est = CurrentEstimator(params)
    times, errors = [], []
    for s, _ in run(est, syn.samples, tick=False):
        if isinstance(s, Fix) and est.ekf is not None:
            st = est.state()
            te, tn = truth[s.t_s]
            times.append(s.t_s - syn.t[0])
            errors.append(math.hypot(st["east_kn"] - te, st["north_kn"] - tn))
    return est, times, errors


@pytest.mark.parametrize("seed", [3, 4])
def test_on_steady_water_the_walk_falls_to_the_floor_and_the_error_with_it(seed):
    # GIVEN a steady current on one heading, once with the floor (default) and once with it at the configured walk
    floor_p = CurrentParams()
    off_p = CurrentParams(current_walk_floor_kn_per_sqrt_h=floor_p.current_walk_kn_per_sqrt_h)
    with_floor, t, err_floor = leg(floor_p, seed, k=1.0, offset_deg=0.0)
    without, _, err_off = leg(off_p, seed, k=1.0, offset_deg=0.0)
    # THEN the water reads quieter than the floor, so the filter walks at the floor ...
    assert math.sqrt(with_floor.published_rate() * S_PER_H) < floor_p.current_walk_floor_kn_per_sqrt_h
    assert walk_kn_per_sqrt_h(with_floor) == pytest.approx(floor_p.current_walk_floor_kn_per_sqrt_h)
    # ... the floor at the configured walk leaves the configured one (the filter as before the floor) ...
    assert walk_kn_per_sqrt_h(without) == pytest.approx(off_p.current_walk_kn_per_sqrt_h)
    # ... and over the last hour the filter with the floor errs less (the same samples: a paired comparison)
    last_hour = np.array(t) >= 3600.0
    assert np.mean(np.square(err_floor)[last_hour]) < np.mean(np.square(err_off)[last_hour])


def test_a_steadily_rising_current_keeps_the_configured_walk():
    # GIVEN a current rising at 1 kn/h east over the whole leg (the water's slope evident to the trend's test)
    est, _, _ = leg(CurrentParams(), 5, current_slope_kn_per_h=(1.0, 0.0))
    # THEN the filter walks at the configured walk, not the floor
    assert est.water_walk.trending
    assert walk_kn_per_sqrt_h(est) == pytest.approx(est.params.current_walk_kn_per_sqrt_h)


@pytest.mark.parametrize("seed", [6, 7])
def test_a_step_is_caught_as_fast_as_with_the_configured_walk(seed):
    # GIVEN steady water for 90 minutes, then a step of the current by 1 kn east (a band's edge)
    step = ((5400, (1.8, -0.5)),)
    params = CurrentParams()
    _, t, err_floor = leg(params, seed, k=1.0, offset_deg=0.0, current_steps=step)
    _, _, err_off = leg(CurrentParams(current_walk_floor_kn_per_sqrt_h=params.current_walk_kn_per_sqrt_h), seed,
                        k=1.0, offset_deg=0.0, current_steps=step)

    def caught_s(errors: list[float]) -> float:
        """Seconds from the step to the first fix after which the error stays below 0.2 kn."""
        after = [(ti, e) for ti, e in zip(t, errors) if ti >= 5400.0]
        last_bad = max((ti for ti, e in after if e >= 0.2), default=5400.0)
        return last_bad - 5400.0

    # THEN the change detectors raise the walk as before the floor: caught within 5 minutes, within 10 s of the
    # configured walk's time (measured when the test was written: 128 and 17 s, the same with either walk)
    assert caught_s(err_floor) <= 300.0
    assert caught_s(err_floor) <= caught_s(err_off) + 10.0
