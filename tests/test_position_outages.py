"""Dead reckoning when every feed stops at once, and a GNSS receiver that freezes.

Check values: WGS84 geodesics from geographiclib (Karney 2013) as the truth
the boat sails; 1 kn = 1852/3600 m/s exactly (the definition of the knot).
The velocity sigma is written out here from the module's documented budget,
independently of the code. Places are invented open-ocean spots.
"""

from __future__ import annotations

import math

from geographiclib.geodesic import Geodesic

from daemon.intake.counters import Counters
from daemon.intake.ingest import Ingest
from estimators.angles import KN_TO_MPS
from estimators.base import Condition, Publication
from estimators.position import PositionEstimator
from estimators.runner import RunContext
from estimators.samples import Fix, Heading, WaterSpeed

T0 = 1_780_000_000.0
LAT0, LON0 = 38.0, -35.0
GEOD = Geodesic.WGS84
WATER_KN, HEADING = 5.8, 0.0  # through the water, due north
CUR_E, CUR_N = 1.0, 0.0  # a 1 kn current setting east
GROUND_KN = math.hypot(WATER_KN + CUR_N, CUR_E)
GROUND_COG = math.degrees(math.atan2(CUR_E, WATER_KN + CUR_N))


def current_pub(t: float) -> Publication:
    return Publication(t, "current", {
        "east_kn": CUR_E, "north_kn": CUR_N, "drift_kn": 1.0, "set_deg": 90.0, "drift_sigma_kn": 0.1,
        "set_sigma_deg": 10.0, "quality": "valid", "stw_scale": 1.0, "heading_offset_deg": 0.0,
        "stw_scale_sigma": 0.02, "heading_offset_sigma_deg": 1.0, "log": "trusted"})


def true_position(t: float) -> tuple[float, float]:
    g = GEOD.Direct(LAT0, LON0, GROUND_COG, GROUND_KN * KN_TO_MPS * (t - T0))
    return g["lat2"], g["lon2"]


def sail(est, ctx, t_from: int, t_to: int, *, fixes=True, sensors=True, sog=True, fix_of=None) -> list:
    """One second at a time: fixes (GGA-like without SOG when ``sog`` is false), heading and log, a tick."""
    out = []
    for i in range(t_from, t_to + 1):
        t = T0 + i
        if sensors:
            for s in (Heading(t - 0.5, HEADING), WaterSpeed(t - 0.5, WATER_KN)):
                ctx.history.add(s)
            ctx.note([current_pub(t)])
        if fixes:
            fix = fix_of(t) if fix_of else Fix(t, *true_position(t), GROUND_KN if sog else None,
                                             GROUND_COG if sog else None, 1.0, t)
            out += est.step(fix, ctx)
        out += est.tick(t, ctx)
    return out


def dr_positions(out) -> list[Publication]:
    return [o for o in out if isinstance(o, Publication) and o.payload["source"] == "dead_reckoning"]


def lost(out) -> list[Condition]:
    return [o for o in out if isinstance(o, Condition) and o.alert_id == "gnss_lost"]


def test_every_feed_cut_at_once_dead_reckoning_keeps_sailing():
    # GIVEN 60 s of sailing with GGA-like fixes (no SOG field), heading, log and a known current
    est, ctx = PositionEstimator(), RunContext()
    sail(est, ctx, 0, 60, sog=False)
    # WHEN every feed stops at once (a multiplexer failing) and only the clock ticks on for 70 s
    out = sail(est, ctx, 61, 130, fixes=False, sensors=False)
    pubs = dr_positions(out)
    # THEN the reckoning never stands still: the last water velocity plus the current, every second
    assert pubs and all(abs(p.payload["sog_kn"] - GROUND_KN) < 0.01 for p in pubs)
    assert all(abs(p.payload["cog_deg"] - GROUND_COG) < 0.2 for p in pubs)
    assert pubs[-1].payload["dr_basis"] == "last_water_and_current"
    # AND it stays on the boat's true track (geographiclib's geodesic) within a few metres after 70 s
    lat, lon = true_position(T0 + 130)
    err_m = GEOD.Inverse(lat, lon, pubs[-1].payload["lat"], pubs[-1].payload["lon"])["s12"]
    assert err_m < 5.0
    # AND its sigma grows as the budget says: sigma0 (HDOP 1 x UERE 5 m) and the velocity sigma x time
    sigma_v_kn = math.sqrt(0.1**2 + (1.0 * math.radians(10.0))**2 + (WATER_KN * 0.02)**2
                           + (WATER_KN * math.radians(1.0))**2 + 0.5**2)
    expect = math.hypot(5.0, sigma_v_kn * KN_TO_MPS * 70.0)
    assert abs(pubs[-1].payload["sigma_m"] - expect) < 0.02 * expect + 2.0
    sigmas = [p.payload["sigma_m"] for p in pubs]
    assert sigmas == sorted(sigmas)
    # AND gnss_lost is raised with a readable text (no ISO time, degrees and decimal minutes)
    text = lost(out)[-1].text
    assert "near 38°00.1′N 035°00.0′W" in text and "2026-" not in text and "the last at 20:27 UTC" in text


def test_no_log_or_compass_at_all_holds_the_last_moving_ground_velocity_from_the_fixes():
    # GIVEN a GGA-only receiver (no SOG) and neither log nor compass
    est, ctx = PositionEstimator(), RunContext()
    sail(est, ctx, 0, 30, sog=False, sensors=False)
    # WHEN the fixes stop
    pubs = dr_positions(sail(est, ctx, 31, 60, fixes=False, sensors=False))
    # THEN the ground velocity between the last two fixes is held, not 0 kn toward 000°
    assert pubs and all(p.payload["dr_basis"] == "last_ground_velocity" for p in pubs)
    assert abs(pubs[-1].payload["sog_kn"] - GROUND_KN) < 0.05
    assert abs(pubs[-1].payload["cog_deg"] - GROUND_COG) < 0.5


def frozen_at(t_freeze: float, *, sog: float | None = GROUND_KN, clock_stops: bool = True):
    """A receiver that repeats the fix of ``t_freeze`` (the same sentence) from then on."""
    lat_f, lon_f = true_position(t_freeze)

    def fix_of(t: float) -> Fix:
        if t < t_freeze:
            return Fix(t, *true_position(t), GROUND_KN, GROUND_COG, 1.0, t)
        return Fix(t, lat_f, lon_f, sog, GROUND_COG, 1.0, t_freeze if clock_stops else t)
    return fix_of


def test_a_gnss_frozen_on_one_fix_while_the_log_says_the_boat_moves_is_stale():
    # GIVEN a receiver that freezes at 60 s, repeating one sentence while the boat sails at 5.9 kn
    est, ctx = PositionEstimator(), RunContext()
    out = sail(est, ctx, 0, 300, fix_of=frozen_at(T0 + 60, clock_stops=False))
    # THEN within the time the boat needs for 50 m (about 17 s at 5.9 kn) plus gnss_lost_after_s
    # the position is dead reckoning from the last good fix, moving, and gnss_lost says the receiver froze
    first_dr = dr_positions(out)[0]
    assert first_dr.t_s - T0 <= 60 + 50 / (GROUND_KN * KN_TO_MPS) + 2
    conds = lost(out)
    assert conds and conds[0].t_s - T0 <= 60 + 50 / (GROUND_KN * KN_TO_MPS) + 1 + 10
    assert conds[-1].text.startswith("GNSS frozen: the receiver has repeated one position since")
    assert conds[-1].values["frozen"] == "position"
    last = dr_positions(out)[-1]
    lat, lon = true_position(T0 + 300)
    assert GEOD.Inverse(lat, lon, last.payload["lat"], last.payload["lon"])["s12"] < 10.0
    assert last.payload["gnss_frozen"] == "position" and est.health.frozen == 1
    # WHEN the receiver comes back with new fixes
    back = sail(est, ctx, 301, 305)
    # THEN GNSS is the source again and the all-clear says what it was and how far off the reckoning was
    gone = [c for c in lost(back) if not c.active]
    assert gone and gone[0].text.startswith("GNSS receiver frozen; fixes back, dead reckoning was")
    assert [p.payload["source"] for p in back if isinstance(p, Publication)][-1] == "gnss"


def test_a_receiver_clock_that_stops_is_stale_even_at_anchor():
    # GIVEN a boat at anchor (no log, SOG 0, one position) whose receiver time stops at 60 s
    est, ctx = PositionEstimator(), RunContext()
    still = lambda t: Fix(t, LAT0, LON0, 0.0, None, 1.0, min(t, T0 + 60))  # noqa: E731
    out = sail(est, ctx, 0, 120, sensors=False, fix_of=still)
    # THEN gnss_lost after frozen_time_s (30 s) of a clock standing still, saying so
    conds = lost(out)
    assert conds and 90 <= conds[0].t_s - T0 <= 92
    assert "clock has stood still" in conds[0].text


def test_a_static_hold_receiver_at_anchor_is_not_taken_for_frozen():
    # GIVEN a boat at anchor in a 2 kn stream: the log reads 2 kn, the current estimate cancels it,
    # and a receiver in static hold repeats one position with SOG 0 (its clock running)
    est, ctx = PositionEstimator(), RunContext()
    for i in range(0, 600):
        t = T0 + i
        ctx.history.add(Heading(t - 0.5, 180.0))
        ctx.history.add(WaterSpeed(t - 0.5, 2.0))
        ctx.note([Publication(t, "current", {**current_pub(t).payload, "east_kn": 0.0, "north_kn": 2.0})])
        out = list(est.step(Fix(t, LAT0, LON0, 0.0, None, 1.0, t), ctx)) + list(est.tick(t, ctx))
        # THEN every position is the receiver's and nothing is raised
        assert not lost(out)
    assert est.health.frozen == 0


def test_live_ingest_gives_each_fix_its_receiver_time():
    class Var:
        def note_position(self, *a): pass
        def note_sentence_variation(self, *a): pass
        def east_deg(self, t): return None
    ing = Ingest("gps", counters=Counters(), variation=Var(), live=True, allow_no_checksum=True)
    line = b"$GPRMC,084000.00,A,4056.2000,N,03220.8000,W,5.8,120.0,021226,,,A\r\n"
    items = ing.feed(line, 1_796_300_000.0) + ing.feed(line, 1_796_300_005.0)
    fixes = [r.sample for r in items if isinstance(getattr(r, "sample", None), Fix)]
    # 2026-12-02 08:40:00 UTC, twice: the clock stood still while the receive time moved on
    assert [f.gnss_time_s for f in fixes] == [1_796_200_800.0, 1_796_200_800.0]
    assert [f.t_s for f in fixes] == [1_796_300_000.0, 1_796_300_005.0]


def test_a_gap_in_the_data_between_two_equal_positions_is_not_a_frozen_receiver():
    # GIVEN a logger switched off for two hours: the fix before and the fix after have one position
    # (a capture with two pieces; the boat lay still, its receiver says SOG 5 from before the gap)
    est, ctx = PositionEstimator(), RunContext()
    est.step(Fix(T0, LAT0, LON0, 5.0, 228.0, 1.0, T0), ctx)
    est.step(Fix(T0 + 1, LAT0, LON0, 5.0, 228.0, 1.0, T0 + 1), ctx)
    out = list(est.step(Fix(T0 + 7200, LAT0, LON0, 5.0, 228.0, 1.0, T0 + 7200), ctx))
    # THEN the fix after the gap is used: GNSS, nothing frozen
    assert est.health.frozen == 0
    assert [p.payload["source"] for p in out if isinstance(p, Publication)] == ["gnss"]
