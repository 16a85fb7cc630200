"""Two GNSS receivers that disagree by a mile: the priority logic notices and says which it follows.

Check values: one minute of latitude is about one nautical mile (the nautical
mile's definition, 1852 m; the true length of a minute runs 1843-1862 m from
equator to pole, Bowditch, American Practical Navigator, table of lengths of
a degree, from memory); two good receivers agree to a few metres (common
practice).
"""

from __future__ import annotations

import logging

from daemon.core.alerts import AlertManager
from daemon.core.pipeline import Pipeline
from daemon.core.readings import Reading
from daemon.intake.priority import PrioritySelector
from estimators.samples import Fix
from tests.helpers import Keep

LAT, LON = 50.0, -4.0
ONE_MINUTE = 1.0 / 60.0


def feed_pair(sel, t0, t1, offset_deg, *, second="gps_chart"):
    """Both receivers at 1 Hz from t0 to t1, the second ``offset_deg`` of latitude north of the first."""
    out = []
    for t in range(t0, t1):
        sel.accept(Reading("gps_mast", Fix(float(t), LAT, LON, 6.0, 90.0), float(t)))
        if second:
            sel.accept(Reading(second, Fix(t + 0.4, LAT + offset_deg, LON, 6.0, 90.0), t + 0.4))
        out.extend(sel.tick(t + 0.5))
    return out


def test_a_mile_apart_is_said_after_the_hold_with_the_receiver_followed():
    sel = PrioritySelector({"fix": ["gps_mast", "gps_chart"]})
    # GIVEN two receivers a minute of latitude apart, WHEN 9 s have passed: nothing yet (one bad fix is not it)
    assert feed_pair(sel, 0, 9, ONE_MINUTE) == []
    # THEN from 10 s on the warning holds, naming the one followed and where the other puts the boat
    conds = feed_pair(sel, 9, 15, ONE_MINUTE)
    assert conds and all(c.active and c.alert_id == "gnss_disagree" and c.priority == "warning" for c in conds)
    c = conds[-1]
    assert c.values["following"] == "gps_mast" and c.values["other"] == "gps_chart"
    assert abs(c.values["distance_m"] - 1852) < 12
    assert "following gps_mast" in c.text and "1.00 nm" in c.text
    assert "50°01.0′N 004°00.0′W" in c.text
    snap = sel.snapshot()["disagreement"]
    assert snap == {"following": "gps_mast", "other": "gps_chart", "distance_m": c.values["distance_m"]}
    # WHEN they agree again, THEN one all-clear, and the status says no disagreement
    conds = feed_pair(sel, 15, 20, 0.00001)
    assert [cd.active for cd in conds] == [False]
    assert sel.snapshot()["disagreement"] is None


def test_receivers_a_few_metres_apart_agree():
    sel = PrioritySelector()
    assert feed_pair(sel, 0, 60, 5.0 / 111_000) == []  # 5 m
    assert sel.snapshot()["disagreement"] is None


def test_when_the_other_receiver_falls_silent_the_disagreement_ends():
    sel = PrioritySelector()
    assert feed_pair(sel, 0, 20, ONE_MINUTE)
    conds = feed_pair(sel, 20, 30, 0.0, second="")  # only gps_mast from now on
    assert [c.active for c in conds if not c.active] == [False]


def test_the_warning_reaches_the_alerts_through_the_pipeline():
    sel, sink = PrioritySelector({"fix": ["gps_mast"]}), Keep()
    pipe = Pipeline([], [sink], AlertManager(prefix="boat"), prefix="boat", selector=sel)
    for t in range(0, 60):
        pipe.feed(Reading("gps_mast", Fix(float(t), LAT, LON, 6.0, 90.0), float(t)))
        pipe.feed(Reading("gps_chart", Fix(t + 0.4, LAT + ONE_MINUTE, LON, 6.0, 90.0), t + 0.4))
    alerts = [m.payload for m in sink.messages if m.topic == "boat/alerts/gnss_disagree"]
    assert alerts and alerts[0]["state"] == "active" and alerts[0]["priority"] == "warning"
    assert "following gps_mast" in alerts[0]["text"]
    status = [m.payload for m in sink.messages if m.topic == "boat/status"][-1]
    assert status["priority"]["disagreement"]["following"] == "gps_mast"


def test_a_quiet_selector_warns_only_at_debug_level(caplog):
    # GIVEN the same mile between two receivers, one selector as live and one reading a passage back
    caplog.set_level(logging.DEBUG, logger="daemon.intake.priority")
    loud, quiet = PrioritySelector(), PrioritySelector(quiet=True)
    assert feed_pair(loud, 0, 15, ONE_MINUTE)
    warned = [r for r in caplog.records if r.levelno == logging.WARNING and "disagree" in r.getMessage()]
    assert len(warned) == 1
    caplog.clear()
    # THEN the quiet one reaches the same condition, and logs it at debug level only
    assert [c.values for c in feed_pair(quiet, 0, 15, ONE_MINUTE)][-1]["following"] == "gps_mast"
    said = [r for r in caplog.records if "disagree" in r.getMessage()]
    assert said and all(r.levelno == logging.DEBUG for r in said)
