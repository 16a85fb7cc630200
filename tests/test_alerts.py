"""The alert machinery: lifecycle, minimum times, re-announcing, snapshot/restore,
and the threshold hysteresis the estimators use.

The lifecycle checked here is the one interface.md fixes from the trade's
bridge alert management (IEC 62923-1 style, from memory): alarms and warnings
are acknowledged and stay listed once rectified until they are; cautions are
never acknowledged and clear with their condition.
"""

from __future__ import annotations

import json
import random
from dataclasses import replace

import pytest

from daemon.core.alerts import AlertManager, AlertParams
from daemon.errors import ConfigError
from daemon.core.payloads import ADVISORY, iso_utc
from estimators.base import ALARM, CAUTION, WARNING, Condition
from estimators.params import check
from estimators.thresholds import Hysteresis

T0 = 1_780_000_000.0  # an invented passage's data time, UNIX s

FAST = AlertParams(raise_after_alarm_s=2.0, raise_after_warning_s=5.0, raise_after_caution_s=10.0,
                   clear_after_alarm_s=10.0, clear_after_warning_s=30.0, clear_after_caution_s=30.0,
                   reannounce_alarm_s=30.0, reannounce_warning_s=120.0)


def cond(t: float, active: bool, alert_id: str = "pressure_fall", priority: str = WARNING, **values) -> Condition:
    """A condition whose text stays the same (a changed text is new figures, published as an update)."""
    return Condition(T0 + t, alert_id, priority, active, f"seen {alert_id}; check the barometer.", values)


def run(mgr: AlertManager, t_from: float, t_to: float, active: bool | None = None, alert_id: str = "pressure_fall",
        priority: str = WARNING) -> list:
    """Tick once a second over [t_from, t_to], asserting the condition each second when ``active`` is given."""
    out = []
    for i in range(int(t_from), int(t_to) + 1):
        if active is not None:
            out += mgr.on_condition(cond(i, active, alert_id, priority))
        out += mgr.tick(T0 + i)
    return out


def states(messages) -> list[tuple[float, str, bool, int]]:
    return [(m.t_s - T0, m.payload["state"], m.payload["condition"], m.payload["repeat"]) for m in messages]


# -- raising and clearing with minimum times -------------------------------------------

def test_warning_is_raised_only_after_its_minimum_time():
    # GIVEN a warning that needs its condition for 5 s
    mgr = AlertManager(FAST)
    # WHEN the condition holds from t = 0 s, ticked once a second
    out = run(mgr, 0, 10, active=True)
    # THEN exactly one message, at t = 5 s, active, with the condition true
    assert states(out) == [(5.0, "active", True, 0)]
    msg = out[0]
    assert msg.topic == "offwatch/alerts/pressure_fall"
    assert (msg.retain, msg.qos, msg.kind) == (True, 1, "alert")
    assert msg.payload["since"] == iso_utc(T0 + 5)
    assert msg.payload["text"].endswith(ADVISORY)
    assert list(msg.payload)[0] == "time"


def test_a_condition_said_once_is_raised_by_the_ticks():
    # GIVEN an estimator that reports only changes (current_strong, pressure_fall do)
    mgr = AlertManager(FAST)
    assert mgr.on_condition(cond(0, True)) == []
    # WHEN only ticks follow THEN the minimum time runs out on a tick
    assert states(run(mgr, 1, 8)) == [(5.0, "active", True, 0)]
    # AND a single all-clear later clears an acknowledged one after the clear time, by ticks alone
    mgr.acknowledge("pressure_fall", T0 + 9)
    assert mgr.on_condition(cond(10, False)) == []
    assert states(run(mgr, 11, 45)) == [(40.0, "cleared", False, 0)]


def test_a_condition_with_an_unknown_priority_is_ignored():
    mgr = AlertManager(FAST)
    assert mgr.on_condition(Condition(T0, "front", "urgent", True, "x")) == []
    assert mgr.ignored_conditions == 1 and run(mgr, 0, 20) == []


def test_topic_prefix_is_a_constructor_argument():
    mgr = AlertManager(FAST, prefix="fleet/aurora/")
    out = run(mgr, 0, 6, active=True)
    assert [m.topic for m in out] == ["fleet/aurora/alerts/pressure_fall"]


def test_a_condition_hovering_at_the_threshold_does_not_chatter():
    # GIVEN a seeded condition that flips at random, never holding 5 s on end
    rng = random.Random(7)
    mgr = AlertManager(FAST)
    out, t, active = [], 0, False
    while t < 600:
        hold = rng.randint(1, 4)
        for i in range(t, t + hold):
            out += mgr.on_condition(cond(i, active))
            out += mgr.tick(T0 + i)
        t, active = t + hold, not active
    # THEN nothing was ever raised
    assert out == []
    assert mgr.listed() == []


def test_a_raised_warning_hovering_below_its_clear_time_stays_steady():
    # GIVEN a warning raised at 5 s and acknowledged
    mgr = AlertManager(FAST)
    run(mgr, 0, 6, active=True)
    assert states(mgr.acknowledge("pressure_fall", T0 + 7)) == [(7.0, "acknowledged", True, 0)]
    # WHEN the condition comes and goes every 10 s (clear time 30 s)
    out = []
    for k in range(10):
        out += run(mgr, 8 + 20 * k, 17 + 20 * k, active=False)
        out += run(mgr, 18 + 20 * k, 27 + 20 * k, active=True)
    # THEN no message at all, and it is still listed as acknowledged
    assert out == []
    assert [a["state"] for a in mgr.listed()] == ["acknowledged"]


def test_acknowledged_warning_clears_once_its_condition_is_gone_for_the_clear_time():
    mgr = AlertManager(FAST)
    run(mgr, 0, 6, active=True)
    mgr.acknowledge("pressure_fall", T0 + 7)
    # WHEN the condition goes at 8 s
    out = run(mgr, 8, 60, active=False)
    # THEN cleared at 8 + 30 s, and no longer listed
    assert states(out) == [(38.0, "cleared", False, 0)]
    assert mgr.listed() == []


# -- re-announcing ---------------------------------------------------------------------------

def test_unacknowledged_alarm_is_reannounced_every_30_s_until_acknowledged():
    # GIVEN an alarm (raised 2 s after its condition)
    mgr = AlertManager(FAST)
    out = run(mgr, 0, 100, active=True, alert_id="rapid_deepening", priority=ALARM)
    # THEN raised at 2 s, then again at 32, 62, 92 s, counting repeats
    assert states(out) == [(2.0, "active", True, 0), (32.0, "active", True, 1),
                           (62.0, "active", True, 2), (92.0, "active", True, 3)]
    # WHEN acknowledged: no more re-announcements
    assert states(mgr.acknowledge("rapid_deepening", T0 + 100.5)) == [(100.5, "acknowledged", True, 0)]
    assert run(mgr, 101, 300, active=True, alert_id="rapid_deepening", priority=ALARM) == []


def test_warning_is_reannounced_at_its_configured_interval():
    # GIVEN warnings re-announced every 120 s (configured; 300 s by default)
    mgr = AlertManager(FAST)
    out = run(mgr, 0, 400, active=True)
    # THEN raised at 5 s and repeated at 125, 245, 365 s
    assert [s[0] for s in states(out)] == [5.0, 125.0, 245.0, 365.0]
    assert AlertParams().reannounce_warning_s == 300.0 and AlertParams().reannounce_alarm_s == 30.0


# -- cautions ----------------------------------------------------------------------------------

def test_caution_is_never_acknowledged_and_clears_with_its_condition():
    mgr = AlertManager(FAST)
    out = run(mgr, 0, 20, active=True, alert_id="front", priority=CAUTION)
    assert states(out) == [(10.0, "active", True, 0)]
    # WHEN someone acknowledges it
    # THEN it is ignored (counted, logged), still active
    assert mgr.acknowledge("front", T0 + 21) == []
    assert mgr.ignored_acks == 1
    assert [a["state"] for a in mgr.listed()] == ["active"]
    # AND a caution is not re-announced
    assert run(mgr, 21, 200, active=True, alert_id="front", priority=CAUTION) == []
    # WHEN its condition goes at 201 s THEN it clears 30 s later without an acknowledgement
    out = run(mgr, 201, 260, active=False, alert_id="front", priority=CAUTION)
    assert states(out) == [(231.0, "cleared", False, 0)]
    assert mgr.listed() == []


def test_unknown_or_repeated_acknowledgements_are_ignored():
    mgr = AlertManager(FAST)
    assert mgr.acknowledge("no_such_alert", T0) == []
    run(mgr, 0, 1, active=True)  # pending, not yet raised
    assert mgr.acknowledge("pressure_fall", T0 + 2) == []
    run(mgr, 2, 6, active=True)
    assert len(mgr.acknowledge("pressure_fall", T0 + 7)) == 1
    assert mgr.acknowledge("pressure_fall", T0 + 8) == []
    assert mgr.ignored_acks == 3


# -- rectified, unacknowledged ---------------------------------------------------------------

def test_rectified_unacknowledged_alarm_stays_listed_until_acknowledged():
    # GIVEN an alarm raised at 2 s whose condition goes at 10 s
    mgr = AlertManager(FAST)
    run(mgr, 0, 9, active=True, alert_id="rapid_deepening", priority=ALARM)
    out = run(mgr, 10, 40, active=False, alert_id="rapid_deepening", priority=ALARM)
    # THEN after the clear time (10 s) it is rectified: listed, condition false
    assert states(out) == [(20.0, "rectified", False, 0)]
    assert [(a["state"], a["condition"]) for a in mgr.listed()] == [("rectified", False)]
    # AND it is no longer announced (the demo's gnss_lost was repeated 33 times after GNSS returned)
    out = run(mgr, 41, 400, active=False, alert_id="rapid_deepening", priority=ALARM)
    assert out == []
    # WHEN acknowledged THEN it goes straight to cleared
    assert states(mgr.acknowledge("rapid_deepening", T0 + 401)) == [(401.0, "cleared", False, 0)]
    assert mgr.listed() == []


def test_rectified_text_is_past_tense_with_the_time_span_and_the_closing_words():
    # GIVEN a GNSS warning raised at 08:40:00 UTC whose fixes return at 08:42:30
    t0 = 1_780_000_800.0  # 2026-05-28 20:40:00 UTC
    mgr = AlertManager(replace(FAST, raise_after_by_id={"gnss_lost": 0.0}, clear_after_warning_s=0.0))
    mgr.on_condition(Condition(t0, "gnss_lost", WARNING, True, "No GNSS fix for 10 s; dead reckoning.", {"gap_s": 10}))
    # WHEN the estimator says it is over, with its closing words and last value
    out = mgr.on_condition(Condition(t0 + 150, "gnss_lost", WARNING, False,
                                     "GNSS fixes lost; dead reckoning was 80 m off when they returned.",
                                     {"dr_error_m": 80.0}))
    # THEN the text names the span, says what happened, asks for an acknowledgement
    (msg,) = out
    assert msg.payload["state"] == "rectified"
    assert msg.payload["text"].startswith(
        "20:40–20:42 UTC: GNSS fixes lost; dead reckoning was 80 m off when they returned. Acknowledge.")
    assert "No GNSS fix for" not in msg.payload["text"]
    assert msg.payload["values"]["dr_error_m"] == 80.0


def test_an_active_alerts_figures_follow_the_condition_rate_limited():
    # GIVEN a caution raised on a 2.0 kn current (update_min_s 60 s)
    mgr = AlertManager(FAST)
    def strong(t, kn):
        return mgr.on_condition(Condition(T0 + t, "current_strong", CAUTION, True, f"Current of {kn:.1f} kn.",
                                          {"drift_kn": kn})) + mgr.tick(T0 + t)
    out = []
    for t in range(0, 12):
        out += strong(t, 2.0)
    assert [m.payload["text"].split(" Advisory")[0] for m in out] == ["Current of 2.0 kn."]
    # WHEN it grows to 4.2 kn, a new figure each second
    out = []
    for t in range(12, 200):
        out += strong(t, 2.0 + 0.1 * min(22, t - 11))
    # THEN the text follows it, no more than once a minute, and ends at the latest figure
    times = [m.t_s - T0 for m in out]
    assert all(b - a >= 60.0 for a, b in zip([10.0] + times, times))
    assert out[-1].payload["text"].startswith("Current of 4.2 kn.")
    assert out[-1].payload["values"] == {"drift_kn": pytest.approx(4.2)}
    # AND the clearing message reports the last value, as the estimator closed it
    out = []
    for t in range(200, 240):
        out += mgr.on_condition(Condition(T0 + t, "current_strong", CAUTION, False,
                                          "Current eased to 2.3 kn.", {"drift_kn": 2.3})) + mgr.tick(T0 + t)
    (gone,) = out
    assert gone.payload["state"] == "cleared"
    assert "Current eased to 2.3 kn." in gone.payload["text"]
    assert gone.payload["values"]["drift_kn"] == 2.3


def test_an_unchanged_text_is_not_republished_as_an_update():
    mgr = AlertManager(FAST)
    out = []
    for t in range(0, 300):
        out += mgr.on_condition(Condition(T0 + t, "current_strong", CAUTION, True, "Current of 3.1 kn.", {}))
        out += mgr.tick(T0 + t)
    assert len(out) == 1  # raised once; a caution is not re-announced and nothing changed


def test_an_old_snapshot_with_an_active_alert_whose_condition_went_restores_as_rectified():
    snap = {"version": 1, "alerts": [{"id": "gnss_lost", "priority": WARNING, "state": "active", "text": "x",
                                      "values": {}, "condition": False, "since_s": T0, "last_announced_s": T0}]}
    mgr = AlertManager.restore(FAST, snap)
    assert [a["state"] for a in mgr.listed()] == ["rectified"]
    assert mgr.tick(T0 + 1000) == []  # not re-announced


def test_rectified_alarm_whose_condition_returns_is_active_again():
    mgr = AlertManager(FAST)
    run(mgr, 0, 9, active=True, alert_id="rapid_deepening", priority=ALARM)
    run(mgr, 10, 25, active=False, alert_id="rapid_deepening", priority=ALARM)
    out = run(mgr, 26, 29, active=True, alert_id="rapid_deepening", priority=ALARM)
    assert states(out) == [(28.0, "active", True, 0)]
    assert mgr.listed()[0]["since"] == iso_utc(T0 + 2)  # the same alert, raised at 2 s


# -- priority changes ----------------------------------------------------------------------------

def test_caution_upgraded_to_warning_is_published_and_needs_an_acknowledgement():
    # GIVEN pressure_fall showing as a caution
    mgr = AlertManager(FAST)
    run(mgr, 0, 12, active=True, priority=CAUTION)
    assert mgr.listed()[0]["priority"] == CAUTION
    # WHEN the estimator upgrades it to a warning
    out = mgr.on_condition(cond(13, True, priority=WARNING))
    # THEN the change is published at once, active, and now acknowledgeable
    assert [(m.payload["priority"], m.payload["state"]) for m in out] == [(WARNING, "active")]
    assert [m.payload["state"] for m in mgr.acknowledge("pressure_fall", T0 + 14)] == ["acknowledged"]


def test_acknowledged_warning_upgraded_to_alarm_is_unacknowledged_again():
    mgr = AlertManager(FAST)
    run(mgr, 0, 6, active=True)
    mgr.acknowledge("pressure_fall", T0 + 7)
    out = mgr.on_condition(cond(8, True, priority=ALARM))
    assert [(m.payload["priority"], m.payload["state"]) for m in out] == [(ALARM, "active")]
    # AND it is re-announced at the alarm interval from the upgrade
    out = run(mgr, 9, 40, active=True, priority=ALARM)
    assert states(out) == [(38.0, "active", True, 1)]


def test_per_id_minimum_times_override_the_priority_defaults():
    params = replace(FAST, raise_after_by_id={"gnss_lost": 0.0}, clear_after_by_id={"gnss_lost": 3.0})
    mgr = AlertManager(params)
    out = mgr.on_condition(cond(0, True, "gnss_lost", WARNING))
    assert states(out) == [(0.0, "active", True, 0)]
    mgr.acknowledge("gnss_lost", T0 + 1)
    out = run(mgr, 2, 10, active=False, alert_id="gnss_lost")
    assert states(out) == [(5.0, "cleared", False, 0)]


# -- payload, params ------------------------------------------------------------------------------

def test_payload_carries_values_and_is_cut_to_the_maximum_size():
    mgr = AlertManager(replace(FAST, max_payload_bytes=600))
    out = []
    for i in range(6):
        out += mgr.on_condition(Condition(T0 + i, "front", ALARM, True, "x" * 2000, {"delta_c": 1.25}))
        out += mgr.tick(T0 + i)
    payload = out[0].payload
    assert len(json.dumps(payload, ensure_ascii=False, separators=(",", ":")).encode()) <= 600
    assert payload["values"] == {"truncated": True}
    small = run(AlertManager(FAST), 0, 6, active=True)[0].payload
    assert small["values"] == {} and small["id"] == "pressure_fall"


def test_bad_per_id_times_name_the_key():
    with pytest.raises(ConfigError, match="raise_after_by_id.front"):
        AlertParams(raise_after_by_id={"front": -1.0})


def test_default_params_pass_their_own_checks():
    assert check(AlertParams()) == []
    assert "reannounce_warning_s" in check(replace(AlertParams(), reannounce_warning_s=1.0))[0]


# -- snapshot and restore ---------------------------------------------------------------------------

def _two_listed() -> AlertManager:
    mgr = AlertManager(FAST)
    run(mgr, 0, 9, active=True, alert_id="rapid_deepening", priority=ALARM)
    run(mgr, 0, 9, active=True)  # pressure_fall warning raised at 5 s
    mgr.acknowledge("pressure_fall", T0 + 9.5)
    return mgr


def test_snapshot_survives_json_and_restore_keeps_the_alerts():
    # GIVEN an active alarm and an acknowledged warning
    mgr = _two_listed()
    snap = json.loads(json.dumps(mgr.snapshot()))
    # WHEN restored in a new manager
    new = AlertManager.restore(FAST, snap, prefix="offwatch")
    # THEN the same alerts are listed, and republishing gives one message each
    assert new.listed() == mgr.listed()
    assert sorted(m.topic for m in new.republish(T0 + 20)) == [
        "offwatch/alerts/pressure_fall", "offwatch/alerts/rapid_deepening"]
    # AND the lifecycle goes on: the acknowledged warning clears when its condition goes
    out = []
    for i in range(20, 60):
        out += new.on_condition(cond(i, False))
        out += new.on_condition(cond(i, True, "rapid_deepening", ALARM))
        out += new.tick(T0 + i)
    assert ("pressure_fall", "cleared") in [(m.payload["id"], m.payload["state"]) for m in out]
    assert [a["id"] for a in new.listed()] == ["rapid_deepening"]


def test_restored_alert_nobody_reasserts_is_taken_as_gone():
    mgr = _two_listed()
    new = AlertManager.restore(FAST, mgr.snapshot())
    # WHEN no estimator says anything for restore_confirm_s (120 s) plus the clear time
    out = []
    for i in range(100, 400):
        out += new.tick(T0 + i)
    # THEN the acknowledged warning cleared; the unacknowledged alarm stays listed, rectified
    assert [a["id"] for a in new.listed()] == ["rapid_deepening"]
    assert new.listed()[0]["condition"] is False
    cleared = [m for m in out if m.payload["state"] == "cleared"]
    assert [(m.payload["id"], m.t_s - T0) for m in cleared] == [("pressure_fall", 100 + 120 + 30)]


def test_a_damaged_snapshot_is_skipped_not_fatal():
    good = _two_listed().snapshot()
    damaged = {"version": 1, "alerts": [{"id": "x"}, {**good["alerts"][0], "state": "sleeping"}, good["alerts"][1]]}
    new = AlertManager.restore(FAST, damaged)
    assert [a["id"] for a in new.listed()] == [good["alerts"][1]["id"]]
    assert AlertManager.restore(FAST, {"version": 99}).listed() == []
    assert AlertManager.restore(FAST, None).listed() == []


# -- hysteresis -------------------------------------------------------------------------------------

def test_hysteresis_raises_and_clears_at_its_two_thresholds():
    # GIVEN a high-value condition raised at 3.0 and cleared at 2.5 (current_strong-like, kn)
    h = Hysteresis(3.0, 2.5)
    seq = [2.9, 3.0, 2.7, 2.6, 2.5, 2.9, 3.1]
    assert [h.update(v) for v in seq] == [False, True, True, True, False, False, True]
    # AND a low-value condition (a pressure rate, hPa/h) raised at -1.5, cleared at -1.0
    low = Hysteresis(-1.5, -1.0, above=False)
    assert [low.update(v) for v in [-1.4, -1.6, -1.2, None, float("nan"), -0.9]] == [False, True, True, True, True, False]


def test_hysteresis_noise_inside_the_band_does_not_chatter():
    # GIVEN a seeded value hovering at the raise threshold with noise smaller than the band
    rng = random.Random(3)
    h = Hysteresis(3.0, 2.5)
    flips = 0
    for _ in range(1000):
        h.update(3.0 + rng.uniform(-0.2, 0.2))
        flips += h.changed
    # THEN it was raised once and stayed raised
    assert flips == 1 and h.active


def test_hysteresis_refuses_thresholds_the_wrong_way_round():
    with pytest.raises(ValueError, match="below raise_at"):
        Hysteresis(2.0, 2.0)
    with pytest.raises(ValueError, match="above raise_at"):
        Hysteresis(-1.0, -2.0, above=False)
    with pytest.raises(ValueError, match="finite"):
        Hysteresis(float("inf"), 1.0)


def test_a_figure_that_only_wavers_is_not_news():
    # GIVEN a caution raised on a 4.2 kn current whose estimate then wavers 4.2 <-> 4.3 kn (2 %)
    mgr = AlertManager(FAST)
    out = []
    for t in range(0, 900):
        kn = 4.2 if (t // 30) % 2 == 0 else 4.3
        out += mgr.on_condition(Condition(T0 + t, "current_strong", CAUTION, True, f"Current of {kn:.1f} kn.", {}))
        out += mgr.tick(T0 + t)
    # THEN it was raised once and not re-published with every wobble (update_min_change_pct 5 %)
    assert len(out) == 1
    # WHEN a figure moves by 5 % or more, or the words change, it is news (at most once a minute)
    out = mgr.on_condition(Condition(T0 + 900, "current_strong", CAUTION, True, "Current of 4.5 kn.", {}))
    assert [m.payload["text"].split(" Advisory")[0] for m in out] == ["Current of 4.5 kn."]
    out = mgr.on_condition(Condition(T0 + 970, "current_strong", CAUTION, True, "Current of 4.5 kn, easing.", {}))
    assert len(out) == 1
