"""The sea-state estimator behind the current estimator on the simulator's wind-over-current reaches.

Truth is the simulator's (tools.simulator): its true wind over water and its current. The benchmark
(tools/bench/sea_state.py) runs many seeds; here one seed each checks the issue's targets hold.
"""

from __future__ import annotations

import statistics

import pytest

from tools.bench.sea_state import run_case


@pytest.fixture(scope="module")
def against():
    return run_case("wind_against_current", seed=3)


def test_true_wind_over_water_on_the_reach(against):
    # targets (issue 10): true wind over water within 3 deg and 0.5 kn (median) on the reach. The speed
    # target is judged by the benchmark over many seeds: the simulator's gusts (15 %, 8-s time scale) are a
    # sensor error against its gust-free truth, and leave a 10-min mean about 0.15 x 24 kn x sqrt(2 x 8 / 600)
    # = 0.6 kn (1 sigma) off in each of the dozen independent windows of one run, so one seed's median
    # wanders by more than the target; here the bound is twice that floor's median (0.4 kn)
    assert statistics.median(against["dir"]) < 3.0
    assert statistics.median(against["spd"]) < 1.0
    # and better than the instrument's own true wind, which takes the log and compass at face value
    assert statistics.median(against["dir"]) < statistics.median(against["inst_dir"])


def test_opposing_current_and_the_caution_in_the_band(against):
    # targets: the opposing current within 0.3 kn; the caution within 5 minutes of entering the band
    assert statistics.median(against["opp"]) < 0.3
    assert against["caution_after_entry_s"] is not None
    assert 0.0 <= against["caution_after_entry_s"] <= 300.0


def test_no_caution_where_wind_and_current_run_together():
    assert run_case("wind_with_current", seed=3)["cautions"] == 0
