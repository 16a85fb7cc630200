"""The demo passage's wind-against-current stretch: offwatch says so (through the session's demo replay).

The demo (recorded_runs/README.md, tools.simulator.scenarios.demo_passage) crosses a warm band of
5 kn current setting 045 between about 07:18 and 09:12 UTC, in 16-22 kn of wind from about 040: wind
against current. The air (14 °C) is about 5 °C colder than the band's water.
"""

from __future__ import annotations

from datetime import datetime, timezone

import pytest


def utc(h: int, m: int, s: int = 0) -> float:
    return datetime(2026, 5, 4, h, m, s, tzinfo=timezone.utc).timestamp()


def iso_s(text: str) -> float:
    return datetime.fromisoformat(text.replace("Z", "+00:00")).timestamp()


BAND_IN, BAND_OUT = utc(7, 18, 27), utc(9, 11, 54)  # mid-edge times (tests/test_fronts_demo.py)


@pytest.fixture(scope="module")
def demo(demo_replay):
    msgs = demo_replay.messages
    states = [m for m in msgs if m.topic.endswith("/sea_state")]
    alerts = {aid: [m.payload for m in msgs if m.topic.endswith(f"/alerts/{aid}")]
              for aid in ("wind_against_current", "unstable_air")}
    return states, alerts


def test_the_caution_comes_on_entering_the_band_and_goes_after_it(demo):
    _, alerts = demo
    changes = [(iso_s(a["time"]), a["state"]) for a in alerts["wind_against_current"]]
    assert changes and changes[0][1] == "active"
    # target (issue 10): within 5 minutes of entering the opposing stretch; none before it
    assert BAND_IN - 60 <= changes[0][0] <= BAND_IN + 300
    cleared = [t for t, s in changes if s == "cleared"]
    assert cleared and BAND_OUT - 600 <= cleared[0] <= BAND_OUT + 600
    text = alerts["wind_against_current"][0]["text"]
    assert "estimate" in text and "kn" in text


def test_sea_state_in_the_band(demo):
    states, _ = demo
    core = [m.payload for m in states if utc(7, 45) <= m.t_s <= utc(8, 30)]
    assert core
    for p in core:
        # the band's 5 kn against a wind from about 040: well over 3.5 kn of it opposes the wind sea
        assert 3.5 <= p["opposing_current_kn"] <= 5.5
        assert p["steepness_factor"] > 1.5 and p["length_factor"] < 1.0 < p["height_factor"]
        # the true wind over water is the ground wind plus the current against it: stronger
        assert p["true_wind_kn"] > p["ground_wind_kn"] + 2.0
        assert p["depth_m"] is not None and p["depth_age_s"] < 30.0
    outside = [m.payload for m in states if utc(6, 0) <= m.t_s <= utc(7, 0)]
    assert all(p["opposing_current_kn"] < 1.0 for p in outside)


def test_unstable_air_over_the_warm_band(demo):
    _, alerts = demo
    changes = [(iso_s(a["time"]), a["state"]) for a in alerts["unstable_air"]]
    assert changes and changes[0][1] == "active"
    assert BAND_IN - 300 <= changes[0][0] <= BAND_IN + 600
