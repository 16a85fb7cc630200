"""The sample history's selections by time, against the plain selection they stand for."""

from __future__ import annotations

import random

import pytest

from estimators.history import SampleHistory
from estimators.samples import Heading


@pytest.mark.parametrize("seed", range(5))
def test_since_is_the_interval_after_the_last_sample_before_it(seed):
    # GIVEN a compass at about 10 Hz with jittered times and gaps of up to 3 s (invented)
    rng = random.Random(seed)
    history = SampleHistory(keep_s=600.0)
    t = 1_780_000_000.0
    while t < 1_780_000_000.0 + 120.0:
        history.add(Heading(t, rng.uniform(0.0, 360.0)))
        t += rng.choice((0.1, 0.1, 0.1, 0.07, 0.13, 0.5, 1.9, 3.0))
    for _ in range(300):
        t0 = 1_780_000_000.0 + rng.uniform(-5.0, 125.0)
        t1 = t0 + rng.choice((0.0, 0.05, 1.0, 2.0, 4.5))
        age = rng.choice((0.5, 2.0, 10.0))
        # THEN since() is the plain selection: between(t0 - age, t1), of which the samples at or before t0 only
        # the last (the one current at t0), in time order
        plain = history.between(Heading, t0 - age, t1)
        before = [h for h in plain if h.t_s <= t0]
        expected = before[-1:] + [h for h in plain if h.t_s > t0]
        assert history.since(Heading, t0, t1, age) == expected


def test_since_without_samples_of_the_kind():
    assert SampleHistory().since(Heading, 0.0, 10.0, 2.0) == []
