"""The simulator's truth is consistent, its scenarios say what they claim, and a seed fixes a run.

Outside checks, named beside each: geographiclib (Karney's geodesics) for
positions and distances; 1 kn = 1852 m per hour (the interface, exact); the
hydrostatic pressure drop near sea level ρ·g ≈ 1.225 kg/m³ × 9.80665 m/s² ≈
0.12 hPa per metre (ISO 2533 sea-level density); a strong warm current core of
about 5 kn, rarely over 5.5 kn, and wind drift of about 3 % of the wind speed
(common practice); the WMM2025 official test values for declination.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from geographiclib.geodesic import Geodesic

from tools.simulator import (
    CurrentBand, Ocean, PressureField, SeaTemperatureField, SensorSpec, Steer, SteadyCurrent, TidalStream,
    WindField, scenarios, simulate,
)
from tools.simulator.ocean import step_position
from tools.simulator.run import Scenario, magnetic_variation_deg
from estimators.angles import KN_TO_MPS, NM_M, circular_mean_deg, from_east_north, to_east_north, wrap_180
from estimators.samples import Fix, Heading, Pressure, SeaTemperature, WaterSpeed

from tests.shared import shared_path

WGS84 = Geodesic.WGS84


@pytest.fixture(scope="module")
def tacking():
    return simulate(scenarios.tacking_leg(), seed=11)


@pytest.fixture(scope="module")
def crossing():
    s = scenarios.current_crossing()
    return simulate(replace(s, sensors=replace(s.sensors, heading_hz=1.0)), seed=12)


def _truth_at_samples(run, samples, field):
    return run.truth_series(field, [s.t_s for s in samples])


# --------------------------------------------------------------------------- geodesy


@pytest.mark.parametrize("lat", [-60.0, -5.0, 0.0, 41.2, 72.0])
@pytest.mark.parametrize("azi", [0.0, 37.0, 90.0, 215.0])
def test_flat_earth_step_agrees_with_geographiclib_direct(lat, azi):
    # GIVEN a boat-sized step: 3 m, one second at 6 kn
    e, n = to_east_north(3.0, azi)
    # WHEN it is taken on the local flat earth with the WGS84 radii
    lat2, lon2 = step_position(lat, -32.0, e, n)
    # THEN it lands where geographiclib's Direct problem puts it, to 10 µm
    ref = WGS84.Direct(lat, -32.0, azi, 3.0)
    assert WGS84.Inverse(lat2, lon2, ref["lat2"], ref["lon2"])["s12"] < 1e-5
    # and even a one-mile step has the right length (1 mm) and mean direction (0.001°): a flat step
    # keeps its direction, so it is compared with the geodesic's mean azimuth, not its initial one
    e, n = to_east_north(NM_M, azi)
    g = WGS84.Inverse(lat, -32.0, *step_position(lat, -32.0, e, n))
    assert g["s12"] == pytest.approx(NM_M, abs=1e-3)
    mean_azi = g["azi1"] + 0.5 * wrap_180(g["azi2"] - g["azi1"])
    assert abs(wrap_180(mean_azi - azi)) < 1e-3


def test_one_knot_of_drift_carries_1852_m_in_an_hour():
    # GIVEN a boat lying still in a 1-kn current toward 090 (1 kn = 1852 m/h, exact)
    t0 = scenarios.utc(2026, 5, 1)
    ocean = Ocean((SteadyCurrent(90.0, 1.0),), SeaTemperatureField(15.0, 45.0, -30.0),
                  PressureField(((t0, 1013.0),)), WindField(((t0, 0.0, 0.0),)))
    s = Scenario("drift", t0, 3600.0, 45.0, -30.0, (Steer(0.0, 0.0, 3600.0),), ocean)
    # WHEN an hour passes
    run = simulate(s, seed=1)
    # THEN geographiclib measures 1852 m between the first and last positions, toward 090
    g = WGS84.Inverse(run.truth["lat"][0], run.truth["lon"][0], run.truth["lat"][-1], run.truth["lon"][-1])
    assert g["s12"] == pytest.approx(1852.0, abs=0.05)
    assert g["azi1"] == pytest.approx(90.0, abs=0.01)


# --------------------------------------------------------------------------- truth consistency


def test_track_ground_speed_matches_water_velocity_plus_current(tacking):
    # GIVEN the true track of the tacking leg (steady current, tacks)
    tr = tacking.truth[::7]
    dt = np.diff(tr["t_s"])
    # WHEN each stretch is measured with geographiclib
    dist = np.array([WGS84.Inverse(a, b, c, d)["s12"] for a, b, c, d in
                     zip(tr["lat"][:-1], tr["lon"][:-1], tr["lat"][1:], tr["lon"][1:])])
    # THEN its speed is the mean of |water velocity + current| at its ends, in knots (1852 m/h)
    ve = 0.5 * ((tr["water_east_kn"] + tr["current_east_kn"])[:-1] + (tr["water_east_kn"] + tr["current_east_kn"])[1:])
    vn = 0.5 * ((tr["water_north_kn"] + tr["current_north_kn"])[:-1] + (tr["water_north_kn"] + tr["current_north_kn"])[1:])
    speed_kn = dist / dt / KN_TO_MPS
    steady = np.abs(np.diff(tr["helm_heading_deg"])) < 1.0  # not across a tack
    assert np.max(np.abs(speed_kn - np.hypot(ve, vn))[steady]) < 0.05
    assert np.median(np.abs(speed_kn - np.hypot(ve, vn))[steady]) < 0.01


def test_ground_velocity_is_the_vector_sum_and_sog_cog_agree(tacking):
    tr = tacking.truth
    # water velocity = STW along heading + leeway
    we, wn = to_east_north(1.0, 0.0)
    he = tr["stw_true_kn"] * np.sin(np.radians(tr["heading_true_deg"] + tr["leeway_deg"]))
    hn = tr["stw_true_kn"] * np.cos(np.radians(tr["heading_true_deg"] + tr["leeway_deg"]))
    assert np.allclose(he, tr["water_east_kn"]) and np.allclose(hn, tr["water_north_kn"])
    assert np.allclose(tr["ground_east_kn"], tr["water_east_kn"] + tr["current_east_kn"])
    assert np.allclose(tr["sog_kn"], np.hypot(tr["ground_east_kn"], tr["ground_north_kn"]))
    i = len(tr) // 3
    assert from_east_north(tr["ground_east_kn"][i], tr["ground_north_kn"][i])[1] == pytest.approx(tr["cog_deg"][i])
    assert (we, wn) == pytest.approx((0.0, 1.0))


def test_truth_at_interpolates_angles_the_short_way():
    # GIVEN a boat steering 000 with a yaw that swings her across north
    t0 = scenarios.utc(2026, 5, 1)
    ocean = Ocean((), SeaTemperatureField(15.0, 45.0, -30.0), PressureField(((t0, 1013.0),)), WindField(((t0, 90.0, 10.0),)))
    run = simulate(Scenario("north", t0, 600.0, 45.0, -30.0, (Steer(0.0, 5.0, 600.0),), ocean), seed=2)
    h = run.truth["heading_true_deg"]
    k = next(i for i in range(len(h) - 1) if abs(h[i] - h[i + 1]) > 180.0)
    # WHEN the truth is asked between two rows on either side of 360/0
    mid = run.truth_at(run.truth["t_s"][k] + 0.5).heading_true_deg
    # THEN the answer lies between them, near north, not near 180
    assert abs(wrap_180(mid)) < 5.0
    assert abs(wrap_180(mid - h[k])) < abs(wrap_180(h[k + 1] - h[k])) + 1e-9


# --------------------------------------------------------------------------- stated scenario facts


def test_log_reads_six_percent_low_and_compass_three_degrees_high(tacking):
    # GIVEN the tacking leg, whose log is 6 % low and compass 3° high
    ws = [s for s in tacking.samples if isinstance(s, WaterSpeed)]
    hd = [s for s in tacking.samples if isinstance(s, Heading)]
    # WHEN the samples are set against the truth at their own times
    true_stw = _truth_at_samples(tacking, ws, "stw_true_kn")
    log = np.array([s.speed_kn for s in ws])
    ratio = float(np.sum(log * true_stw) / np.sum(true_stw**2))  # least-squares scale through the origin
    true_hd = _truth_at_samples(tacking, hd, "heading_true_deg")
    off = circular_mean_deg(wrap_180_arr(np.array([s.true_deg for s in hd]) - true_hd))
    # THEN the scale is 0.94 and the offset +3°
    assert ratio == pytest.approx(0.94, abs=0.003)
    assert wrap_180(off) == pytest.approx(3.0, abs=0.05)


def test_tacking_leg_really_tacks_and_heels_to_leeward(tacking):
    tr = tacking.truth
    # close-hauled 45° off the wind over the water (the ground wind from 000 less the current)
    off_wind = wrap_180_arr(tr["helm_heading_deg"] - tr["water_wind_from_deg"])
    settled = np.abs(np.abs(off_wind) - 45.0) < 0.5
    assert settled.mean() > 0.9
    assert np.any(settled & (off_wind < 0)) and np.any(settled & (off_wind > 0))  # both tacks
    # wind over the port bow (AWA > 180) heels her to starboard (positive), and the reverse
    sailing = tr["motoring"] == 0
    awa, heel = tr["apparent_wind_angle_deg"][sailing], tr["heel_deg"][sailing]
    assert np.all(heel[(awa > 200) & (awa < 340)] > 0) and np.all(heel[(awa > 20) & (awa < 160)] < 0)


def wrap_180_arr(a):
    return (np.asarray(a) + 180.0) % 360.0 - 180.0


def test_current_band_core_is_about_five_knots_with_edges_inside_a_mile(crossing):
    # GIVEN the current crossing (common practice: a strong warm core ≈ 5 kn, rarely > 5.5 kn)
    band = next(c for c in crossing.scenario.ocean.currents if isinstance(c, CurrentBand))
    tr = crossing.truth
    # THEN the drift the boat meets peaks between 4 and 5.5 kn
    assert 4.0 < tr["drift_kn"].max() < 5.5
    # and the 10–90 % rise of an edge, measured across the band with geographiclib, is under a mile
    line = WGS84.Line(band.lat, band.lon, band.set_deg - 90.0)  # across, from the core outward to the left
    d = np.arange(0.0, 10.0 * NM_M, 5.0)
    prof = np.array([band.profile(p["lat2"], p["lon2"]) for p in (line.Position(x) for x in d)])
    rise_m = d[np.argmax(prof < 0.1)] - d[np.argmax(prof < 0.9)]
    assert 0.3 * NM_M < rise_m < 1.0 * NM_M


def test_band_edges_show_as_sea_temperature_fronts(crossing):
    edges = [e for e in crossing.events if e.kind == "band_edge"]
    assert [e.detail["entering"] for e in edges] == [True, False]
    for e in edges:
        # THEN within 10 minutes either side of the edge (about a mile at 6 kn) the water changes by ~3 °C
        before, after = crossing.truth_at(e.t_s - 600.0), crossing.truth_at(e.t_s + 600.0)
        assert after.sea_temp_c - before.sea_temp_c == pytest.approx(e.detail["delta_c"], abs=0.5)


def test_gnss_outage_has_no_fixes_inside_and_fixes_around():
    s = scenarios.gnss_outage()
    s = replace(s, duration_s=2.5 * 3600.0, sensors=replace(s.sensors, heading_hz=1.0))
    run = simulate(s, seed=3)
    (start, end), = s.sensors.gnss_outages
    assert end - start == 1800.0
    fixes = [f.t_s for f in run.samples if isinstance(f, Fix)]
    assert not any(start <= t < end for t in fixes)
    assert any(start - 5.0 <= t < start for t in fixes) and any(end <= t < end + 5.0 for t in fixes)


def _solar_tide(t_s, lat, lon):
    lst_h = (np.asarray(t_s) / 3600.0 + np.asarray(lon) / 15.0) % 24.0
    return 1.2 * np.cos(np.radians(lat)) ** 3 * np.cos(2.0 * np.pi * (lst_h - 10.0) / 12.0)


def test_pressure_fall_is_two_hpa_an_hour_after_three_steady_hours_and_barometer_sits_above_msl():
    s = scenarios.pressure_fall()
    run = simulate(replace(s, sensors=replace(s.sensors, heading_hz=0.2)), seed=4)
    tr = run.truth
    t = (tr["t_s"] - tr["t_s"][0]) / 3600.0
    steady, falling = t < 3.0, t > 3.0
    # the weather's part, once the atmospheric tide is taken out (written here independently:
    # 1.2 hPa cos³φ, peaks at 10 and 22 local solar time)
    weather = tr["msl_hpa"] - _solar_tide(tr["t_s"], tr["lat"], tr["lon"])
    assert np.ptp(weather[steady]) < 1e-9
    assert np.polyfit(t[falling], weather[falling], 1)[0] == pytest.approx(-2.0, abs=1e-6)
    # and the barometer does see the tide: a swing of tenths of a hPa over the steady hours
    assert np.ptp(tr["msl_hpa"][steady]) > 0.1
    # the barometer at 2 m reads about ρg·h = 1.225 × 9.80665 × 2 Pa ≈ 0.24 hPa below MSL (hydrostatics)
    ps = [p for p in run.samples if isinstance(p, Pressure) and p.t_s - tr["t_s"][0] < 3 * 3600]
    gap = np.mean(_truth_at_samples(run, ps, "msl_hpa") - np.array([p.station_hpa for p in ps]))
    assert gap == pytest.approx(1.225 * 9.80665 * 2.0 / 100.0, abs=0.03)


def test_tidal_stream_turns_right_round_in_a_tidal_period():
    t0 = 1_800_000_000.0
    ts = TidalStream(60.0, 1.6, 0.6, t_max_s=t0)
    at_max = from_east_north(*ts.velocity(t0, 0, 0))
    quarter = from_east_north(*ts.velocity(t0 + ts.period_s / 4, 0, 0))
    half = from_east_north(*ts.velocity(t0 + ts.period_s / 2, 0, 0))
    assert at_max == pytest.approx((1.6, 60.0))
    assert quarter == pytest.approx((0.6, 150.0))  # clockwise: a quarter period on, 90° to the right
    assert half == pytest.approx((1.6, 240.0))
    # a 12.42-h M2 period (tide tables)
    assert ts.period_s / 3600.0 == pytest.approx(12.42, abs=0.01)


def test_wind_drift_is_three_percent_downwind():
    t0 = 1_800_000_000.0
    ocean = Ocean((), SeaTemperatureField(15.0, 0, 0), PressureField(((t0, 1013.0),)),
                  WindField(((t0, 250.0, 20.0),)), wind_drift_factor=0.03)
    drift, set_ = from_east_north(*ocean.current(t0, 0.0, 0.0))
    assert drift == pytest.approx(0.6) and set_ == pytest.approx(70.0)  # 3 % of 20 kn, toward 070


def test_front_crossing_events_match_the_water_the_boat_meets():
    s = scenarios.front_crossing()
    run = simulate(replace(s, sensors=replace(s.sensors, heading_hz=0.5)), seed=5)
    fronts = [e for e in run.events if e.kind == "front_crossing"]
    assert [e.detail["warmer"] for e in fronts] == [True, False]
    for e in fronts:
        before, after = run.truth_at(e.t_s - 300.0), run.truth_at(e.t_s + 300.0)  # ±0.5 nm at 6 kn
        assert after.sea_temp_c - before.sea_temp_c == pytest.approx(e.detail["delta_c"], abs=0.4)
    # the thermometer reads the same water within its noise and sun warming
    st = [x for x in run.samples if isinstance(x, SeaTemperature)][::10]
    err = np.array([x.temp_c for x in st]) - _truth_at_samples(run, st, "sea_temp_c")
    assert abs(np.median(err)) < 0.2 and np.max(np.abs(err)) < 0.4


def test_variation_comes_from_the_world_magnetic_model():
    # WMM2025 official test values (NOAA/BGS, as shipped with pygeomag): year, alt km, lat, lon, D, ...
    path = shared_path("reference", "wmm2025-test-values.txt")
    rows = [list(map(float, ln.split())) for ln in path.read_text().splitlines() if ln.strip() and not ln.startswith("#")]
    year, alt, lat, lon, decl = next(r[:5] for r in rows if r[1] == 0.0)
    t_s = (year - 1970.0) * 365.2425 * 86400.0
    assert magnetic_variation_deg(lat, lon, t_s) == pytest.approx(decl, abs=0.02)


# --------------------------------------------------------------------------- determinism


def test_same_seed_same_run_and_another_seed_another():
    s = replace(scenarios.tacking_leg(), duration_s=900.0)
    a, b, c = simulate(s, 21), simulate(s, 21), simulate(s, 22)
    assert a.samples == b.samples
    assert np.array_equal(a.truth, b.truth)
    assert a.samples != c.samples


def test_demo_passage_has_what_its_readme_promises():
    s = scenarios.demo_passage(heading_hz=0.2)
    assert s.duration_s >= 6 * 3600.0
    run = simulate(s, seed=20260504)
    kinds = [e.kind for e in run.events]
    assert kinds.count("band_edge") == 2 and "gnss_outage_start" in kinds and kinds.count("leg_start") >= 3
    (start, end), = s.sensors.gnss_outages
    assert 60.0 <= end - start <= 300.0
    # wind against current inside the band: wind from within 30° of the direction the current sets toward
    inside = run.truth[run.truth["drift_kn"] > 3.0]
    assert len(inside) > 3600
    assert np.all(np.abs(wrap_180_arr(inside["ground_wind_from_deg"] - inside["set_deg"])) < 30.0)
    # MSL falls at 2.2 hPa/h for the last four hours: a 3-h tendency of −6.6 hPa
    tr = run.truth
    weather = tr["msl_hpa"] - _solar_tide(tr["t_s"], tr["lat"], tr["lon"])
    assert weather[-1] - weather[-1 - 3 * 3600] == pytest.approx(-6.6, abs=0.01)


def test_samples_are_in_time_order_at_the_stated_rates(tacking):
    times = [s.t_s for s in tacking.samples]
    assert times == sorted(times)
    span_h = tacking.scenario.duration_s / 3600.0
    n_heading = len(tacking.samples_of(Heading))
    n_fix = len(tacking.samples_of(Fix))
    # 10 Hz heading and 1 Hz fixes, less the 0.1 % dropouts (binomial: a few tens at most)
    assert n_heading == pytest.approx(10 * 3600 * span_h, rel=0.004)
    assert n_fix == pytest.approx(3600 * span_h, rel=0.004)


def test_waypoint_leg_arrives_and_box_closes_in_still_water():
    # GIVEN still water, a waypoint 2 nm to the north-east, then a motoring box of 10-min sides
    t0 = scenarios.utc(2026, 5, 1)
    ocean = Ocean((), SeaTemperatureField(15.0, 45.0, -30.0), PressureField(((t0, 1013.0),)),
                  WindField(((t0, 0.0, 5.0),)))
    wp = WGS84.Direct(45.0, -30.0, 45.0, 2 * NM_M)
    from tools.simulator import Waypoint, box
    legs = (Waypoint(wp["lat2"], wp["lon2"], 6.0, 3600.0, arrive_nm=0.05),) + box(90.0, 600.0, 6.0)
    run = simulate(Scenario("wp", t0, 3 * 3600.0, 45.0, -30.0, legs, ocean), seed=3)
    arrive = next(e for e in run.events if e.kind == "leg_start" and e.detail["leg"] == 1)
    # THEN she reaches the waypoint in about 2 nm / 6 kn = 20 min, within 0.05 nm
    assert WGS84.Inverse(arrive.lat, arrive.lon, wp["lat2"], wp["lon2"])["s12"] < 0.05 * NM_M + 5.0
    assert arrive.t_s - t0 == pytest.approx(1200.0, abs=60.0)
    # and four equal sides at right angles bring her back near where the box began (turns cut corners)
    end = next(e for e in run.events if e.kind == "leg_start" and e.detail["leg"] == 4).t_s + 600.0
    back = run.truth_at(end)
    assert WGS84.Inverse(arrive.lat, arrive.lon, back.lat, back.lon)["s12"] < 0.05 * NM_M


def test_steady_pressure_has_a_spike_gusts_and_no_real_tendency():
    s = scenarios.steady_pressure_12h()
    run = simulate(replace(s, duration_s=6 * 3600.0, sensors=replace(s.sensors, heading_hz=0.2)), seed=6)
    tr = run.truth
    # the true 3-h change stays inside "steady or slowly" (WMO: under 1.5 hPa in 3 h; from memory)
    three_h = int(3 * 3600 / s.truth_dt_s)
    assert np.max(np.abs(tr["msl_hpa"][three_h:] - tr["msl_hpa"][:-three_h])) < 1.5
    ps = run.samples_of(Pressure)
    p = np.array([x.station_hpa for x in ps])
    # every reading is on the 0.1-hPa grid of the sentence
    assert np.allclose(np.round(p * 10.0), p * 10.0, atol=1e-6)
    # the spike: one reading about 2.5 hPa above its neighbours, five hours in
    (t_spike, dp), = s.sensors.pressure_spikes
    i = next(k for k, x in enumerate(ps) if x.t_s >= t_spike)
    assert p[i] - 0.5 * (p[i - 1] + p[i + 1]) == pytest.approx(dp, abs=0.5)
    # gusts: reading-to-reading scatter well above the 0.03-hPa sensor noise
    assert np.std(np.diff(np.delete(p, i))) > 0.1


def test_leeway_when_asked_follows_k_heel_over_speed_squared_and_the_log_reads_along_the_keel():
    # GIVEN the tacking leg with leeway on (K = 10, λ = K·φ/STW², Garrett's form at small heel)
    s = scenarios.tacking_leg()
    s = replace(s, duration_s=1800.0, boat=replace(s.boat, leeway_k=10.0), sensors=replace(s.sensors, heading_hz=1.0))
    run = simulate(s, seed=9)
    tr = run.truth[60:]  # after the start-up
    # THEN leeway is to leeward (the sign of the heel) and of the stated size
    expected = np.clip(10.0 * tr["heel_deg"] / tr["stw_true_kn"] ** 2, -10.0, 10.0)
    assert np.allclose(tr["leeway_deg"], expected)
    assert np.all(np.sign(tr["leeway_deg"][tr["heel_deg"] != 0]) == np.sign(tr["heel_deg"][tr["heel_deg"] != 0]))
    assert 0.5 < np.median(np.abs(tr["leeway_deg"])) < 5.0
    # and the log (scale 0.94) reads the speed along the keel, STW·cos λ
    ws = run.samples_of(WaterSpeed)[60:]
    keel = _truth_at_samples(run, ws, "stw_true_kn") * np.cos(np.radians(_truth_at_samples(run, ws, "leeway_deg")))
    log = np.array([w.speed_kn for w in ws])
    assert float(np.sum(log * keel) / np.sum(keel**2)) == pytest.approx(0.94, abs=0.004)
