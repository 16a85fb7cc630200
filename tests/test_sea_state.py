"""True wind, depth, the opposing current and the two cautions of the sea-state estimator."""

from __future__ import annotations

import math

import pytest

from estimators.angles import from_east_north, to_east_north, wrap_180
from estimators.base import Condition, Publication
from estimators.samples import (
    AirTemperature, ApparentWind, Attitude, Depth, Fix, Heading, SeaTemperature, Swell, WaterSpeed, WaterWind,
)
from estimators.sea_state import SeaStateEstimator, SeaStateParams, apparent_air_velocity, true_wind, wind_from
from tools.bench.sea_state import drive

T0 = 1_780_000_000.0


def current_pub(t: float, set_deg: float, drift_kn: float, quality: str = "valid",
                stw_scale: float = 1.0, heading_offset_deg: float = 0.0) -> Publication:
    e, n = to_east_north(drift_kn, set_deg)
    return Publication(t, "current", {"set_deg": set_deg, "drift_kn": drift_kn, "east_kn": e, "north_kn": n,
                                      "set_sigma_deg": 2.0, "drift_sigma_kn": 0.1, "quality": quality,
                                      "stw_scale": stw_scale, "heading_offset_deg": heading_offset_deg})


class FixedCurrent:
    """Stands in for the current estimator: publishes a fixed current once a second."""

    name = "fixed_current"
    accepts = ()

    def __init__(self, set_deg: float, drift_kn: float, **kw) -> None:
        self.args = (set_deg, drift_kn)
        self.kw = kw

    def step(self, sample, ctx):
        return ()

    def tick(self, t_s, ctx):
        return [current_pub(t_s, *self.args, **self.kw)]


def boat_samples(duration_s: float, heading_deg, stw_kn: float, true_from_deg: float, true_kn: float,
                 current=(0.0, 0.0), log_scale: float = 1.0, extra=None, leeway=None):
    """Sensor samples of a boat in a steady true wind (over water) and current, headings per second.

    ``heading_deg`` may be a function of time (yaw). The apparent wind is computed here independently:
    apparent = air/water - boat/water, turned into an angle off the bow. ``leeway`` = (degrees, heel):
    the water track is the heading turned by that leeway, and an attitude sensor reads the heel.
    """
    out = []
    ce, cn = to_east_north(current[1], current[0])
    air_e, air_n = to_east_north(true_kn, true_from_deg + 180.0)
    lam, heel = leeway or (0.0, None)
    for i in range(int(duration_s)):
        t = T0 + i
        hdg = heading_deg(t) if callable(heading_deg) else heading_deg
        be, bn = to_east_north(stw_kn, hdg + lam)  # the water track: heading + leeway
        aws, toward = from_east_north(air_e - be, air_n - bn)
        awa = (toward + 180.0 - hdg) % 360.0
        sog, cog = from_east_north(be + ce, bn + cn)
        out += [Heading(t + 0.1, hdg), WaterSpeed(t + 0.2, stw_kn / log_scale), ApparentWind(t + 0.3, awa, aws)]
        if heel is not None:
            out.append(Attitude(t + 0.4, heel, None))
        out.append(Fix(t + 0.9, 30.0, -40.0, sog, cog))
        if extra:
            out += extra(t)
    return out


def sea_states(outs):
    return [o for o in outs if isinstance(o, Publication) and o.topic == "sea_state"]


def conditions(outs, alert_id):
    return [o for o in outs if isinstance(o, Condition) and o.alert_id == alert_id]


def changes(conds):
    """The conditions where the state changed (an active condition is said again while it lasts, with its
    figures, so the alert's text follows the sea)."""
    return [c for i, c in enumerate(conds) if i == 0 or c.active != conds[i - 1].active]


# -- true wind: hand-worked vector examples -------------------------------------------------------------

@pytest.mark.parametrize("case,heading,stw,awa,aws,true_from,true_kn", [
    # Close-hauled. GIVEN heading 000 at 6 kn, true wind 12 kn from 045. By hand: air/water toward 225 =
    # 12 (sin 225, cos 225) = (-8.485, -8.485); boat (0, 6); apparent = (-8.485, -14.485): 16.787 kn,
    # toward 210.36, from 030.36 (cosine rule: AWS^2 = 144 + 36 + 144 cos 45 = 281.82, AWS = 16.787)
    ("close-hauled", 0.0, 6.0, 30.36, 16.787, 45.0, 12.0),
    # Beam reach. Heading 090 at 6 kn, true wind 10 kn from 000: air (0, -10), boat (6, 0), apparent (-6, -10):
    # sqrt(136) = 11.662 kn from 030.96, i.e. 059.04 off the port bow: AWA 300.96
    ("beam reach", 90.0, 6.0, 300.96, 11.662, 0.0, 10.0),
    # Run. Heading 180 at 6 kn, true wind 15 kn from 000: apparent 15 - 6 = 9 kn from dead astern (AWA 180)
    ("run", 180.0, 6.0, 180.0, 9.0, 0.0, 15.0),
])
def test_true_wind_worked_examples(case, heading, stw, awa, aws, true_from, true_kn):
    apparent = apparent_air_velocity(heading, awa, aws)
    water, ground = true_wind(apparent, to_east_north(stw, heading), None)
    from_deg, speed = wind_from(water)
    assert speed == pytest.approx(true_kn, abs=0.005), case
    assert abs(wrap_180(from_deg - true_from)) < 0.02, case
    assert ground is None


def test_wind_over_ground_adds_the_current():
    # Beam reach as above in a current of 2 kn setting 000 (from the south): the boat's ground velocity is
    # (6, 2); air/ground = apparent + boat/ground = (-6, -10) + (6, 2) = (0, -8): 8 kn from 000,
    # which is air/water + current = (0, -10) + (0, 2): a current setting into the wind weakens the ground wind
    apparent = apparent_air_velocity(90.0, 300.96, 11.662)
    water, ground = true_wind(apparent, (6.0, 0.0), (6.0, 2.0))
    assert wind_from(ground)[1] == pytest.approx(8.0, abs=0.005)
    assert abs(wrap_180(wind_from(ground)[0])) < 0.05
    assert wind_from(water)[1] == pytest.approx(10.0, abs=0.005)


# -- the estimator ------------------------------------------------------------------------------------

def test_estimator_publishes_true_and_ground_wind_with_the_calibration_applied():
    # GIVEN a log reading 5 % low (the current estimator says stw_scale 1.05), beam reach, 14 kn from 000,
    # a current of 1.5 kn setting 270
    samples = boat_samples(900, 90.0, 6.0, 0.0, 14.0, current=(270.0, 1.5), log_scale=1.05)
    outs = drive([FixedCurrent(270.0, 1.5, stw_scale=1.05), SeaStateEstimator()], samples)
    p = sea_states(outs)[-1].payload
    # THEN the sailor's true wind is the input; the ground wind is air/water + current, by hand:
    # (0, -14) + (-1.5, 0) = (-1.5, -14): 14.080 kn from 006.12
    assert p["true_wind_kn"] == pytest.approx(14.0, abs=0.05)
    assert abs(wrap_180(p["true_wind_from_deg"])) < 0.3
    assert p["ground_wind_kn"] == pytest.approx(14.080, abs=0.05)
    assert p["ground_wind_from_deg"] == pytest.approx(6.12, abs=0.3)
    assert p["true_wind_gust_kn"] == pytest.approx(14.0, abs=0.1)  # steady: the gust is the mean
    assert p["wind_source"] == "apparent"
    # the current across the wind opposes it by nothing
    assert p["opposing_current_kn"] == pytest.approx(0.0, abs=0.05)


def test_log_at_face_value_without_a_calibration_is_wrong_by_the_log_error():
    # the same boat, no current publication: the log is taken at face value (5 % low: 0.29 kn less boat speed),
    # so the true wind is off: the calibration is what makes it right (the test above)
    samples = boat_samples(300, 90.0, 6.0, 0.0, 14.0, log_scale=1.05)
    p = sea_states(drive([SeaStateEstimator()], samples))[-1].payload
    assert abs(wrap_180(p["true_wind_from_deg"])) > 0.8
    assert p["opposing_current_kn"] is None and p["height_factor"] is None


def test_yawing_hull_averages_as_vectors():
    # GIVEN the bow swinging +-25 deg every 8 s on a run, wind 18 kn from 350, 6 kn through the water; every
    # vane reading belongs to its own heading. Averaging angles off the bow against a mean heading would mix
    # the swings; vectors in the earth frame come back to the wind itself.
    yaw = lambda t: 170.0 + 25.0 * math.sin(2 * math.pi * (t - T0) / 8.0)  # noqa: E731
    samples = boat_samples(600, yaw, 6.0, 350.0, 18.0)
    p = sea_states(drive([SeaStateEstimator()], samples))[-1].payload
    # (the boat's own velocity swings with the heading too; each interval's is taken with its own heading)
    assert abs(wrap_180(p["true_wind_from_deg"] - 350.0)) < 1.0
    assert p["true_wind_kn"] == pytest.approx(18.0, abs=0.3)


def test_gust_is_the_highest_three_second_mean():
    # GIVEN 20 kn true wind on a beam reach, with a 6-s puff during which the apparent speed makes 30 kn true
    def extra(t):
        return []
    samples = boat_samples(600, 90.0, 6.0, 0.0, 20.0, extra=extra)
    puff = boat_samples(6, 90.0, 6.0, 0.0, 30.0)
    start = 300
    for s in puff:  # replace the apparent wind samples of seconds 300..305
        if isinstance(s, ApparentWind):
            i = next(j for j, x in enumerate(samples) if isinstance(x, ApparentWind) and x.t_s == s.t_s + start)
            samples[i] = ApparentWind(s.t_s + start, s.angle_deg, s.speed_kn)
    p = sea_states(drive([SeaStateEstimator()], samples))[-1].payload
    assert p["true_wind_gust_kn"] == pytest.approx(30.0, abs=0.3)  # WMO-No. 8: highest 3-s running mean
    assert p["true_wind_kn"] == pytest.approx(20.0 + 10.0 * 6 / 600, abs=0.1)  # the 10-min mean hardly moves


def test_instrument_true_wind_is_the_fallback_and_can_be_preferred():
    # GIVEN only MWD (WaterWind with a direction): 16 kn from 200
    samples = []
    for i in range(300):
        t = T0 + i
        samples += [Heading(t, 90.0), WaterSpeed(t, 6.0), WaterWind(t + 0.3, 16.0, 200.0, None), Fix(t + 0.9, 30, -40, 6.0, 90.0)]
    p = sea_states(drive([SeaStateEstimator()], samples))[-1].payload
    assert p["wind_source"] == "instrument"
    assert p["true_wind_kn"] == pytest.approx(16.0, abs=0.01) and p["true_wind_from_deg"] == pytest.approx(200.0, abs=0.05)
    # WHEN both come and the config prefers the instrument, the instrument's is used
    both = boat_samples(300, 90.0, 6.0, 0.0, 14.0)
    both += [WaterWind(T0 + i + 0.5, 16.0, 200.0, None) for i in range(300)]
    both.sort(key=lambda s: s.t_s)
    pref = sea_states(drive([SeaStateEstimator(SeaStateParams(wind_source="instrument"))], both))[-1].payload
    dflt = sea_states(drive([SeaStateEstimator()], both))[-1].payload
    assert pref["true_wind_from_deg"] == pytest.approx(200.0, abs=0.05)
    assert dflt["true_wind_from_deg"] == pytest.approx(0.0, abs=0.3) or dflt["true_wind_from_deg"] > 359.7


def test_depth_with_transducer_offset_and_age():
    samples = boat_samples(200, 90.0, 6.0, 0.0, 14.0, extra=lambda t: [Depth(t + 0.5, 12.0)] if t - T0 < 100 else [])
    p = sea_states(drive([FixedCurrent(0.0, 1.0), SeaStateEstimator(SeaStateParams(transducer_depth_m=0.6))], samples))
    last = p[-1].payload
    assert last["depth_m"] == pytest.approx(12.6)
    assert last["depth_age_s"] == pytest.approx(199.9 - 99.5, abs=2.5)
    assert last["depth_used_m"] is None  # older than depth_max_age_s: deep water
    early = [x.payload for x in p if x.t_s < T0 + 90][-1]
    assert early["depth_used_m"] == pytest.approx(12.6)


# -- the opposing current and the caution ---------------------------------------------------------------

@pytest.mark.parametrize("set_deg,expect", [(45.0, 4.0), (225.0, -4.0), (135.0, 0.0), (0.0, 4.0 * math.cos(math.radians(45)))])
def test_opposing_current_sign(set_deg, expect):
    # waves run downwind (toward 225 for a wind from 045); a current setting 045 flows into them: +4 against
    samples = boat_samples(300, 135.0, 6.0, 45.0, 22.0, current=(set_deg, 4.0))
    p = sea_states(drive([FixedCurrent(set_deg, 4.0), SeaStateEstimator()], samples))[-1].payload
    assert p["opposing_current_kn"] == pytest.approx(expect, abs=0.05)


def run_caution(set_deg: float, drift: float, wind_kn: float = 24.0, quality: str = "valid"):
    samples = boat_samples(900, 135.0, 6.0, 45.0, wind_kn, current=(set_deg, drift))
    return drive([FixedCurrent(set_deg, drift, quality=quality), SeaStateEstimator()], samples)


def test_wind_against_current_caution_when_the_sea_steepens():
    outs = run_caution(45.0, 4.0)
    cond = conditions(outs, "wind_against_current")
    raised = [c for c in changes(cond) if c.active]
    assert len(raised) == 1 and all(c.active for c in cond)  # raised once, said again while it lasts
    text = raised[0].text
    assert "24 kn" in text and "4.0 kn" in text and "estimate" in text
    p = sea_states(outs)[-1].payload
    # the published factors belong to the steepest period not blocked, which is the shortest one not blocked
    assert p["steepness_factor"] > 2.0 and p["length_factor"] < 0.7 and p["height_factor"] > 1.4
    free = [t for t in p["periods_s"] if t not in p["blocked_periods_s"]]
    assert p["worst_period_s"] == min(free)
    assert all(t < p["blocking_period_s"] for t in p["blocked_periods_s"])
    # deep water: blocking period 8 pi V / g (the waves module's check), 4 kn
    assert p["blocking_period_s"] == pytest.approx(8 * math.pi * 4 * 1852 / 3600 / 9.80665, abs=0.01)
    assert p["breaking_fraction"] >= 0.6


@pytest.mark.parametrize("set_deg,drift,quality", [(225.0, 4.0, "valid"), (45.0, 0.0, "valid"), (45.0, 4.0, "converging")])
def test_no_caution_with_the_current_without_one_or_unsure(set_deg, drift, quality):
    outs = run_caution(set_deg, drift, quality=quality)
    assert not [c for c in conditions(outs, "wind_against_current") if c.active]


def test_no_caution_in_a_light_breeze_however_steep():
    # 8 kn against 3 kn: short chop, steepened, but a sea lower than min_height_m
    outs = run_caution(45.0, 3.0, wind_kn=8.0)
    assert not [c for c in conditions(outs, "wind_against_current") if c.active]
    p = sea_states(outs)[-1].payload
    assert p["peak_blocked"] and p["wind_sea_height_m"] < 1.0  # the chop's peak period is even stopped


# -- unstable air ----------------------------------------------------------------------------------

def test_unstable_air_raised_and_cleared():
    # GIVEN air 14 C; the sea 15.5 C, then 19.5 C (a warm current), then 15.5 C again
    def temps(t):
        sea = 19.5 if 300 <= t - T0 < 600 else 15.5
        return [AirTemperature(t + 0.4, 14.0), SeaTemperature(t + 0.6, sea)]
    samples = boat_samples(900, 90.0, 6.0, 0.0, 14.0, extra=temps)
    outs = drive([SeaStateEstimator()], samples)
    cond = changes(conditions(outs, "unstable_air"))
    assert [c.active for c in cond] == [True, False]
    assert 300 <= cond[0].t_s - T0 <= 340  # after the minute's mean passes 3 C
    assert cond[0].values["difference_c"] >= 3.0 and cond[0].values["air_temp_c"] == 14.0
    assert f"{cond[0].values['difference_c']:.1f} °C colder than the sea" in cond[0].text
    assert 600 <= cond[1].t_s - T0 <= 660
    inside = [s.payload for s in sea_states(outs) if 420 <= s.t_s - T0 <= 600][-1]
    assert inside["air_temp_c"] == pytest.approx(14.0) and inside["sea_minus_air_c"] == pytest.approx(5.5)


def test_a_reported_swell_is_taken_on_its_own_current_component():
    # GIVEN wind from 045 and a current of 4 kn setting 135, across the wind sea (no opposing component);
    # a 10-s swell from 135 runs toward 315, straight into that current
    from estimators.angles import KN_TO_MPS
    from estimators.waves import wave_on_current

    samples = boat_samples(300, 90.0, 6.0, 45.0, 20.0, current=(135.0, 4.0))
    reported = [Swell(T0, 10.0, 135.0)] + samples  # the crew's report is a sample like any other
    p = sea_states(drive([FixedCurrent(135.0, 4.0), SeaStateEstimator()], reported))[-1].payload
    # THEN the worst period is the swell's, with the factors of 10 s against 4 kn (tests/test_waves.py)
    ref = wave_on_current(10.0, -4.0 * KN_TO_MPS)
    assert p["opposing_current_kn"] == pytest.approx(0.0, abs=0.05)
    assert p["swell_period_s"] == 10.0 and 10.0 in p["periods_s"]
    assert p["worst_period_s"] == 10.0
    assert p["steepness_factor"] == pytest.approx(ref.steepness_factor, abs=0.01)
    # and cleared, the worst is the wind sea's again (about 1: no current along it)
    cleared = [Swell(T0, 10.0, 135.0), Swell(T0 + 0.01, None, None)] + samples
    p = sea_states(drive([FixedCurrent(135.0, 4.0), SeaStateEstimator()], cleared))[-1].payload
    assert p["swell_period_s"] is None and p["steepness_factor"] == pytest.approx(1.0, abs=0.02)


@pytest.mark.parametrize("table,names", [
    ({"wind_source": "vane"}, "wind_source"),
    ({"raise_fraction": 0.5, "clear_fraction": 0.6}, "clear_fraction"),
    ({"unstable_raise_c": 2.0}, "unstable_clear_c"),  # the default clear (2.0) is not below it
    ({"fetch_nm": -1.0}, "fetch_nm"),
    ({"swell_period_s": "11"}, "swell_period_s"),
])
def test_a_bad_sea_state_config_names_the_key(table, names):
    from daemon.core.config import build_config
    from daemon.errors import ConfigError

    with pytest.raises(ConfigError, match=rf"\[sea_state\].*{names}"):
        build_config({"sea_state": table})


@pytest.mark.parametrize("told", [False, True])
def test_leeway_turns_the_water_track_when_the_hull_rule_is_given(told):
    # GIVEN a boat heading 090 at 6 kn making 5 deg of leeway (heeled 20 deg: K = 5 x 6^2 / 20 = 9 in the
    # rule lambda = K heel / STW^2 of [current] leeway_coefficient), true wind 20 kn from 000 over the water
    from estimators.current import CurrentParams

    hull = CurrentParams(leeway_coefficient=9.0 if told else 0.0)
    samples = boat_samples(300, 90.0, 6.0, 0.0, 20.0, leeway=(5.0, 20.0))
    p = sea_states(drive([SeaStateEstimator(hull=hull)], samples))[-1].payload
    # THEN told, the wind triangle closes: air/water = apparent + boat/water (the definition of true wind;
    # Bowditch, The American Practical Navigator, the wind triangle; from memory)
    if told:
        assert p["leeway_deg"] == pytest.approx(5.0)
        assert p["true_wind_kn"] == pytest.approx(20.0, abs=0.01)
        assert abs(wrap_180(p["true_wind_from_deg"])) < 0.05
    else:  # not told, the boat's 6 sin 5 = 0.52 kn across the heading (toward the south) is missing
        assert p["leeway_deg"] == 0.0
        missing = 6.0 * math.sin(math.radians(5.0))
        assert p["true_wind_kn"] == pytest.approx(20.0 - missing, abs=0.02)


def test_near_blocking_the_worst_period_is_bounded_at_breaking():
    # GIVEN 20 kn of wind from 000 over a 4.5-kn current setting 000, into it: blocking at 8 pi V / g = 5.9 s
    # (deep water), inside the wind sea's band (5.6 to 9.6 s for a 7.7-s peak)
    from estimators.waves import BREAKING_STEEPNESS, wavelength_m

    samples = boat_samples(300, 90.0, 6.0, 0.0, 20.0, current=(0.0, 4.5))
    outs = drive([FixedCurrent(0.0, 4.5), SeaStateEstimator()], samples)
    p = sea_states(outs)[-1].payload
    # THEN linear theory's factor for the worst free period runs away (published as it is) ...
    assert p["steepness_factor"] > 3.0 and p["near_blocking"] is True
    # ... and the bounded one stops where the sea's highest waves (2 Hs on the peak's still-water
    # wavelength) reach Michell's (1893) H/L = 1/7
    s0 = 2.0 * p["wind_sea_height_m"] / wavelength_m(p["wind_sea_period_s"])
    assert p["bounded_steepness_factor"] * s0 == pytest.approx(BREAKING_STEEPNESS, rel=1e-6)
    assert p["bounded_height_factor"] == pytest.approx(p["bounded_steepness_factor"] * p["length_factor"])
    assert p["bounded_height_factor"] < p["height_factor"]
    # the peak here is carried past breaking too (breaking_fraction over 1): its bounded factors stop at the
    # same ceiling, so the bounded worst period is never below the bounded peak
    assert p["breaking_fraction"] > 1.0
    assert p["peak_bounded_steepness_factor"] == pytest.approx(p["bounded_steepness_factor"])
    assert p["peak_bounded_height_factor"] == pytest.approx(p["peak_bounded_steepness_factor"] * p["peak_length_factor"])
    # ... and the caution carries both, its text the peak's linear figures and the fraction
    cautions = [c for c in conditions(outs, "wind_against_current") if c.active]
    v = cautions[-1].values
    assert v["near_blocking"] is True and v["peak_bounded_steepness_factor"] < v["peak_steepness_factor"]
    assert f"steepness x{v['peak_steepness_factor']:.1f}" in cautions[-1].text
    # AND with the current along the wind instead, nothing to bound: the same figures, not near blocking
    calm = sea_states(drive([FixedCurrent(180.0, 4.5), SeaStateEstimator()],
                            boat_samples(300, 90.0, 6.0, 0.0, 20.0, current=(180.0, 4.5))))[-1].payload
    assert calm["near_blocking"] is False
    assert calm["bounded_steepness_factor"] == calm["steepness_factor"]


def test_window_sums_follow_a_sliding_window_as_numpy_sums_it_afresh():
    # reference library: numpy's mean and the centred sums of products, computed afresh from the window's
    # vectors each time; the running sums are added to, taken from and rebased as the estimator does
    import numpy as np

    from estimators.sea_state import WindowSums

    rng = np.random.default_rng(7)
    window: list = []
    sums = WindowSums()
    checked = 0
    for i in range(3000):
        speed = 8.0 + 12.0 * (i // 500) / 5.0  # the wind freshens in steps: a stale sum would lag it
        v = None if rng.random() < 0.1 else (float(speed + rng.normal(0, 2)), float(-3.0 + rng.normal(0, 2)))
        window.append(v)
        sums.add(v)
        while len(window) > 120:
            sums.remove(window.pop(0))
        if sums.left >= len(window):
            sums.rebase(window)
        leaving = int(rng.integers(0, 4))
        spread = sums.spread(window[:leaving])
        rest = np.array([w for w in window[leaving:] if w is not None])
        if len(rest) == 0:
            assert spread is None
            continue
        d = rest - rest.mean(axis=0)
        assert spread.n == len(rest)
        assert spread.mean == pytest.approx(tuple(rest.mean(axis=0)), rel=1e-12, abs=1e-12)
        assert (spread.see, spread.sen, spread.snn) == pytest.approx(
            ((d[:, 0] ** 2).sum(), (d[:, 0] * d[:, 1]).sum(), (d[:, 1] ** 2).sum()), rel=1e-10, abs=1e-9)
        checked += 1
    assert checked > 2900


def test_the_published_mean_wind_is_the_window_summed_afresh():
    # GIVEN a 60-s mean window and a true wind that veers and freshens every two minutes, under yaw
    import dataclasses

    class SummedAfresh(SeaStateEstimator):
        """Beside each mean wind, the same figures from the window's vectors in two passes (the textbook way)."""

        def __init__(self, params):
            super().__init__(params)
            self.seen = []

        def _mean_wind(self, t):
            got = super()._mean_wind(t)
            vecs = [e.water for e in self._epochs if e.t_s > t - self.params.mean_window_s]
            if got is not None:
                me, mn = sum(v[0] for v in vecs) / len(vecs), sum(v[1] for v in vecs) / len(vecs)
                from_deg, speed = wind_from((me, mn))
                ue, un = me / speed, mn / speed
                n_eff = max(1.0, min(len(vecs), min(60.0, t - self._epochs[0].t_s + 1.0) / 10.0))
                squares = sum(((x - me) * ue + (y - mn) * un) ** 2 for x, y in vecs)
                along = math.sqrt(squares / max(1, len(vecs) - 1) / n_eff)
                self.seen.append((got, (from_deg, speed, along, len(vecs))))
            return got

    samples = []
    for leg in range(6):
        part = boat_samples(120, lambda t: 90.0 + 6.0 * math.sin(t / 3.0), 6.0, 200.0 + 15.0 * leg, 10.0 + 3.0 * leg)
        samples += [dataclasses.replace(s, t_s=s.t_s + 120.0 * leg) for s in part]
    est = SummedAfresh(SeaStateParams(mean_window_s=60.0))
    drive([est], samples)
    # THEN every publication's figures are the window's, to rounding far below the published decimals
    assert len(est.seen) > 300
    for got, (from_deg, speed, along, n) in est.seen:
        assert got.samples == n
        assert got.from_deg == pytest.approx(from_deg, abs=1e-9)
        assert got.speed_kn == pytest.approx(speed, rel=1e-12)
        # a wind without gusts has no spread: the running sums leave the root of their rounding (1e-8 kn)
        assert got.sigma_kn == pytest.approx(along, rel=1e-9, abs=1e-6)
    assert max(s for _, (_, s, _, _) in est.seen) > 24.0  # the wind did freshen through the run
