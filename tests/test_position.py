"""Position: GNSS publication, dead reckoning through an outage, its error budget, gnss_lost.

Outside references: WGS84 ellipsoid a = 6378137 m, f = 1/298.257223563 (the
WGS84 definition, NIMA TR8350.2) and the radii of curvature in the meridian
M = a(1 - e^2) / (1 - e^2 sin^2 phi)^1.5 and in the prime vertical
N = a / sqrt(1 - e^2 sin^2 phi) (any geodesy handbook); geographiclib's
geodesic Direct/Inverse (Karney 2013) as an independent integrator.
Places are invented open-ocean spots.
"""

from __future__ import annotations

import math
import random
from dataclasses import replace

import pytest
from geographiclib.geodesic import Geodesic

from estimators.angles import KN_TO_MPS, to_east_north
from estimators.base import Publication, WARNING
from estimators.params import check
from estimators.position import PositionEstimator, PositionParams
from estimators.runner import RunContext
from estimators.samples import Fix, Heading, WaterSpeed

T0 = 1_780_000_000.0
LAT0, LON0 = 38.0, -35.0
A, F = 6378137.0, 1 / 298.257223563
E2 = F * (2 - F)


def current_pub(t: float, east: float = 1.0, north: float = 0.0, **over) -> Publication:
    payload = {"east_kn": east, "north_kn": north, "drift_kn": math.hypot(east, north), "set_deg": 90.0,
               "drift_sigma_kn": 0.1, "set_sigma_deg": 10.0, "quality": "valid",
               "stw_scale": 1.0, "heading_offset_deg": 0.0, "stw_scale_sigma": 0.02,
               "heading_offset_sigma_deg": 1.0, "log": "trusted"}
    payload.update(over)
    return Publication(t, "current", payload)


def sigma_v_mps(cur: dict, log_kn: float) -> float:
    """The documented budget, written out independently of the module."""
    drift = math.hypot(cur["east_kn"], cur["north_kn"])
    var = (cur["drift_sigma_kn"] ** 2 + (drift * math.radians(cur["set_sigma_deg"])) ** 2
           + (log_kn * cur["stw_scale_sigma"]) ** 2
           + (cur["stw_scale"] * log_kn * math.radians(cur["heading_offset_sigma_deg"])) ** 2)
    return math.sqrt(var) * KN_TO_MPS


def outage(est: PositionEstimator, ctx: RunContext, seconds: int, heading=lambda t: 0.0, log=lambda t: 6.0,
           current=None) -> list:
    """Heading and log at 1 Hz (half a second off the ticks), no fixes, a tick every second."""
    out = []
    for i in range(1, seconds + 1):
        t = T0 + i
        for s in (Heading(t - 0.5, heading(t)), WaterSpeed(t - 0.5, log(t))):
            ctx.history.add(s)
        if current is not None:
            ctx.note([current(t)])
        out += est.tick(t, ctx)
    return out


def start(est: PositionEstimator, ctx: RunContext, hdop: float = 1.0, sog=6.0, cog=0.0, cur: Publication | None = None) -> list:
    if cur is not None:
        ctx.note([cur])
    return list(est.step(Fix(T0, LAT0, LON0, sog, cog, hdop), ctx))


def positions(out):
    return [o for o in out if isinstance(o, Publication) and o.topic == "position"]


def conditions(out):
    return [o for o in out if not isinstance(o, Publication)]


def test_defaults_pass_their_checks():
    assert check(PositionParams()) == []
    assert PositionParams().dr_after_s == 3.0 and PositionParams().gnss_lost_after_s == 10.0


def test_fix_is_published_with_hdop_times_uere_at_most_once_a_second():
    # GIVEN fixes at 10 Hz with HDOP 1.4 and the default UERE of 5 m
    est, ctx = PositionEstimator(), RunContext()
    out = []
    for i in range(100):
        out += est.step(Fix(T0 + i * 0.1, LAT0, LON0 + i * 1e-6, 5.0, 90.0, 1.4), ctx)
    pubs = positions(out)
    # THEN one per second, GNSS, sigma 1.4 x 5 = 7 m
    assert [round(p.t_s - T0, 1) for p in pubs] == [float(i) for i in range(10)]
    p = pubs[3].payload
    assert (p["source"], p["sigma_m"], p["sog_kn"], p["cog_deg"]) == ("gnss", 7.0, 5.0, 90.0)
    assert "dr_error_m" not in p


def test_dr_along_a_straight_line_matches_hand_computation_and_geographiclib():
    # GIVEN a fix, then 30 min of 6 kn through the water heading 000 and a 1 kn current toward east
    est, ctx = PositionEstimator(), RunContext()
    start(est, ctx, cur=current_pub(T0))
    out = positions(outage(est, ctx, 1800, current=lambda t: current_pub(t)))
    last = out[-1].payload
    assert out[-1].t_s == T0 + 1800 and last["source"] == "dead_reckoning"
    # THEN the hand computation: 3.0 nm north (5556 m) and 0.5 nm east (926 m) on the WGS84 ellipsoid
    north_m, east_m = 6.0 * 1852 / 2, 1.0 * 1852 / 2
    lat_hand = LAT0 + math.degrees(north_m / (A * (1 - E2)))  # first guess: the equator's meridian radius
    for _ in range(3):  # radii at the mid-latitude
        mid = math.radians((LAT0 + lat_hand) / 2)
        M = A * (1 - E2) / (1 - E2 * math.sin(mid) ** 2) ** 1.5
        N = A / math.sqrt(1 - E2 * math.sin(mid) ** 2)
        lat_hand = LAT0 + math.degrees(north_m / M)
    lon_hand = LON0 + math.degrees(east_m / (N * math.cos(mid)))
    g = Geodesic.WGS84
    assert g.Inverse(last["lat"], last["lon"], lat_hand, lon_hand)["s12"] < 0.1
    # AND geographiclib's single geodesic of the same length and initial azimuth (a rhumb line this short
    # departs from it by well under a metre)
    ref = g.Direct(LAT0, LON0, math.degrees(math.atan2(1.0, 6.0)), math.hypot(north_m, east_m))
    assert g.Inverse(last["lat"], last["lon"], ref["lat2"], ref["lon2"])["s12"] < 1.5
    assert abs(last["sog_kn"] - math.sqrt(37)) < 0.01 and abs(last["cog_deg"] - 9.46) < 0.06  # rounded to 0.1 deg
    # AND sigma_m^2 = sigma_fix^2 + (sigma_v * 1800 s)^2
    sv = sigma_v_mps(current_pub(T0).payload, 6.0)
    assert abs(last["sigma_m"] - math.hypot(5.0, sv * 1800)) < 0.1


def test_dr_starts_after_dr_after_s_and_is_published_once_a_second():
    est, ctx = PositionEstimator(), RunContext()
    start(est, ctx, cur=current_pub(T0))
    out = positions(outage(est, ctx, 12, current=lambda t: current_pub(t)))
    # THEN nothing at 1, 2, 3 s (gap not beyond 3 s), then every second from 4 s
    assert [p.t_s - T0 for p in out] == [4.0 + i for i in range(9)]
    assert {p.payload["dr_basis"] for p in out} == {"water_and_current"}


def test_sigma_grows_monotonically_whatever_the_current_says():
    # GIVEN a current estimate whose stated uncertainty wanders (seeded)
    rng = random.Random(5)
    est, ctx = PositionEstimator(), RunContext()
    start(est, ctx, cur=current_pub(T0))

    def wandering(t):
        return current_pub(t, drift_sigma_kn=rng.uniform(0.02, 1.0), set_sigma_deg=rng.uniform(1, 90))

    out = positions(outage(est, ctx, 600, heading=lambda t: rng.gauss(45, 5), log=lambda t: rng.gauss(5, 0.3),
                           current=wandering))
    sig = [p.payload["sigma_m"] for p in out]
    # THEN it never shrinks, and over 10 min it has grown well past the fix's 5 m
    assert all(b >= a for a, b in zip(sig, sig[1:]))
    assert sig[-1] > 5.0 + 0.02 * KN_TO_MPS * 600


def test_no_current_known_uses_zero_current_and_a_wider_sigma():
    # GIVEN no current ever published
    est, ctx = PositionEstimator(), RunContext()
    start(est, ctx)
    out = positions(outage(est, ctx, 300))
    last = out[-1].payload
    # THEN pure water track: 6 kn north for 300 s = 926 m north
    g = Geodesic.WGS84.Inverse(LAT0, LON0, last["lat"], last["lon"])
    assert abs(g["s12"] - 926.0) < 0.5 and abs(g["azi1"]) < 0.01
    assert last["dr_basis"] == "water_no_current"
    # AND its sigma uses no_current_sigma_kn (1 kn) with the default calibration sigmas (5 %, 3 deg)
    p = PositionParams()
    sv = math.sqrt(p.no_current_sigma_kn ** 2 + (6 * p.stw_scale_sigma) ** 2
                   + (6 * math.radians(p.heading_offset_sigma_deg)) ** 2) * KN_TO_MPS
    assert abs(last["sigma_m"] - math.hypot(5.0, sv * 300)) < 0.1


def test_calibration_from_the_current_corrects_log_and_heading():
    # GIVEN the current estimator's calibration: log reads 10 % low, compass 5 deg to port
    est, ctx = PositionEstimator(), RunContext()
    cal = dict(east=0.0, north=0.0, stw_scale=1.1, heading_offset_deg=5.0)
    start(est, ctx, cur=current_pub(T0, **cal))
    out = positions(outage(est, ctx, 600, log=lambda t: 5.0, current=lambda t: current_pub(t, **cal)))
    last = out[-1].payload
    # THEN 5.5 kn true toward 005 for 600 s
    g = Geodesic.WGS84.Inverse(LAT0, LON0, last["lat"], last["lon"])
    assert abs(g["s12"] - 5.5 * KN_TO_MPS * 600) < 0.5 and abs(g["azi1"] - 5.0) < 0.01


def test_dr_error_is_consistent_with_its_sigma_over_seeded_trials():
    # GIVEN 40 seeded outages of 2 min where the truth differs from the estimates by draws
    # of their stated sigmas (current per axis sigma/sqrt 2, log scale, heading offset)
    rng = random.Random(2026)
    cur = current_pub(T0).payload
    sigma_c = math.hypot(cur["drift_sigma_kn"], math.radians(cur["set_sigma_deg"]))
    sq_err, sigmas = [], []
    for _ in range(40):
        est, ctx = PositionEstimator(), RunContext()
        start(est, ctx, cur=current_pub(T0))
        out = positions(outage(est, ctx, 120, heading=lambda t: 30.0, log=lambda t: 6.0,
                               current=lambda t: current_pub(t)))
        ce = 1.0 + rng.gauss(0, sigma_c / math.sqrt(2))
        cn = rng.gauss(0, sigma_c / math.sqrt(2))
        k = 1.0 + rng.gauss(0, cur["stw_scale_sigma"])
        d = rng.gauss(0, cur["heading_offset_sigma_deg"])
        we, wn = to_east_north(6.0 * k, 30.0 + d)
        # truth on a local flat east/north frame with the WGS84 radii (400 m: flat to well under 1 cm)
        e_m, n_m = (we + ce) * KN_TO_MPS * 120, (wn + cn) * KN_TO_MPS * 120
        phi = math.radians(LAT0)
        M = A * (1 - E2) / (1 - E2 * math.sin(phi) ** 2) ** 1.5
        N = A / math.sqrt(1 - E2 * math.sin(phi) ** 2)
        lat_t, lon_t = LAT0 + math.degrees(n_m / M), LON0 + math.degrees(e_m / (N * math.cos(phi)))
        last = out[-1].payload
        sq_err.append(Geodesic.WGS84.Inverse(last["lat"], last["lon"], lat_t, lon_t)["s12"] ** 2)
        sigmas.append(math.sqrt(last["sigma_m"] ** 2 - 5.0 ** 2))  # the part the velocity errors explain
    rms = math.sqrt(sum(sq_err) / len(sq_err))
    # THEN the RMS error matches the integrated velocity sigma within the sampling spread of 40 trials
    assert 0.7 < rms / sigmas[0] < 1.3


def test_gnss_lost_is_raised_after_10_s_and_cleared_by_a_good_fix_with_the_dr_error():
    # GIVEN a fix, then silence; the truth moves with a 1.5 kn current while 1.0 kn is estimated
    est, ctx = PositionEstimator(), RunContext()
    start(est, ctx, cur=current_pub(T0))
    out = outage(est, ctx, 60, current=lambda t: current_pub(t))
    conds = conditions(out)
    # THEN gnss_lost is active from the tick 10 s after the last fix, as a warning, every tick
    assert conds[0].t_s == T0 + 10 and all(c.active for c in conds) and len(conds) == 51
    assert (conds[0].alert_id, conds[0].priority) == ("gnss_lost", WARNING)
    assert "No GNSS fix for 10 s" in conds[0].text and "Check the GNSS receiver" in conds[0].text
    # WHEN a good fix returns at 60 s where the truth is
    v = math.hypot(1.5, 6.0) * KN_TO_MPS * 60
    truth = Geodesic.WGS84.Direct(LAT0, LON0, math.degrees(math.atan2(1.5, 6.0)), v)
    back = list(est.step(Fix(T0 + 60.5, truth["lat2"], truth["lon2"], 6.2, 14.0, 0.9), ctx))
    # THEN the condition goes inactive and a GNSS position carries the DR error once:
    # 0.5 kn of unmodelled current for ~60 s = 15.4 m (hand), plus 0.5 s of the last step
    [c] = conditions(back)
    assert c.alert_id == "gnss_lost" and not c.active
    [p] = positions(back)
    assert p.payload["source"] == "gnss" and p.payload["sigma_m"] == 4.5
    expected = Geodesic.WGS84.Inverse(truth["lat2"], truth["lon2"], *_dr_at(60.5))["s12"]
    assert abs(p.payload["dr_error_m"] - expected) < 0.5
    assert 14.0 < p.payload["dr_error_m"] < 20.0
    nxt = positions(est.step(Fix(T0 + 61.5, truth["lat2"], truth["lon2"], 6.2, 14.0, 0.9), ctx))
    assert "dr_error_m" not in nxt[0].payload
    assert est.tick(T0 + 62, ctx) == []  # and no dead reckoning while fixes come


def _dr_at(t: float) -> tuple[float, float]:
    """Where the estimate reckons: 6 kn north plus 1 kn east for ``t`` seconds (geographiclib)."""
    g = Geodesic.WGS84.Direct(LAT0, LON0, math.degrees(math.atan2(1.0, 6.0)), math.hypot(1.0, 6.0) * KN_TO_MPS * t)
    return g["lat2"], g["lon2"]


def test_without_heading_or_log_the_last_ground_velocity_is_held():
    # GIVEN a fix at 5 kn toward 090 and no heading or log at all
    est, ctx = PositionEstimator(), RunContext()
    start(est, ctx, sog=5.0, cog=90.0)
    out = []
    for i in range(1, 121):
        out += est.tick(T0 + i, ctx)
    last = positions(out)[-1].payload
    g = Geodesic.WGS84.Inverse(LAT0, LON0, last["lat"], last["lon"])
    assert abs(g["s12"] - 5.0 * KN_TO_MPS * 120) < 0.5 and abs(g["azi1"] - 90.0) < 0.01
    assert last["dr_basis"] == "last_ground_velocity"
    assert abs(last["sigma_m"] - math.hypot(5.0, PositionParams().hold_sigma_kn * KN_TO_MPS * 120)) < 0.1


def test_a_suspect_log_is_not_used_for_dead_reckoning():
    est, ctx = PositionEstimator(), RunContext()
    start(est, ctx, sog=6.0, cog=0.0, cur=current_pub(T0, log="suspect"))
    out = positions(outage(est, ctx, 30, log=lambda t: 0.0, current=lambda t: current_pub(t, log="suspect")))
    assert out[-1].payload["dr_basis"] == "last_ground_velocity"


def test_a_jumping_fix_is_rejected_but_not_forever():
    # GIVEN steady fixes, then one 10 km away a second later (a glitch), then the receiver insists
    est, ctx = PositionEstimator(replace(PositionParams(), max_jump_rejects=2)), RunContext()
    est.step(Fix(T0, LAT0, LON0, 5.0, 0.0, 1.0), ctx)
    far = Geodesic.WGS84.Direct(LAT0, LON0, 45.0, 10_000.0)
    outs = [positions(est.step(Fix(T0 + i, far["lat2"], far["lon2"], 5.0, 0.0, 1.0), ctx)) for i in (1, 2, 3)]
    # THEN the first two are rejected, the third is believed
    assert [len(o) for o in outs] == [0, 0, 1]
    assert est.health.rejected_jump == 2
    # AND a fix with an HDOP past max_hdop is not used
    assert positions(est.step(Fix(T0 + 4, LAT0, LON0, 5.0, 0.0, 25.0), ctx)) == []
    assert est.health.rejected_hdop == 1


def test_the_cheap_distance_bound_is_never_below_the_geodesic():
    # GIVEN pairs of points all over the globe, near and far, across the antimeridian and near the poles
    # THEN the jump check's cheap bound is at least the WGS84 geodesic distance (geographiclib, the
    # outside reference; the bound decides alone only when it is below the limit), and within 50 %
    # of it for the metres-apart fixes it is meant for (so it does decide them)
    from estimators.position import distance_upper_bound_m

    rng = random.Random(9)
    for _ in range(3000):
        lat1, lon1 = rng.uniform(-89.9, 89.9), rng.uniform(-180.0, 180.0)
        step = rng.choice((10.0, 1000.0, 1e6, 1.5e7))
        g = Geodesic.WGS84.Direct(lat1, lon1, rng.uniform(0.0, 360.0), rng.uniform(0.0, step))
        exact = Geodesic.WGS84.Inverse(lat1, lon1, g["lat2"], g["lon2"])["s12"]
        bound = distance_upper_bound_m(lat1, lon1, g["lat2"], g["lon2"])
        assert bound >= exact * (1.0 - 1e-12)
        if step == 10.0 and abs(lat1) < 80.0:
            assert bound <= 1.5 * exact + 1e-6


def test_a_fix_without_hdop_takes_the_receivers_latest():
    # GIVEN a GGA-like fix with HDOP 0.9, then RMC-like fixes (no HDOP) a second apart
    from estimators.position import PositionEstimator, PositionParams
    from estimators.samples import Fix

    class Ctx:
        history = None

        def latest(self, topic):
            return None

    est, ctx = PositionEstimator(PositionParams()), RunContext()
    est.step(Fix(1000.0, 40.0, -30.0, hdop=0.9), ctx)
    pubs = est.step(Fix(1001.0, 40.00001, -30.0), ctx)
    # THEN the RMC fix is published with that HDOP and sigma = HDOP x UERE (0.9 x 5 m)
    assert pubs[0].payload["hdop"] == 0.9 and pubs[0].payload["sigma_m"] == 4.5
    # and an HDOP older than a few seconds is not carried forward
    pubs = est.step(Fix(1020.0, 40.0001, -30.0), ctx)
    assert pubs[0].payload["hdop"] is None


def test_a_new_current_is_taken_when_it_is_published_and_not_before():
    # GIVEN a 10-minute outage at 6 kn heading 000: the same current publication (1 kn toward east) seen at
    # every tick of the first five minutes, then a new one (1 kn toward north) for the last five
    east_pub, north_pub = current_pub(T0), current_pub(T0 + 300, east=0.0, north=1.0, set_deg=0.0)

    def run(current):
        est, ctx = PositionEstimator(), RunContext()
        start(est, ctx, cur=east_pub)
        p = positions(outage(est, ctx, 600, current=current))[-1].payload
        # local flat-earth metres (common practice over a mile: well within a metre here)
        return ((p["lon"] - LON0) * math.radians(1) * 6371000 * math.cos(math.radians(LAT0)),
                (p["lat"] - LAT0) * math.radians(1) * 6371000)

    east_only = run(lambda t: east_pub)
    turned = run(lambda t: east_pub if t <= T0 + 300 else north_pub)
    # THEN the set over the first five minutes only (1 kn x 300 s = 154.3 m east), and 154.3 m more north
    assert east_only[0] == pytest.approx(2 * 154.3, abs=2.0)
    assert turned[0] == pytest.approx(154.3, abs=2.0)
    assert turned[1] - east_only[1] == pytest.approx(154.3, abs=2.0)
