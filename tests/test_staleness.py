"""sensor_stale: feeds that appear, fall silent and return, each against its own interval."""

from __future__ import annotations

import random
from dataclasses import replace

from estimators.base import CAUTION
from estimators.params import check
from estimators.runner import RunContext
from estimators.samples import KIND_NAMES, Fix, Heading, Pressure, WaterSpeed
from estimators.staleness import StalenessParams, StalenessWatch

T0 = 1_780_000_000.0


def feed(watch: StalenessWatch, ctx: RunContext, t0: float, t1: float, make, rate_hz: float = 1.0, jitter: float = 0.0,
         rng: random.Random | None = None) -> None:
    n = int(round((t1 - t0) * rate_hz))
    for i in range(n):
        t = t0 + i / rate_hz + (rng.uniform(0, jitter) if rng else 0.0)
        watch.step(make(T0 + t), ctx)


def ticks(watch: StalenessWatch, ctx: RunContext, t0: int, t1: int) -> list:
    out = []
    for t in range(t0, t1 + 1):
        out += [(t, c) for c in watch.tick(T0 + t, ctx)]
    return out


def test_accepts_every_sample_kind_and_defaults_check():
    assert set(StalenessWatch.accepts) == set(KIND_NAMES)
    p = StalenessParams()
    assert check(p) == []
    assert (p.heading_s, p.fix_s, p.water_speed_s, p.pressure_s, p.sea_temperature_s, p.depth_s) == (5, 5, 10, 60, 60, 30)


def test_fresh_feeds_raise_nothing():
    # GIVEN heading at 10 Hz and fixes at 1 Hz with seeded jitter, for 60 s
    rng = random.Random(11)
    watch, ctx = StalenessWatch(), RunContext()
    feed(watch, ctx, 0, 60, lambda t: Heading(t, 90.0), 10.0, 0.05, rng)
    feed(watch, ctx, 0, 60, lambda t: Fix(t, 40.0, -30.0), 1.0, 0.3, rng)
    # THEN ticking over that minute gives no condition at all
    assert ticks(watch, ctx, 1, 60) == []


def test_a_vanished_heading_is_reported_after_its_interval_and_clears_when_it_returns():
    # GIVEN heading at 1 Hz for t in [0, 20) (last at 19 s), then silence
    watch, ctx = StalenessWatch(), RunContext()
    feed(watch, ctx, 0, 20, lambda t: Heading(t, 90.0))
    out = ticks(watch, ctx, 19, 31)
    # THEN active from the first tick more than 5 s after the last heading (25 s is not, 25 > 24 is)
    assert out[0][0] == 25 and all(c.active for _, c in out)
    assert len(out) == 31 - 25 + 1  # asserted every tick while stale
    c = out[-1][1]
    assert (c.alert_id, c.priority) == ("sensor_stale", CAUTION)
    assert c.values["feeds"] == ["heading"] and c.values["age_s"] == {"heading": 12.0}
    # AND the text says what is late and by how much (7 s past the 5 s it was due), not "for 5 s (every 5 s)"
    assert c.text == ("Heading late by 7 s (none for 12 s; expected at least every 5 s): "
                      "check the compass feed and its wiring.")
    # WHEN the heading returns
    watch.step(Heading(T0 + 31.5, 91.0), ctx)
    back = ticks(watch, ctx, 32, 36)
    # THEN one inactive condition, then nothing while it is fresh (one sample: until 36.5 s)
    assert [(t, c.active) for t, c in back] == [(32, False)]
    # AND the all-clear reports the last figure: the longest silence of the episode
    assert back[0][1].text == "Heading silent up to 12 s; every feed fresh again"
    assert back[0][1].values["longest_s"] == {"heading": 12}
    assert [(t, c.active) for t, c in ticks(watch, ctx, 37, 37)] == [(37, True)]


def test_each_feed_has_its_own_interval_and_never_seen_feeds_are_not_missed():
    # GIVEN heading, water speed and pressure all last seen at 0 s; no fix ever
    watch, ctx = StalenessWatch(), RunContext()
    for s in (Heading(T0, 0.0), WaterSpeed(T0, 5.0), Pressure(T0, 1013.0)):
        watch.step(s, ctx)
    # THEN at 8 s only heading (5 s) is stale; at 20 s water speed (10 s) too; at 61 s pressure (60 s) too
    assert list(watch.stale_kinds(T0 + 8)) == ["heading"]
    assert list(watch.stale_kinds(T0 + 20)) == ["heading", "water_speed"]
    assert list(watch.stale_kinds(T0 + 61)) == ["heading", "water_speed", "pressure"]
    [c] = watch.tick(T0 + 61, ctx)
    assert c.text.count(" late by ") == 3 and "check the barometer" in c.text
    assert c.values["expected_s"] == {"heading": 5.0, "water_speed": 10.0, "pressure": 60.0}


def test_configured_interval_and_forgetting_a_switched_off_feed():
    watch, ctx = StalenessWatch(replace(StalenessParams(), heading_s=2.0, forget_after_s=600.0)), RunContext()
    watch.step(Heading(T0, 0.0), ctx)
    assert [c.active for c in watch.tick(T0 + 3, ctx)] == [True]
    # WHEN silent for longer than forget_after_s THEN taken as switched off: the caution goes
    assert [c.active for c in watch.tick(T0 + 601, ctx)] == [False]
    assert watch.tick(T0 + 602, ctx) == ()


def test_a_late_sample_does_not_make_a_feed_younger():
    watch, ctx = StalenessWatch(), RunContext()
    watch.step(Heading(T0 + 10, 0.0), ctx)
    watch.step(Heading(T0 + 2, 0.0), ctx)
    assert watch.stale_kinds(T0 + 14) == {}
    assert watch.stale_kinds(T0 + 16) == {"heading": 6.0}


def test_a_silent_gnss_is_left_to_gnss_lost_one_failure_one_alert():
    # GIVEN fixes, VTG and heading at 1 Hz, then the GNSS receiver stops (fixes and VTG) at 20 s
    from estimators.samples import GroundVelocity
    watch, ctx = StalenessWatch(), RunContext()
    feed(watch, ctx, 0, 20, lambda t: Fix(t, 40.0, -30.0))
    feed(watch, ctx, 0, 20, lambda t: GroundVelocity(t, 5.0, 90.0))
    feed(watch, ctx, 0, 60, lambda t: Heading(t, 90.0))
    # THEN no sensor_stale at all while the heading is fresh: gnss_lost reports the GNSS
    assert ticks(watch, ctx, 20, 59) == []
    assert set(watch.silent_kinds(T0 + 59)) == {"fix", "ground_velocity"}
    # WHEN VTG alone stops while fixes go on, it is reported: that is not gnss_lost
    watch2 = StalenessWatch()
    feed(watch2, ctx, 0, 60, lambda t: Fix(t, 40.0, -30.0))
    feed(watch2, ctx, 0, 20, lambda t: GroundVelocity(t, 5.0, 90.0))
    assert list(watch2.stale_kinds(T0 + 59.5)) == ["ground_velocity"]
