"""Pressure tendency: reduction, tide, descriptor, WMO characteristic, alerts.

Synthetic barometer: MSL truth turned into station pressure with the ISO 2533
standard-atmosphere formula (independent of the estimator's hypsometric
reduction), plus sensor noise, gust pulses, quantisation to 0.1 hPa and, where
a test says so, spikes. Seeded RNG throughout.
"""

from __future__ import annotations

import math
import random
import re
from collections.abc import Callable

import numpy as np
import pytest

from estimators.base import Condition
from estimators.params import check
from estimators.pressure import (
    CHARACTERISTIC_WORDS, PressureParams, PressureTendency, characteristic_0200, descriptor, local_solar_hours, ols_slope,
    reduce_to_msl, sanders_gyakum_hpa, solar_tide_hpa,
)
from estimators.samples import AirTemperature, Fix, Pressure
from tests.helpers import station_from_msl

H = 3600.0
T0 = 1_780_000_000.0  # 2026-05-28 20:26:40 UTC
LAT, LON = 45.0, -20.0  # invented open water
HEIGHT_M = 2.0


def sim_tide(t_s: float, lat: float, lon: float, amp: float = 1.16) -> float:
    """A semidiurnal tide written another way: amp cos³φ cos(2π (LST - 9.73 h) / 12 h)."""
    lst = (t_s / 3600.0 + lon / 15.0) % 24.0
    return amp * math.cos(math.radians(lat)) ** 3 * math.cos(2.0 * math.pi * (lst - 9.733) / 12.0)


def barometer(msl: Callable[[float], float], hours: float, *, seed: int = 1, period_s: float = 5.0,
              lat: float = LAT, lon: float = LON, tide: bool = True, gusts: bool = True,
              spikes: tuple[tuple[float, float], ...] = (), params: PressureParams | None = None):
    """Run the estimator; ``msl(s)`` is the weather's MSL at s seconds in. Returns (conditions, pubs, est)."""
    rng = random.Random(seed)
    est = PressureTendency(params or PressureParams(), HEIGHT_M)
    est.step(Fix(T0, lat, lon), None)
    conditions, pubs = [], []
    for k in range(int(hours * H / period_s)):
        s = k * period_s
        t = T0 + s
        p = msl(s) + (sim_tide(t, lat, lon) if tide else 0.0) + rng.gauss(0.0, 0.05)
        if gusts and rng.random() < 0.02:
            p += rng.uniform(-1.5, 1.5)  # a gust or a hatch: a few seconds, a hPa or so
        for at_s, dp in spikes:
            if at_s <= s < at_s + period_s:
                p += dp
        st = round(station_from_msl(p, HEIGHT_M), 1)  # 0.1 hPa quantisation
        for out in est.step(Pressure(t, st), None):
            (conditions if isinstance(out, Condition) else pubs).append(out)
    return conditions, pubs, est


def ramp(start_s: float, rate_hpa_per_h: float, stop_s: float = math.inf, base: float = 1013.0):
    return lambda s: base + rate_hpa_per_h * (min(max(s, start_s), stop_s) - start_s) / H


def first_raised(conditions, alert_id, priority=None):
    for c in conditions:
        if c.alert_id == alert_id and c.active and (priority is None or c.priority == priority):
            return c
    return None


# ------------------------------------------------------------------ pure helpers


def test_defaults_pass_their_own_check():
    assert check(PressureParams()) == []


def test_msl_reduction_against_the_integrated_hydrostatic_equation():
    # GIVEN 1000.0 hPa read 10 m up in 15 °C air
    p, h, t_c = 1000.0, 10.0, 15.0
    # WHEN the hydrostatic equation dp/dz = -p g / (R_d T(z)) (ideal gas, dry air) is integrated
    # from the sensor down to the sea with RK4, T rising at the ICAO lapse 6.5 K/km below the sensor
    g, r_d, lapse = 9.80665, 287.05, 0.0065

    def dpdz(z, pz):
        return -pz * g / (r_d * (t_c + 273.15 + lapse * (h - z)))

    z, pz, n = h, p, 1000
    dz = -h / n
    for _ in range(n):
        k1 = dpdz(z, pz)
        k2 = dpdz(z + dz / 2, pz + dz / 2 * k1)
        k3 = dpdz(z + dz / 2, pz + dz / 2 * k2)
        k4 = dpdz(z + dz, pz + dz * k3)
        pz += dz / 6 * (k1 + 2 * k2 + 2 * k3 + k4)
        z += dz
    # THEN the estimator's closed form agrees to a thousandth of a hPa
    assert reduce_to_msl(p, h, t_c) == pytest.approx(pz, abs=1e-3)


def test_msl_reduction_is_about_012_hpa_per_metre_and_colder_air_adds_more():
    # Common practice: about 0.12 hPa per metre near the surface.
    assert reduce_to_msl(1013.0, 1.0, 15.0) - 1013.0 == pytest.approx(0.12, abs=0.005)
    assert reduce_to_msl(1013.0, 3.0, -5.0) > reduce_to_msl(1013.0, 3.0, 25.0)
    assert reduce_to_msl(1013.0, 0.0, 15.0) == 1013.0


def test_air_temperature_is_used_when_known():
    # GIVEN a barometer 10 m up; WHEN the air is -10 °C against no air sensor (15 °C)
    cold, default = PressureTendency(PressureParams(), 10.0), PressureTendency(PressureParams(), 10.0)
    cold.step(AirTemperature(T0, -10.0), None)
    a = cold.step(Pressure(T0 + 1, 1000.0), None)[0].payload
    b = default.step(Pressure(T0 + 1, 1000.0), None)[0].payload
    # THEN the cold reduction is larger, by the hypsometric ratio of the temperatures
    assert a["air_temp_c"] == -10.0 and b["air_temp_c"] is None
    assert a["msl_hpa"] - b["msl_hpa"] == pytest.approx(reduce_to_msl(1000, 10, -10) - reduce_to_msl(1000, 10, 15), abs=0.01)


def test_solar_tide_sign_and_timing():
    # Haurwitz & Cowley (from memory): S2 maxima near 10:00 and 22:00 local solar time,
    # minima near 04:00 and 16:00, amplitude about 1.2 hPa x cos³(latitude).
    day = T0 - T0 % 86400.0  # 00:00 UTC
    hours = np.arange(0.0, 24.0, 1.0 / 60.0)
    for lon in (0.0, 90.0, -60.0):
        tide = np.array([solar_tide_hpa(day + h * H, 0.0, lon) for h in hours])
        lst = np.array([local_solar_hours(day + h * H, lon) for h in hours])
        maxima = sorted(lst[np.r_[False, (tide[1:-1] > tide[:-2]) & (tide[1:-1] >= tide[2:]), False]])
        assert len(maxima) == 2
        assert maxima[0] == pytest.approx(9.73, abs=0.1) and maxima[1] == pytest.approx(21.73, abs=0.1)
    # sign: high in the mid-morning, low in the afternoon (local solar time at 90° E is UTC + 6 h)
    assert solar_tide_hpa(day + 4 * H, 0.0, 90.0) > 1.0  # 10:00 local
    assert solar_tide_hpa(day + 10 * H, 0.0, 90.0) < -1.0  # 16:00 local
    # amplitude falls off as cos³(latitude): one eighth at 60°
    assert solar_tide_hpa(day + 9.73 * H, 60.0, 0.0) == pytest.approx(1.16 / 8.0, abs=0.002)


def test_local_solar_time_from_utc_and_longitude():
    day = T0 - T0 % 86400.0
    assert local_solar_hours(day + 12 * H, 0.0) == pytest.approx(12.0)
    assert local_solar_hours(day + 12 * H, -90.0) == pytest.approx(6.0)
    assert local_solar_hours(day + 20 * H, 75.0) == pytest.approx(1.0)


@pytest.mark.parametrize("lat, by_hand", [
    # 24 hPa x sin(lat) / sin(60°), by hand: sin 30° = 0.5, sin 45° = 0.70711, sin 60° = 0.86603
    (30.0, 13.86),  # 24 x 0.5 / 0.86603 = 13.86 (not 12.0: that would be 24 x sin 30° without the / sin 60°)
    (45.0, 19.60),  # 24 x 0.70711 / 0.86603 = 19.60
    (60.0, 24.00),
    (-45.0, 19.60),  # the southern hemisphere by |sin|
])
def test_sanders_gyakum_threshold(lat, by_hand):
    # Sanders & Gyakum (1980): one "bergeron" = 24 hPa in 24 h at 60°, scaled by sin φ / sin 60°
    assert sanders_gyakum_hpa(lat) == pytest.approx(by_hand, abs=0.01)


@pytest.mark.parametrize("change, expected", [
    (0.0, "steady"), (0.1, "steady"), (-0.12, "steady"), (0.2, "rising slowly"), (-1.5, "falling slowly"),
    (1.6, "rising"), (-3.5, "falling"), (3.6, "rising quickly"), (-6.0, "falling quickly"),
    (6.1, "rising very rapidly"), (-9.0, "falling very rapidly"), (None, None),
])
def test_descriptor_bands(change, expected):
    # Marine convention (from memory): steady ≤ 0.1, slowly ≤ 1.5, (plain) ≤ 3.5, quickly ≤ 6.0,
    # very rapidly beyond, in hPa per 3 hours, judged on values to 0.1 hPa
    assert descriptor(change) == expected


# WMO Manual on Codes, code table 0200 (characteristic of pressure tendency), as remembered:
#   0 increasing, then decreasing; same or higher than 3 h ago
#   1 increasing, then steady; or increasing, then increasing more slowly; higher
#   2 increasing (steadily or unsteadily); higher
#   3 decreasing or steady, then increasing; or increasing, then increasing more rapidly; higher
#   4 steady; same as 3 h ago
#   5 decreasing, then increasing; same or lower than 3 h ago
#   6 decreasing, then steady; or decreasing, then decreasing more slowly; lower
#   7 decreasing (steadily or unsteadily); lower
#   8 steady or increasing, then decreasing; or decreasing, then decreasing more rapidly; lower
@pytest.mark.parametrize("trace, code", [
    ((1010.0, 1011.0, 1010.5), 0), ((1010.0, 1011.0, 1010.0), 0),
    ((1010.0, 1011.0, 1011.0), 1), ((1010.0, 1011.0, 1011.3), 1),
    ((1010.0, 1011.0, 1012.0), 2), ((1010.0, 1010.8, 1012.0), 2),
    ((1010.0, 1010.0, 1011.0), 3), ((1010.0, 1009.5, 1011.0), 3), ((1010.0, 1010.3, 1011.5), 3),
    ((1010.0, 1010.05, 1010.0), 4), ((1010.0, 1010.0, 1010.0), 4),
    ((1010.0, 1009.0, 1010.0), 5), ((1010.0, 1009.0, 1009.5), 5),
    ((1010.0, 1009.0, 1009.0), 6), ((1010.0, 1009.0, 1008.7), 6),
    ((1010.0, 1009.0, 1008.0), 7),
    ((1010.0, 1010.0, 1009.0), 8), ((1010.0, 1010.5, 1009.5), 8), ((1010.0, 1009.7, 1008.5), 8),
])
def test_wmo_0200_characteristic_from_three_hour_traces(trace, code):
    # GIVEN a hand-built trace (3 h ago, 90 min ago, now), hPa
    assert characteristic_0200(*trace) == code


def test_ols_slope_against_numpy():
    rng = np.random.default_rng(2)
    t = np.linspace(-1.0, 0.0, 61)
    y = 1010.0 - 1.7 * t + rng.normal(0, 0.1, t.size)
    b, se = ols_slope(list(t), list(y))
    (b_np, _), cov = np.polyfit(t, y, 1, cov=True)  # numpy's covariance is scaled by rss/(n-2) as here
    assert b == pytest.approx(b_np, rel=1e-9) and se == pytest.approx(math.sqrt(cov[0, 0]), rel=1e-6)


# ------------------------------------------------------------------ the estimator


def test_twelve_hours_of_steady_noisy_pressure_raise_nothing():
    # GIVEN 12 h of steady weather with the tide, gusts, a +2.5 hPa spike and a -3 hPa one
    conditions, pubs, est = barometer(lambda s: 1013.0, 12.0, seed=3, spikes=((5 * H, 2.5), (8 * H, -3.0)))
    # THEN no alert; the spikes were rejected by the gate; the tide-corrected tendency stayed small
    # and the observed one within the tide's 3-hour swing (√2 × 1.16 cos³45° = 0.58 hPa) of it
    assert conditions == []
    assert est.counts["rejected"] >= 2 and est.counts["step_faults"] == 0
    late = [p.payload for p in pubs if p.payload["tendency_3h_hpa"] is not None]
    assert max(abs(p["tendency_3h_tide_corrected_hpa"]) for p in late) < 0.6
    assert max(abs(p["tendency_3h_hpa"]) for p in late) < 0.6 + 0.58


def test_tide_is_removed_before_the_tendency_is_judged():
    # GIVEN steady weather and the full equatorial tide (±1.16 hPa) at 5°N
    _, pubs, _ = barometer(lambda s: 1013.0, 12.0, seed=4, lat=5.0, gusts=False)
    late = [p.payload for p in pubs if p.payload["tendency_3h_hpa"] is not None]
    # THEN the barometer's own 3-hour change (tendency_3h_hpa, as WMO defines it) swings by well over
    # a hPa, the tide-corrected one does not
    assert max(abs(p["tendency_3h_hpa"]) for p in late) > 1.2
    assert max(abs(p["tendency_3h_tide_corrected_hpa"]) for p in late) < 0.35
    # AND the descriptor and the characteristic go with the observed figure, the words with the code
    assert all(p["descriptor"] == descriptor(p["tendency_3h_hpa"]) for p in late)
    assert all(p["characteristic_text"] == CHARACTERISTIC_WORDS[p["characteristic"]] for p in late)
    assert all((p["characteristic"] <= 3) == (p["tendency_3h_hpa"] > 0.1) for p in late
               if abs(p["tendency_3h_hpa"]) >= 0.2 and p["characteristic"] not in (0, 5))


def test_tendency_is_null_until_three_hours_and_published_at_most_every_10_s():
    _, pubs, _ = barometer(lambda s: 1013.0, 3.5, seed=5, tide=False)
    early = [p for p in pubs if p.t_s - T0 < 3 * H - 60]
    assert all(p.payload["tendency_3h_hpa"] is None and p.payload["characteristic"] is None for p in early)
    assert pubs[-1].payload["tendency_3h_hpa"] is not None and pubs[-1].payload["characteristic"] == 4
    gaps = np.diff([p.t_s for p in pubs])
    assert gaps.min() >= 10.0
    assert {"msl_hpa", "tendency_3h_hpa", "rate_hpa_per_h", "descriptor", "characteristic"} <= set(pubs[0].payload)


def test_fall_caution_then_warning_within_15_minutes_of_the_true_fall():
    # GIVEN steady for 3 h, then -2.4 hPa/h: the true 3-hour fall reaches 3.6 hPa at 4.5 h
    # and 6.05 hPa (more than 6.0 to 0.1 hPa) at 5.52 h; the early rule is off to test the 3-h rule alone
    conditions, pubs, _ = barometer(ramp(3 * H, -2.4), 6.5, seed=6, params=PressureParams(early_rule=False))
    caution = first_raised(conditions, "pressure_fall", "caution")
    warning = first_raised(conditions, "pressure_fall", "warning")
    # THEN the caution no later than 15 min after 4.5 h, the warning no later than 15 min after 5.52 h
    assert caution is not None and 4.5 - 0.25 <= (caution.t_s - T0) / H <= 4.5 + 0.25
    assert warning is not None and 5.52 - 0.25 <= (warning.t_s - T0) / H <= 5.52 + 0.25
    assert "fell" in warning.text and "very rapidly" in warning.text
    assert pubs[-1].payload["descriptor"] == descriptor(pubs[-1].payload["tendency_3h_hpa"])
    assert pubs[-1].payload["characteristic"] == 7
    # the observed 3-hour change is the weather's -7.2 hPa plus the tide's own change over those hours
    t_end = pubs[-1].t_s
    tide_change = sim_tide(t_end, LAT, LON) - sim_tide(t_end - 3 * H, LAT, LON)
    assert pubs[-1].payload["tendency_3h_hpa"] == pytest.approx(-7.2 + tide_change, abs=0.3)
    assert pubs[-1].payload["tendency_3h_tide_corrected_hpa"] == pytest.approx(-7.2, abs=0.3)


def test_early_rule_raises_the_caution_before_three_hours_of_data():
    # GIVEN a fall of 2.5 hPa/h from the start (7.5 hPa in 3 h)
    conditions, pubs, _ = barometer(ramp(0.0, -2.5), 2.0, seed=7)
    caution = first_raised(conditions, "pressure_fall")
    # THEN it comes once an hour of readings shows it, before any 3-hour tendency exists
    assert caution is not None and 0.8 <= (caution.t_s - T0) / H <= 1.2
    assert all(p.payload["tendency_3h_hpa"] is None for p in pubs)
    assert "over the last hour" in caution.text


def test_early_rule_stays_quiet_for_a_fall_that_implies_less_than_the_threshold():
    # GIVEN 1.0 hPa/h (3.0 hPa in 3 h: "falling", not "quickly")
    conditions, _, _ = barometer(ramp(0.0, -1.0), 4.0, seed=8)
    # THEN no pressure_fall
    assert first_raised(conditions, "pressure_fall") is None


def test_caution_clears_when_the_fall_stops():
    # GIVEN -1.6 hPa/h for 3 h from 1 h in, then steady for 4 h
    conditions, _, _ = barometer(ramp(1 * H, -1.6, stop_s=4 * H), 8.0, seed=9)
    states = [c.active for c in conditions if c.alert_id == "pressure_fall"]
    states = [a for i, a in enumerate(states) if i == 0 or a != states[i - 1]]  # new figures are not a change
    # THEN raised once and cleared once (hysteresis: no chatter)
    assert states == [True, False]


def test_rapid_deepening_against_the_latitude_scaled_rate():
    # GIVEN at 45°N a steady fall of 22 hPa in 24 h (threshold 19.6 hPa), readings every 30 s
    conditions, _, _ = barometer(ramp(0.0, -22.0 / 24.0), 24.5, seed=10, period_s=30.0)
    raised = first_raised(conditions, "rapid_deepening")
    # THEN a warning once the fall passes 19.6 hPa (at about 21.4 h), saying what the criterion is for
    assert raised is not None and raised.priority == "warning"
    assert 21.0 <= (raised.t_s - T0) / H <= 22.0
    assert "central pressure" in raised.text and "own track" in raised.text
    # AND a 15 hPa fall in 24 h there is not explosive
    conditions, _, _ = barometer(ramp(0.0, -15.0 / 24.0), 24.5, seed=11, period_s=30.0)
    assert first_raised(conditions, "rapid_deepening") is None


def test_a_lasting_step_resets_the_level_instead_of_rejecting_forever():
    # GIVEN a barometer that reads 4 hPa higher from 1 h in (a new sensor)
    conditions, pubs, est = barometer(lambda s: 1013.0 + (4.0 if s >= H else 0.0), 2.0, seed=12, gusts=False)
    # THEN the filter resets once and follows the new level
    assert est.counts["resets"] == 1
    assert pubs[-1].payload["msl_tide_corrected_hpa"] == pytest.approx(1017.0, abs=0.4)


def test_filter_arithmetic_matches_the_matrix_form():
    # GIVEN the written-out 2x2 filter and the textbook matrix equations in numpy
    from estimators.pressure import LevelTrendFilter
    kf = LevelTrendFilter(q_level=0.01, q_rate=0.5)
    kf.start(0.0, 1010.0, 0.04, 4.0)
    x, P = np.array([1010.0, 0.0]), np.diag([0.04, 4.0])
    rng = np.random.default_rng(13)
    for k in range(1, 50):
        t, z, r = 30.0 * k, 1010.0 - 0.001 * k + rng.normal(0, 0.1), 0.01
        kf.predict(t)
        kf.update(z, r, gate_sigma=20.0)
        dt = 30.0 / 3600.0
        F = np.array([[1.0, dt], [0.0, 1.0]])
        Q = 0.5 * np.array([[dt**3 / 3, dt**2 / 2], [dt**2 / 2, dt]]) + np.diag([0.01 * dt, 0.0])
        x, P = F @ x, F @ P @ F.T + Q
        H = np.array([[1.0, 0.0]])
        S = H @ P @ H.T + r
        K = P @ H.T / S
        x = x + (K * (z - x[0])).ravel()
        A = np.eye(2) - K @ H
        P = A @ P @ A.T + r * K @ K.T
    # THEN the state and covariance agree to rounding
    assert np.allclose(kf.x, x, rtol=0, atol=1e-9) and np.allclose(np.array(kf.P), P, rtol=1e-9, atol=1e-15)


# ------------------------------------------------------------------ what the crew reads, and a sensor step
# A barometer step no atmosphere makes is a sensor fault, not a storm; which figure an alert uses and
# what its words are.


def _ids(conditions, alert_id):
    return [c for c in conditions if c.alert_id == alert_id]


@pytest.mark.parametrize("step_hpa", [-20.0, +20.0])
def test_a_barometer_step_no_atmosphere_makes_is_a_sensor_fault_not_weather(step_hpa):
    # GIVEN 5 h of steady weather, and from 4 h in a barometer that reads 20 hPa off (a sensor fault)
    conditions, pubs, est = barometer(lambda s: 1013.0 + (step_hpa if s >= 4 * H else 0.0), 7.0, seed=21,
                                      gusts=False)
    # THEN no weather alert at all from it: neither pressure_fall nor rapid_deepening
    assert _ids(conditions, "pressure_fall") == [] and _ids(conditions, "rapid_deepening") == []
    # AND it is flagged: counted, in the payload, and the barometer_fault caution says what happened
    assert est.counts["step_faults"] == 1
    fault = first_raised(conditions, "barometer_fault")
    assert fault is not None and fault.priority == "caution"
    sign = "+" if step_hpa > 0 else "\u2212"
    assert re.search(f"jumped \\{sign}20\\.[0-3] hPa" if sign == "+" else f"jumped {sign}20\\.[0-3] hPa", fault.text)
    assert "sensor fault" in fault.text
    late = [p.payload for p in pubs if p.t_s - T0 > 4.2 * H]
    hour_after = [p.payload for p in pubs if 4.2 * H < p.t_s - T0 < 5.0 * H]
    assert all(p["sensor_step_hpa"] == pytest.approx(step_hpa, abs=0.3) for p in hour_after)
    assert late[-1]["sensor_step_hpa"] is None  # no longer flagged after step_fault_hold_s
    # AND the filter was re-initialised on the new readings; the tendency goes on, steady (within the
    # tide's 3-hour swing at 45°: 0.58 hPa), never the 20 hPa jump
    assert late[-1]["msl_hpa"] == pytest.approx(1013.0 + step_hpa, abs=0.8)
    assert max(abs(p["tendency_3h_tide_corrected_hpa"]) for p in late) < 0.6
    assert max(abs(p["tendency_3h_hpa"]) for p in late) < 1.2


def test_a_real_lasting_fall_of_a_few_hpa_is_still_weather():
    # GIVEN a 4 hPa drop over 5 minutes that stays (a squall's pressure jump is a few hPa: weather)
    conditions, pubs, est = barometer(lambda s: 1013.0 - 4.0 * min(max(s - 2 * H, 0.0), 300.0) / 300.0, 4.0,
                                      seed=22, gusts=False)
    # THEN it is not called a sensor fault
    assert est.counts["step_faults"] == 0 and _ids(conditions, "barometer_fault") == []
    assert pubs[-1].payload["sensor_step_hpa"] is None


def test_the_fall_alert_says_which_figure_it_uses_and_its_words_agree_with_the_descriptor():
    # GIVEN a steady 2.4 hPa/h fall from 3 h in (7.2 hPa in 3 h by 6 h); the early rule off
    conditions, pubs, _ = barometer(ramp(3 * H, -2.4), 6.5, seed=23, params=PressureParams(early_rule=False))
    active = [c for c in _ids(conditions, "pressure_fall") if c.active]
    assert active
    for c in active:
        fig, which = c.values["fall_3h_hpa"], c.values["fall_3h_is"]
        # THEN the text names the figure, says whether it is as the barometer shows it or tide-corrected,
        assert f"fell {fig:.1f} hPa in the last 3 hours" in c.text
        assert ("as the barometer shows it" in c.text) == (which == "observed")
        assert ("with the daily pressure tide removed" in c.text.split("(")[0]) == (which == "tide_corrected")
        # AND its words are the descriptor's for that very figure
        assert f": {descriptor(-fig)}." in c.text
        # AND the figure is the larger fall of the two
        assert fig == pytest.approx(max(-c.values["observed_3h_hpa"], -c.values["tide_corrected_3h_hpa"]), abs=0.11)
    # AND the figures follow the fall while it lasts: the estimator tells the manager each new figure
    figs = [c.values["fall_3h_hpa"] for c in active]
    assert figs[-1] > figs[0] + 2.0 and len(set(figs)) > 10


def test_the_early_rule_says_it_is_a_rate_not_falling_quickly():
    # GIVEN 2.5 hPa/h from the start: an hour of readings shows it before any 3-hour figure
    conditions, _, _ = barometer(ramp(0.0, -2.5), 2.0, seed=7)
    c = first_raised(conditions, "pressure_fall")
    # THEN the text is a rate over the last hour, with its 3-hour bound, and no descriptor words
    assert c.text.startswith("Pressure falling at ") and "hPa/h over the last hour" in c.text
    assert "at least" in c.text and "no 3-hour figure yet" in c.text
    assert "quickly" not in c.text and "rapidly" not in c.text
    # AND no long floats in its values
    assert all(v is None or isinstance(v, str) or round(v, 2) == v for v in c.values.values())


def test_the_all_clear_reports_the_last_figure():
    conditions, _, _ = barometer(ramp(1 * H, -1.6, stop_s=4 * H), 8.0, seed=9)
    gone = [c for c in _ids(conditions, "pressure_fall") if not c.active]
    assert len(gone) == 1
    assert gone[0].text.startswith("Pressure fell quickly; now the barometer's 3-hour change is ")
    assert gone[0].values["observed_3h_hpa"] is not None
