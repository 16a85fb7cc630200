"""heading_suspect: a compass frozen across a course change is caught, set aside, and taken back.

Check values are facts of the trade (common practice): a working compass on a
boat under way yaws by degrees within seconds; a course change turns the
ground track within a minute, a current's edge over minutes. The simulator's
``stuck_compass`` scenario freezes the compass five minutes before a 95 degree
course change and frees it ten minutes after.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from daemon.core.assembly import build
from daemon.core.config import load_config
from daemon.core.pipeline import Pipeline
from daemon.core.readings import Reading
from estimators.base import Condition, Distrust, EstimatorBase, Publication
from estimators.integrity import HeadingIntegrity
from estimators.samples import Fix, Heading, Pressure
from tests.helpers import FakeAlerts, Keep
from tools.simulator import scenarios
from tools.simulator.run import simulate


def drive(est, samples):
    out = []
    for s in samples:
        out.extend(est.step(s, None))
    return out


def passage(heading_of, cog_of, seconds, sog=6.0, heading_hz=2, seed=0):
    """Interleaved headings (``heading_hz``) and 1-Hz fixes; heading_of/cog_of: t -> degrees."""
    rng = np.random.default_rng(seed)
    samples = []
    for i in range(seconds * heading_hz):
        t = i / heading_hz
        samples.append(Heading(t, heading_of(t, rng) % 360.0))
        if i % heading_hz == 0:
            samples.append(Fix(t + 0.01, 40.0, -30.0, sog, cog_of(t) % 360.0))
    return samples


def yaw(rng):
    return rng.normal(0.0, 2.0)  # wave yaw and steering, degrees (common practice: several degrees)


def turn(t, start=120.0, rate=6.0, by=95.0):
    return min(max(0.0, (t - start) * rate), by)


def test_frozen_compass_across_a_turn_raises_and_distrusts_within_seconds():
    # GIVEN a compass that reads 020 exactly while the track turns from 020 to 115 at 6 deg/s from t = 120 s
    est = HeadingIntegrity()
    out = drive(est, passage(lambda t, r: 20.0, lambda t: 20.0 + turn(t), 300))
    # THEN the warning and the distrust come together, within 10 s of the turn's start
    raised = [o for o in out if isinstance(o, Condition) and o.active]
    distrust = [o for o in out if isinstance(o, Distrust) and o.active]
    assert len(raised) == 1 and len(distrust) == 1
    assert raised[0].alert_id == "heading_suspect" and raised[0].priority == "warning"
    assert 120.0 < raised[0].t_s <= 130.0
    assert distrust[0].kind == "heading" and distrust[0].since_s <= 121.0
    assert "Compass stuck at 020°" in raised[0].text
    assert est.suspect


def test_frozen_compass_coming_back_ends_the_fault():
    est = HeadingIntegrity()
    frozen = passage(lambda t, r: 20.0, lambda t: 20.0 + turn(t), 300)
    alive = [Heading(300.5, 115.4), Fix(301.0, 40.0, -30.0, 6.0, 116.0)]
    out = drive(est, frozen + alive)
    assert [o.active for o in out if isinstance(o, Condition)] == [True, False]
    assert [o.active for o in out if isinstance(o, Distrust)] == [True, False]
    assert not est.suspect


def test_a_live_compass_that_turns_with_the_track_is_never_suspect():
    est = HeadingIntegrity()
    out = drive(est, passage(lambda t, r: 20.0 + turn(t) + yaw(r), lambda t: 20.0 + turn(t), 400))
    assert out == []


def test_a_current_edge_turning_the_track_under_a_yawing_compass_is_not_suspect():
    # GIVEN a steady heading with wave yaw while the track swings 40 deg in 30 s (a sharp current shear)
    est = HeadingIntegrity()
    out = drive(est, passage(lambda t, r: 20.0 + yaw(r), lambda t: 20.0 + turn(t, rate=40.0 / 30.0, by=40.0), 400))
    assert out == []


def test_a_frozen_compass_on_a_steady_course_or_when_slow_is_not_judged():
    est = HeadingIntegrity()
    assert drive(est, passage(lambda t, r: 20.0, lambda t: 20.0, 300)) == []      # nothing to compare
    est = HeadingIntegrity()
    assert drive(est, passage(lambda t, r: 20.0, lambda t: 20.0 + turn(t), 300, sog=1.0)) == []  # COG noise


class Watcher(EstimatorBase):
    name = "watcher"
    accepts = (Heading,)
    sees_distrusted = True

    def __init__(self):
        self.seen = []

    def step(self, sample, ctx):
        self.seen.append(sample.t_s)
        if sample.t_s == 2.0:
            return [Distrust(2.0, "heading", True, "test", since_s=1.5)]
        if sample.t_s == 5.0:
            return [Distrust(5.0, "heading", False, "test")]
        return []


class Fuser(EstimatorBase):
    name = "fuser"
    accepts = (Heading, Pressure)

    def __init__(self):
        self.seen, self.hooks = [], []

    def step(self, sample, ctx):
        self.seen.append(sample.t_s)
        return [Publication(sample.t_s, "fused", {"n": len(self.seen)})]

    def on_distrust(self, kind, active, since_s):
        self.hooks.append((kind, active, since_s))


def test_pipeline_withholds_a_distrusted_kind_from_fusers_only_and_says_so_in_status():
    watcher, fuser, sink = Watcher(), Fuser(), Keep()
    pipe = Pipeline([watcher, fuser], [sink], FakeAlerts(), prefix="boat", status_every_s=1.0)
    for t in (1.0, 2.0, 3.0, 3.5, 4.0, 5.0, 6.0):
        sample = Pressure(t, 1010.0) if t == 3.5 else Heading(t, 20.0)
        pipe.feed(Reading("sensor", sample, t))
    assert watcher.seen == [1.0, 2.0, 3.0, 4.0, 5.0, 6.0]
    # whether a sample is withheld is decided as it enters: 2.0 (which raised the distrust) is fused,
    # 3.0 to 5.0 are not (5.0 ended it), 6.0 is again; the pressure is never touched
    assert fuser.seen == [1.0, 2.0, 3.5, 6.0]
    assert fuser.hooks == [("heading", True, 1.5), ("heading", False, None)]
    statuses = [m.payload for m in sink.messages if m.topic == "boat/status"]
    during = [s["distrusted"] for s in statuses if s["distrusted"]]
    assert during and during[-1]["heading"]["reason"] == "test" and during[-1]["heading"]["withheld"] >= 1
    assert statuses[-1]["distrusted"] == {}
    assert [h.t_s for h in pipe.ctx.history.between(Heading, 0.0, 10.0)] == [1.0, 2.0, 6.0]


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_stuck_compass_scenario_through_the_service_pipeline(seed):
    # GIVEN the simulator's stuck compass (frozen 0:25-0:40, a 95 deg course change at 0:30) through `build`
    scenario = scenarios.stuck_compass()
    run = simulate(scenario, seed)
    sink = Keep()
    parts = build(load_config(None), [sink], live=False)
    for s in run.samples:
        parts.pipeline.feed(Reading("sim", s, s.t_s))
    t0 = scenario.start_utc
    rel = lambda m: m.t_s - t0  # noqa: E731
    alerts = [m for m in sink.messages if m.topic == "offwatch/alerts/heading_suspect"]
    currents = [m for m in sink.messages if m.topic == "offwatch/current" and m.payload["east_kn"] is not None]
    # THEN the warning is raised within 30 s of the course change
    assert alerts and 30 * 60 < rel(alerts[0]) <= 30 * 60 + 30
    assert alerts[0].payload["priority"] == "warning"
    # and while the compass is set aside the current never claims to be valid
    during = [m for m in currents if rel(alerts[0]) + 5 <= rel(m) < 40 * 60]
    assert during and all(m.payload["quality"] != "valid" for m in during)
    statuses = [m.payload for m in sink.messages if m.topic == "offwatch/status" and 31 * 60 < rel(m) < 40 * 60]
    assert statuses and all("heading" in s["distrusted"] for s in statuses)
    # and within 2 min of the compass moving again the current is back within 0.3 kn of the truth
    after = [m for m in currents if 42 * 60 <= rel(m) <= 60 * 60]

    def error(m):
        truth = run.truth_at(m.t_s)
        return math.hypot(m.payload["east_kn"] - truth.current_east_kn, m.payload["north_kn"] - truth.current_north_kn)

    assert after and max(error(m) for m in after) < 0.35
    assert sorted(error(m) for m in after)[len(after) // 2] < 0.3
    # and while it is set aside, the current's own sigma owns up to what the lying compass fed it:
    # the vector error within 3 published drift sigmas (sqrt 2 for the two axes)
    late = [m for m in during if rel(m) >= rel(alerts[0]) + 30]
    assert late and all(error(m) <= 3 * math.sqrt(2) * m.payload["drift_sigma_kn"] for m in late)


def test_a_real_compass_under_way_all_round_the_compass_is_never_suspect():
    # GIVEN the shared 94-minute capture under way in a bay, headings all round the compass from an
    # autopilot's HDG/HDT at ~1 Hz (SOURCES.md), WHEN it replays through the whole pipeline
    from daemon.commands.replay import run_replay
    from tests.shared import shared_path

    path = shared_path("real-captures", "under-way-94min-hdg-hdt-rmc.nmea")
    keep = Keep()
    run_replay([str(path)], load_config(None), extra_sinks=[keep], progress=False)
    # THEN the compass is believed throughout: no heading_suspect, nothing withheld
    assert not [m for m in keep.messages if m.topic.endswith("/alerts/heading_suspect")]
    statuses = [m.payload for m in keep.messages if m.topic.endswith("/status")]
    assert len(statuses) > 500 and all(s["distrusted"] == {} for s in statuses)
    # and the display topic carried the compass (HDT, true) and its age
    shown = [m.payload for m in keep.messages if m.topic.endswith("/instruments") and "heading_deg" in m.payload]
    assert len(shown) > 4000 and all(0.0 <= p["heading_age_s"] < 30.0 for p in shown[100:])


def test_one_bad_course_over_ground_under_a_still_compass_is_not_a_fault():
    # GIVEN a compass reading still (autopilot, calm) and one multipath fix with its COG 60 deg off
    est = HeadingIntegrity()
    samples = passage(lambda t, r: 20.0, lambda t: 80.0 if t == 150.0 else 20.0, 300)
    # THEN one fix cannot convict it (two in a row must)
    assert drive(est, samples) == []


class ScanEveryFix(HeadingIntegrity):
    """The same watch without the straight-leg shortcut: every fix scans the whole window."""

    def _turned_in_window(self) -> bool:
        return True


@pytest.mark.parametrize("seed", range(6))
def test_the_straight_leg_shortcut_never_changes_what_is_found(seed):
    # GIVEN a compass that freezes and thaws while the track wanders, turns by about the threshold (30 deg)
    # either way, crosses north and pauses (fixes apart by more than the window); invented, seeded
    rng = np.random.default_rng(seed)
    samples, t, cog, heading = [], 0.0, float(rng.uniform(0, 360)), 0.0
    frozen = False
    for _ in range(4000):
        t += float(rng.choice([0.5, 1.0, 1.0, 1.0, 90.0], p=[0.3, 0.3, 0.2, 0.195, 0.005]))
        if rng.random() < 0.02:
            cog += float(rng.choice([-1, 1]) * rng.uniform(25.0, 35.0))  # a turn near turn_deg, at once
        else:
            cog += float(rng.normal(0.0, 3.0))
        if rng.random() < 0.01:
            frozen = not frozen
        heading = heading if frozen else cog + float(rng.normal(0.0, 2.0))
        samples.append(Heading(t, heading % 360.0))
        samples.append(Fix(t + 0.01, 40.0, -30.0, 6.0, cog % 360.0))
    quick, full = HeadingIntegrity(), ScanEveryFix()
    # THEN both say the same at every sample (the scan's own tests above say what it finds)
    said = [(q, f) for s in samples for q, f in [(list(quick.step(s, None)), list(full.step(s, None)))]]
    assert all(q == f for q, f in said)
    # and the case is not empty: the compass was convicted, and cleared, at least once
    assert any(isinstance(o, Distrust) and o.active for q, _ in said for o in q)


def test_the_straight_leg_shortcut_sees_every_turn_in_the_window():
    # GIVEN fixes whose COGs stay within a few degrees, then one turn_deg away across north (350 -> 020)
    est = HeadingIntegrity()
    est.step(Heading(0.0, 350.0), None)
    for i in range(20):
        est.step(Fix(float(i), 40.0, -30.0, 6.0, (350.0 + (i % 3)) % 360.0), None)
        assert not est._turned_in_window()  # within 2 deg of every earlier fix: nothing to scan
    est.step(Fix(20.0, 40.0, -30.0, 6.0, 20.0), None)
    assert est._turned_in_window()  # 30 deg from the fix at 350: the scan must run
    # and once that fix has left the window (60 s), the last turn is no longer a turn
    est.step(Fix(100.0, 40.0, -30.0, 6.0, 21.0), None)
    assert not est._turned_in_window()
