"""The current benchmark's ``--set``: a trial parameter is filled and checked as the config file's would be;
``--calibration-from-prior``: the true calibration drawn per seed from the estimator's prior reaches the
simulated sensors (coverage over the prior: Bar-Shalom, Li & Kirubarajan 2001, ch. 5, from memory); coverage is
judged against its band by the seeds' scatter."""

from __future__ import annotations

import dataclasses
import math
from dataclasses import replace

import numpy as np
import pytest
from scipy.stats import chi2

from daemon.core.config import ConfigError
from estimators.current import CurrentParams
from estimators.samples import Heading, WaterSpeed
from tools.bench.current import Pooled, coverage_row, prior_draw, trial_params, true_calibration, with_true_calibration
from tools.simulator import simulate
from tools.simulator.scenarios import jet_crossing

N_DRAWS = 400


def test_a_trial_changes_only_the_keys_it_names():
    # GIVEN two keys set as they would be written in the config file (TOML values)
    p = trial_params(["current_walk_kn_per_sqrt_h=0.1", "rejections_before_reset = 5"])
    # THEN those two change, with the config's types, and every other key keeps its default
    assert p.current_walk_kn_per_sqrt_h == 0.1 and p.rejections_before_reset == 5
    changed = {f.name for f in dataclasses.fields(p) if getattr(p, f.name) != getattr(CurrentParams(), f.name)}
    assert changed == {"current_walk_kn_per_sqrt_h", "rejections_before_reset"}


def test_the_prior_draw_is_reproducible_and_follows_the_estimators_prior():
    # GIVEN the estimator's prior (a fresh estimator's calibration: k 1 ± initial_stw_scale_sigma,
    # offset 0 ± initial_heading_offset_sigma_deg) and a draw per seed
    p = CurrentParams()
    draws = np.array([prior_draw(p, seed) for seed in range(1, N_DRAWS + 1)])
    # THEN a seed gives the same draw again, and two seeds different ones
    assert prior_draw(p, 5) == tuple(draws[4]) and tuple(draws[4]) != tuple(draws[5])
    # ... and over many seeds the draws are the prior's normal: sample mean within 3.3 standard
    # errors, sample variance within the chi-square 99.9 % bounds (n - 1 degrees of freedom)
    for column, mean, sigma in ((0, 1.0, p.initial_stw_scale_sigma), (1, 0.0, p.initial_heading_offset_sigma_deg)):
        x = draws[:, column]
        assert abs(x.mean() - mean) < 3.3 * sigma / math.sqrt(N_DRAWS)
        lo, hi = chi2.ppf([0.0005, 0.9995], N_DRAWS - 1) / (N_DRAWS - 1)
        assert lo < x.var(ddof=1) / sigma ** 2 < hi


def test_the_drawn_calibration_reaches_the_sensor_model():
    # GIVEN half an hour of the jet crossing (whose own log and compass are perfect) with a calibration
    # drawn from the prior (seed 7: k about 0.968, offset about +4.4 deg)
    k, d = prior_draw(CurrentParams(), 7)
    sc = with_true_calibration(replace(jet_crossing(), duration_s=1800.0), k, d)
    sim = simulate(sc, 7)
    # THEN the bench reads the same calibration back as the truth it compares with
    assert true_calibration(sc.sensors) == pytest.approx((k, d))
    # ... and the simulated log reads the true speed along the keel / k, the compass the true heading
    # - d (the sensor model's definition, tools/simulator/sensors.py; the noise, surge and yaw average out)
    logs = sim.samples_of(WaterSpeed)
    t = np.array([s.t_s for s in logs])
    along_keel = sim.truth_series("stw_true_kn", t) * np.cos(np.radians(sim.truth_series("leeway_deg", t)))
    assert np.mean([s.speed_kn for s in logs]) / along_keel.mean() == pytest.approx(1.0 / k, rel=0.005)
    headings = sim.samples_of(Heading)
    t = np.array([s.t_s for s in headings])
    off = (np.array([s.true_deg for s in headings]) - sim.truth_series("heading_true_deg", t) + 180.0) % 360.0 - 180.0
    assert off.mean() == pytest.approx(-d, abs=0.2)


@pytest.mark.parametrize("setting", ["nosuch_key=1", "current_walk_kn_per_sqrt_h=-1", "current_walk_kn_per_sqrt_h",
                                     "current_walk_kn_per_sqrt_h=fast", "rejections_before_reset=2.5"])
def test_a_trial_the_config_would_refuse_is_refused(setting):
    # an unknown key, a value out of its range, no value, not a number, a fraction for a count
    with pytest.raises(ConfigError):
        trial_params([setting])


@pytest.mark.parametrize("shares, verdict", [
    ([0.95, 0.94, 0.96, 0.95], "in the band"),
    ([0.99, 0.995, 0.99, 0.985], "above the band"),
    ([0.90, 0.91, 0.90, 0.92], "below the band"),
    ([1.0, 0.96, 0.99, 0.97], "within 2 standard errors of the band"),
])
def test_coverage_is_judged_against_its_band_by_the_seeds_scatter(shares, verdict):
    # GIVEN each run's share of fixes within 2 sigma
    pooled = Pooled(seed_coverage=shares)
    # THEN the row gives their mean and its standard error (sample sd / sqrt(n), numpy's) and the verdict
    mean, se = np.mean(shares), np.std(shares, ddof=1) / math.sqrt(len(shares))
    row = coverage_row("s", pooled)
    assert f"{mean:.3f} ± {se:.3f}" in row
    assert row.endswith(f"| {verdict} |")
