"""The current estimator: observability, gates, log watch, outages, calibration, payload."""

from __future__ import annotations

import dataclasses
import math

import pytest

from estimators.base import Condition, Publication
from estimators.current import Calibration, CurrentEstimator, CurrentParams
from estimators.runner import run
from estimators.samples import Fix
from tests.shared import shared_path
from tests.helpers import Keep
from tests.synth import T0, synth_passage, tacking_legs

INTERFACE_FIELDS = ("set_deg", "drift_kn", "east_kn", "north_kn", "set_sigma_deg", "drift_sigma_kn", "quality",
                    "stw_scale", "heading_offset_deg")


def drive(est, samples):
    pubs, conds = [], []
    for _, outs in run(est, samples):
        for o in outs:
            (pubs if isinstance(o, Publication) else conds).append(o)
    return pubs, conds


def test_steady_course_does_not_earn_a_calibration():
    # GIVEN 40 min on one steady course with a log 6 % low and a compass 3 deg off (seeded)
    syn = synth_passage(1, 2400, [(0.0, 40.0)], k=1.06, offset_deg=3.0)
    est = CurrentEstimator(CurrentParams())
    # WHEN the estimator runs over it
    pubs, _ = drive(est, syn.samples)
    p = CurrentParams()
    st = est.state()
    # THEN the log scale's and the offset's sigmas stay near their priors (no collapse) ...
    assert st["stw_scale_sigma"] > 0.8 * p.initial_stw_scale_sigma
    assert st["heading_offset_sigma_deg"] > 0.8 * p.initial_heading_offset_sigma_deg
    # ... the payload reports the prior, says so, and says what would help
    last = pubs[-1].payload
    assert last["stw_scale"] == 1.0 and last["heading_offset_deg"] == 0.0
    assert last["calibration"]["status"] == "not yet calibrated"
    assert "60 deg" in last["calibration"]["advice"]
    # ... and the current's own sigma is honest about it: not "valid"
    assert last["quality"] == "converging"
    err = math.hypot(st["east_kn"] - syn.current[-1][0], st["north_kn"] - syn.current[-1][1])
    assert err < 3.0 * math.hypot(st["east_sigma_kn"], st["north_sigma_kn"])


def test_tacks_calibrate_the_log_and_the_compass():
    # GIVEN 30 min of 5-min legs 90 deg apart, log 6 % low, compass 3 deg off
    syn = synth_passage(2, 1800, tacking_legs(1800, 300), k=1.06, offset_deg=3.0)
    est = CurrentEstimator(CurrentParams())
    # WHEN the estimator runs over it
    pubs, _ = drive(est, syn.samples)
    last = pubs[-1].payload
    # THEN it has learnt both within three sigma and says it is calibrated
    assert last["calibration"]["status"] == "calibrated"
    assert abs(last["stw_scale"] - 1.06) < 3 * last["stw_scale_sigma"]
    assert abs(last["heading_offset_deg"] - 3.0) < 3 * last["heading_offset_sigma_deg"]
    assert last["quality"] == "valid"
    ce, cn = syn.current[-1]
    assert math.hypot(last["east_kn"] - ce, last["north_kn"] - cn) < 0.1
    assert set(INTERFACE_FIELDS) <= set(last)


def test_gnss_velocity_jump_is_rejected_and_counted():
    # GIVEN 10 min steady, then one fix whose SOG is 4 kn too high (a GNSS glitch)
    syn = synth_passage(3, 620, [(0.0, 40.0)])
    samples = list(syn.samples)
    i = max(j for j, s in enumerate(samples) if isinstance(s, Fix) and s.t_s <= T0 + 600)
    bad = samples[i]
    samples[i] = dataclasses.replace(bad, sog_kn=bad.sog_kn + 4.0)
    est = CurrentEstimator(CurrentParams())
    before = None
    for s, _ in run(est, samples):
        if s is samples[i - 1] or (isinstance(s, Fix) and s.t_s == T0 + 599):
            before = est.state()
        if s is samples[i]:
            after = est.state()
    # THEN the jump is rejected, counted, and the estimate did not move
    assert est.health.rejected >= 1
    assert est.last_report is not None
    assert math.hypot(after["east_kn"] - before["east_kn"], after["north_kn"] - before["north_kn"]) < 0.05


def test_a_run_of_rejections_reinitialises_instead_of_locking_out():
    # GIVEN a current that jumps by 3 kn at 10 min (faster than any gate allows)
    syn = synth_passage(4, 900, [(0.0, 40.0)], current_en=(0.5, 0.0), current_steps=((600, (-1.5, 2.2)),))
    est = CurrentEstimator(CurrentParams())
    drive(est, syn.samples)
    st = est.state()
    # THEN after some rejections it reset and follows the new current
    assert est.health.resets >= 1
    assert math.hypot(st["east_kn"] + 1.5, st["north_kn"] - 2.2) < 0.5


def test_outage_holds_the_current_and_resumes_without_a_jump():
    # GIVEN a calibrated run (tacks), then 10 min without fixes, same current
    syn = synth_passage(5, 2400, tacking_legs(1500, 300) + [(1500.0, 40.0)], fix_gap=(1800, 2400 - 60))
    est = CurrentEstimator(CurrentParams())
    held, sig, first_back = [], [], None
    for s, outs in run(est, syn.samples):
        for o in outs:
            if isinstance(o, Publication) and T0 + 1810 <= o.t_s < T0 + 2340:
                held.append(o.payload)
        if isinstance(s, Fix) and s.t_s >= T0 + 2340 and first_back is None:
            first_back = est.state()
            last_held = held[-1]
    # THEN during the outage the estimate holds, is degraded and its sigma grows
    assert held and all(p["quality"] == "degraded" for p in held)
    assert len({(p["east_kn"], p["north_kn"]) for p in held}) == 1
    assert held[-1]["drift_sigma_kn"] > held[0]["drift_sigma_kn"]
    # ... and the first fix back does not make it jump
    assert math.hypot(first_back["east_kn"] - last_held["east_kn"], first_back["north_kn"] - last_held["north_kn"]) < 0.15


def test_dead_log_is_suspect_and_not_a_current():
    # GIVEN a log that reads 0.00 kn from 5 min on while the boat sails on at 6 kn
    syn = synth_passage(6, 900, [(0.0, 40.0)], log_override=lambda i, r: 0.0 if i >= 300 else r)
    est = CurrentEstimator(CurrentParams())
    pubs, conds = drive(est, syn.samples)
    later = [p.payload for p in pubs if p.t_s > T0 + 320]
    # THEN the caution is raised and no 6-kn current is reported
    assert any(c.alert_id == "log_suspect" and c.active for c in conds)
    assert all(p["drift_kn"] < 1.5 for p in later)
    assert all(p["quality"] == "degraded" and p["log"] == "suspect" for p in later)
    assert est.health.held > 0


def test_log_step_is_suspect_then_relearnt():
    # GIVEN weed: the log reads 35 % low from 10 min on, on a steady course
    syn = synth_passage(7, 1200, [(0.0, 40.0)], log_override=lambda i, r: r * 0.65 if i >= 600 else r)
    est = CurrentEstimator(CurrentParams())
    pubs, conds = drive(est, syn.samples)
    # THEN the step is seen; the held estimate never reports the log's error as current
    raised = [c for c in conds if c.alert_id == "log_suspect" and c.active]
    assert raised and raised[0].t_s < T0 + 630
    during = [p.payload for p in pubs if T0 + 620 < p.t_s < T0 + 700]
    assert during and all(p["calibration"]["status"] == "suspended" for p in during)
    assert all(p["drift_kn"] < 1.5 for p in during)


def test_calibration_round_trip_and_age_inflation():
    # GIVEN a saved calibration with small sigmas
    cal = Calibration(1.05, -2.0, 0.004, 0.2, T0 - 30 * 86400.0, 5000)
    # THEN it survives to_dict/from_dict unchanged
    assert Calibration.from_dict(cal.to_dict()) == cal
    # WHEN an estimator starts from it (a 30-day-old calibration vs a fresh one)
    old = CurrentEstimator(CurrentParams(), cal)
    fresh = CurrentEstimator(CurrentParams(), dataclasses.replace(cal, t_s=T0))
    syn = synth_passage(8, 120, [(0.0, 40.0)], k=1.05, offset_deg=-2.0)
    drive(old, syn.samples)
    drive(fresh, syn.samples)
    # THEN the old one's sigmas are inflated by its age: var + rate^2 * age (0.01^2/day * 30 days)
    p = CurrentParams()
    assert old.state()["stw_scale_sigma"] == pytest.approx(math.sqrt(0.004 ** 2 + p.calibration_age_stw_scale_per_sqrt_day ** 2 * 30), rel=0.05)
    assert fresh.state()["stw_scale_sigma"] < old.state()["stw_scale_sigma"]
    # ... and both report the saved values, the fresh one as calibrated
    assert fresh.calibration().stw_scale == pytest.approx(1.05, abs=0.01)


def test_stated_installation_calibration_loads_without_sigmas():
    cal = Calibration.from_dict({"stw_scale": 1.04, "heading_offset_deg": 1.5})
    assert cal.stw_scale_sigma is None and cal.t_s is None
    est = CurrentEstimator(CurrentParams(), cal)
    assert est.calibration().stw_scale == 1.04
    assert est.calibration().stw_scale_sigma == CurrentParams().initial_stw_scale_sigma


@pytest.mark.parametrize("bad", [{"stw_scale": "x"}, {"stw_scale": float("nan")}, {"stw_scale": 9.0},
                                 {"stw_scale_sigma": -1.0}])
def test_calibration_from_bad_dict_raises(bad):
    with pytest.raises(ValueError):
        Calibration.from_dict(bad)


def test_current_strong_with_hysteresis():
    # GIVEN a calibrated boat; the current 2.4 kn, then 1.85 kn (between the thresholds), then 1.2 kn
    cal = Calibration(1.06, 3.0, 0.003, 0.15, T0, 1000)
    syn = synth_passage(9, 1500, [(0.0, 40.0)], current_en=(2.4, 0.0),
                        current_steps=((500, (1.85, 0.0)), (1000, (1.2, 0.0))))
    est = CurrentEstimator(CurrentParams(), cal)
    _, conds = drive(est, syn.samples)
    strong = [c for c in conds if c.alert_id == "current_strong"]
    # THEN raised once in the first part, kept through 1.85 kn, cleared after 1.2 kn
    assert strong[0].active and strong[0].t_s < T0 + 500
    changes = [c for i, c in enumerate(strong) if i == 0 or c.active != strong[i - 1].active]
    assert [c.active for c in changes] == [True, False]
    assert changes[1].t_s > T0 + 1000
    assert "check" in strong[0].text
    # AND while it lasts each estimate says its figure again (the alert follows the current), and the
    # all-clear gives the last one
    assert len({c.text for c in strong if c.active}) > 1
    assert changes[1].values["drift_kn"] <= CurrentParams().current_strong_clear_kn
    assert f"eased to {changes[1].values['drift_kn']:.1f} kn" in changes[1].text


def test_dead_log_in_the_real_capture_is_rejected():
    # GIVEN the real capture with a dead log (VHW 0.00 kn while SOG is 5 kn), through the whole pipeline
    path = shared_path("real-captures", "robustness", "nmea-reader", "two-gps-dead-log-garbage-truncated.nmea")
    from daemon.core.config import load_config
    from daemon.commands.replay import run_replay

    sink = Keep()
    run_replay([str(path)], load_config(None), progress=False, extra_sinks=[sink])
    current = [m.payload for m in sink.messages if m.topic.endswith("/current")]
    alerts = [m.payload for m in sink.messages if m.topic.endswith("/alerts/log_suspect")]
    # THEN no current of anything like 5 kn is reported, and the log is called suspect
    assert all((p.get("drift_kn") or 0.0) < 1.0 for p in current)
    assert alerts and alerts[0]["state"] == "active"


def test_a_learnt_calibration_short_of_the_threshold_is_reported_but_not_called_calibrated():
    # GIVEN tacks that teach the log and the compass, and a "calibrated" threshold no filter reaches
    syn = synth_passage(2, 1800, tacking_legs(1800, 300), k=1.06, offset_deg=3.0)
    p = dataclasses.replace(CurrentParams(), calibrated_stw_scale_sigma=0.0001, calibrated_heading_offset_sigma_deg=0.01)
    est = CurrentEstimator(p)
    # WHEN the estimator runs over them
    pubs, _ = drive(est, syn.samples)
    last = pubs[-1].payload
    # THEN the status does not say calibrated ...
    assert last["calibration"]["status"] == "not yet calibrated"
    # ... but what was learnt (sigma below the prior's) is reported with its sigma, not the prior
    assert last["stw_scale_sigma"] < p.initial_stw_scale_sigma / 2
    assert abs(last["stw_scale"] - 1.06) < 3 * last["stw_scale_sigma"]
    assert abs(last["heading_offset_deg"] - 3.0) < 3 * last["heading_offset_sigma_deg"]


def test_retired_parameter_names_are_not_reused():
    # GIVEN the names removed from [current] (estimators/current/params.py RETIRED)
    from dataclasses import fields

    from estimators.current.params import RETIRED
    # THEN none of them names a parameter again: an old config setting one is refused, not misread
    assert RETIRED and not set(RETIRED) & {f.name for f in fields(CurrentParams)}


def held_and_fused(settle_s: float) -> tuple[list[float], list[float]]:
    """Fix times (s from T0) held through a turn and fused, over one 90-deg course change at 300 s."""
    syn = synth_passage(7, 600, [(0.0, 40.0), (300.0, 130.0)])
    est = CurrentEstimator(CurrentParams(turn_settle_s=settle_s))
    held, fused = [], []
    for s, _ in run(est, syn.samples, tick=False):
        if not isinstance(s, Fix):
            continue
        if est.health.turning > len(held):
            held.append(s.t_s - T0)
        elif est.last_report is not None and est.last_report.t_s == s.t_s:
            fused.append(s.t_s - T0)
    return held, fused


def test_turn_hold_lasts_turn_settle_s_beyond_the_turn():
    # GIVEN one course change of 90 deg at 10 deg/s (the synth's turn: 300 s to 309 s), run with no
    # settling and with 45 s of it
    held0, fused0 = held_and_fused(0.0)
    held45, fused45 = held_and_fused(45.0)
    # THEN without settling the hold covers the turn and ends within seconds of it (the 3-s EMA's rate
    # falls below turn_rate_hold_deg_s), one unbroken stretch with nothing fused inside it
    assert held0 and 300.0 <= held0[0] <= 303.0 and 309.0 <= held0[-1] <= 320.0
    assert held0 == [held0[0] + i for i in range(len(held0))]
    # ... and with settling the first fix fused after the turn comes turn_settle_s after the turn's last
    # epoch (the parameter's definition in params.py: the hold lasts this long after a turn ends)
    first_after = min(t for t in fused45 if t > held45[0])
    assert first_after == held0[-1] + 45.0
    assert held45 == [held45[0] + i for i in range(len(held45))] and held45[-1] == held0[-1] + 44.0
    # ... while the fixes before the turn were fused alike in both runs
    assert [t for t in fused45 if t < 300.0] == [t for t in fused0 if t < 300.0]


def test_a_calibration_step_holds_valid_back_while_the_current_settles():
    # GIVEN an hour of 20-minute tacks with the log 6 % slow and the compass 3 deg low (the synthetic passage)
    p = CurrentParams()
    syn = synth_passage(17, 3600, tacking_legs(3600, 1200))
    est = CurrentEstimator(p)
    pubs = [o for o in drive(est, syn.samples)[0] if o.topic == "current" and o.payload["stw_scale"] is not None]
    # WHEN the calibration fits move the log scale or the compass offset by more than their new sigma
    steps = [b.t_s for a, b in zip(pubs, pubs[1:])
             if abs(b.payload["stw_scale"] - a.payload["stw_scale"]) > b.payload["stw_scale_sigma"]
             or abs(b.payload["heading_offset_deg"] - a.payload["heading_offset_deg"])
             > b.payload["heading_offset_sigma_deg"]]
    assert steps, "no calibration step on a tacking passage"
    # THEN for calibration_settle_s after each the current is never 'valid', and says why (the first publication
    # to show a step comes up to a second after the fix that made it: the publications are each second)
    settling = [q for q in pubs if any(0.0 <= q.t_s - t < p.calibration_settle_s - 1.0 for t in steps)]
    assert settling and all(q.payload["quality"] != "valid" for q in settling)
    assert any("relearnt" in q.payload["quality_reason"] for q in settling)
    # ... and 'valid' is said again once it has passed (the step does not hold the quality back for good)
    assert pubs[-1].payload["quality"] == "valid"


def test_the_jacobians_low_pass_keeps_its_memory_across_an_outage():
    # GIVEN 20 min of one steady course whose log reads 5.4 and 5.6 kn in turn (mean 5.5), then no fix for
    # 30 min, then a reading of 5.8 kn (within the log's noise: no manoeuvre)
    from estimators.current.model import WaterInputs
    est = CurrentEstimator(CurrentParams())

    def jacobian_speed(t, speed):
        w = WaterInputs(speed_kn=speed, heading_deg=140.0, heel_deg=None)
        est._slow_inputs(t, w)
        return w.slow_speed_kn

    for i in range(1200):
        jacobian_speed(T0 + i, 5.4 if i % 2 else 5.6)
    # WHEN the fixes come back
    after = [jacobian_speed(T0 + 1200 + 1800 + i, 5.8) for i in range(2)]
    # THEN the Jacobian's speed is still the mean before the gap: one reading is not the boat's speed
    # (a low-pass restarted from it, as before, held its noise: 5.8 here), and the next moves by a step's share
    assert after[0] == pytest.approx(5.5, abs=0.01)
    assert after[1] == pytest.approx(5.5, abs=0.01)
