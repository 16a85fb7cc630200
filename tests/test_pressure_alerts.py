"""The pressure-fall alert through the real alert machinery and the pipeline:
raised, upgraded, acknowledged, cleared — and no chatter while the fall hovers
at the threshold. Synthetic barometer (tests/helpers.py station_from_msl: the ISO 2533
standard atmosphere for the station pressure, seeded noise, gusts, 0.1 hPa steps).
"""

from __future__ import annotations

import math
import random

from daemon.core.alerts import AlertManager, AlertParams
from daemon.core.pipeline import Pipeline
from daemon.core.readings import Reading
from estimators.pressure import PressureParams, PressureTendency
from estimators.samples import Fix, Pressure
from tests.helpers import station_from_msl

H = 3600.0
T0 = 1_780_000_000.0  # 2026-05-28 20:26:40 UTC
LAT, LON = 45.0, -20.0  # invented open water
HEIGHT_M = 2.0


class Alerts:
    """Collects the alert changes the pipeline sends out."""

    def __init__(self):
        self.changes = []

    def raw(self, line):
        pass

    def message(self, msg):
        if msg.kind == "alert":
            self.changes.append((msg.t_s, msg.payload["id"], msg.payload["priority"], msg.payload["state"],
                                 msg.payload["condition"], msg.payload.get("repeat", 0)))

    def close(self):
        pass


def run(msl, hours, *, ack_at_h=None, seed=3):
    sink = Alerts()
    pipe = Pipeline([PressureTendency(PressureParams(early_rule=False), HEIGHT_M)], [sink],
                    AlertManager(AlertParams()), prefix="offwatch")
    rng = random.Random(seed)
    pipe.feed(Reading("gnss", Fix(T0, LAT, LON), T0))
    for k in range(int(hours * H / 5.0)):
        s = k * 5.0
        p = msl(s) + rng.gauss(0.0, 0.05) + (rng.uniform(-1.0, 1.0) if rng.random() < 0.02 else 0.0)
        pipe.feed(Reading("baro", Pressure(T0 + s, round(station_from_msl(p, HEIGHT_M), 1)), T0 + s))
        if ack_at_h is not None and abs(s - ack_at_h * H) < 2.5:
            pipe.acknowledge("pressure_fall")
    return [c for c in sink.changes if c[1] == "pressure_fall"]


def fall(rate_hpa_per_h, start_h, stop_h=math.inf):
    return lambda s: 1013.0 + rate_hpa_per_h * (min(max(s / H, start_h), stop_h) - start_h)


def test_caution_then_warning_then_acknowledged_then_cleared():
    # GIVEN steady 3 h, then -2.4 hPa/h for 3 h (7.2 hPa in 3 h), then steady for 4 h;
    # the crew acknowledges at 6.2 h, while the fall is still above the warning level
    changes = run(fall(-2.4, 3.0, 6.0), 10.0, ack_at_h=6.2)
    firsts = [(p, st, cond) for (_, _, p, st, cond, rep) in changes if rep == 0]
    # THEN caution (active) -> warning (active) -> warning acknowledged -> cleared, in that order
    assert firsts[0] == ("caution", "active", True)
    assert ("warning", "active", True) in firsts
    i_warn = firsts.index(("warning", "active", True))
    i_ack = next(i for i, f in enumerate(firsts) if f[1] == "acknowledged")
    assert i_warn < i_ack
    assert firsts[-1][1] == "cleared"
    # and the unacknowledged warning was announced again (re-announced every 300 s, or published
    # with new figures, at most once a minute) until the acknowledgement
    t_warn = next(t for (t, _, p, st, _, rep) in changes if p == "warning" and rep == 0)
    t_ack = next(t for (t, _, _, st, _, _) in changes if st == "acknowledged")
    told = [t_warn] + [t for (t, *_rest) in changes if t_warn < t < t_ack] + [t_ack]
    assert len(told) >= 3 and max(b - a for a, b in zip(told, told[1:])) <= 300 + 10
    assert min((b - a for a, b in zip(told[1:-1], told[2:-1])), default=60) >= 60 - 1e-6


def test_a_fall_hovering_at_the_threshold_does_not_chatter():
    # GIVEN a 3-hour fall that settles at 3.6 hPa, right on the caution threshold, for hours
    changes = run(fall(-1.2, 1.0, 4.0), 9.0)
    states = [c[3] for c in changes]
    states = [st for i, st in enumerate(states) if i == 0 or st != states[i - 1]]  # new figures are not a change
    raised = [st for st in states if st == "active"]
    cleared = [st for st in states if st == "cleared"]
    # THEN at most one raise and one clear: hysteresis and minimum times hold it steady
    assert len(raised) <= 1 and len(cleared) <= 1


def test_a_caution_cannot_be_acknowledged():
    # GIVEN a fall that reaches the caution level only (about 4.5 hPa in 3 h) and an ack attempt
    changes = run(fall(-1.5, 1.0), 5.5, ack_at_h=5.0)
    # THEN the caution stays active; no acknowledged state ever appears
    assert any(c[2] == "caution" and c[3] == "active" for c in changes)
    assert not any(c[3] == "acknowledged" for c in changes)
