"""The plain current triangle against a hand-worked vector example."""

from __future__ import annotations

import math

import pytest

from estimators.angles import from_east_north
from estimators.samples import Fix, Heading, WaterSpeed
from estimators.triangle import PlainTriangle, triangle


def test_hand_worked_triangle():
    # GIVEN heading 000 deg at 6.0 kn through the water, COG 030 deg at SOG 6.5 kn.
    # By hand (east, north), u(a) = (sin a, cos a):
    #   ground g = 6.5 (sin 30, cos 30) = 6.5 (0.5, 0.866025) = (3.25000, 5.62917)
    #   water  w = 6.0 (sin 0, cos 0)   = (0, 6.00000)
    #   current c = g - w = (3.25000, -0.37083)
    #   drift = sqrt(3.25^2 + 0.37083^2) = sqrt(10.5625 + 0.13752) = sqrt(10.70002) = 3.2711 kn
    #   set = atan2(3.25, -0.37083) = 180 - atan(3.25 / 0.37083) = 180 - atan(8.7641) = 180 - 83.49 = 96.51 deg
    # WHEN the triangle is computed
    e, n = triangle(6.5, 30.0, 6.0, 0.0)
    drift, set_deg = from_east_north(e, n)
    # THEN it matches the hand arithmetic
    assert e == pytest.approx(3.25, abs=1e-5)
    assert n == pytest.approx(-0.37083, abs=1e-5)
    assert drift == pytest.approx(3.2711, abs=1e-4)
    assert set_deg == pytest.approx(96.51, abs=0.01)


def test_smoothed_triangle_steps_like_a_first_order_filter():
    # GIVEN the 60-s EMA, a current of (0, 0) for 10 min, then the GNSS shows 1 kn more east
    tri = PlainTriangle(smoothing_s=60.0)
    t = 0.0
    for i in range(600):
        t = float(i)
        tri.step(Heading(t - 0.5, 0.0))
        tri.step(WaterSpeed(t - 0.5, 6.0))
        tri.step(Fix(t, 0.0, 0.0, 6.0, 0.0))
    for i in range(600, 660):
        t = float(i)
        tri.step(Heading(t - 0.5, 0.0))
        tri.step(WaterSpeed(t - 0.5, 6.0))
        sog, cog = from_east_north(1.0, 6.0)
        tri.step(Fix(t, 0.0, 0.0, sog, cog))
    # WHEN 60 s (one time constant) have passed since the step
    e, n = tri.value()
    # THEN it has covered 1 - e^-1 = 63.2 % of it (first-order response)
    assert e == pytest.approx(1.0 - math.exp(-1.0), abs=0.01)
    assert n == pytest.approx(0.0, abs=1e-6)


def test_true_calibration_removes_the_log_and_compass_error():
    # GIVEN a log reading 6 % low and a compass reading 3 deg high, no current
    true_stw, true_hdg = 6.0, 40.0
    log, compass = true_stw * 0.94, true_hdg + 3.0
    raw = triangle(true_stw, true_hdg, log, compass)
    fixed = triangle(true_stw, true_hdg, log / 0.94, compass - 3.0)
    # THEN uncorrected there is a false current of about 0.5 kn, corrected none
    assert math.hypot(*raw) > 0.4
    assert math.hypot(*fixed) == pytest.approx(0.0, abs=1e-9)


def test_bad_smoothing_raises():
    with pytest.raises(ValueError):
        PlainTriangle(smoothing_s=-1.0)
