"""The demo passage's two sea-temperature fronts, through the whole pipeline, against the truth.

``recorded_runs/tern-of-haldane.nmea.gz`` (invented boat, invented water) is
replayed once for the module with ``daemon.commands.replay.run_replay`` and an extra
sink that keeps what is published. The warm band's near edge (mid-edge
07:18:27 UTC) and far edge (09:11:54) are given in ``recorded_runs/README.md``;
the positions and the water temperature along the track come from the truth
file ``tern-of-haldane.truth.csv.gz`` (one row every 5 s). Distances are on
the WGS84 ellipsoid with geographiclib (Karney 2013, ``Geodesic.WGS84``).
The rest of the demo passage is checked in tests/test_end_to_end_demo.py.
"""

from __future__ import annotations

from datetime import datetime, timezone

import numpy as np
import pytest
from geographiclib.geodesic import Geodesic

from tests.shared import REPO
from tools.simulator import read_truth_csv

DEMO = REPO / "recorded_runs" / "tern-of-haldane.nmea.gz"
TRUTH = REPO / "recorded_runs" / "tern-of-haldane.truth.csv.gz"
WGS84 = Geodesic.WGS84
NM_M = 1852.0
MAX_LAG_NM = 0.3
STEP_TOLERANCE = 0.25  # |delta_c| within 25 % of the true change across the edge


def utc(h: int, m: int, s: int = 0) -> float:
    return datetime(2026, 5, 4, h, m, s, tzinfo=timezone.utc).timestamp()


# Mid-edge time and the band's step there (+4 °C in, -4 °C out): recorded_runs/README.md, the scenario's warm_c.
EDGES = ((utc(7, 18, 27), 4.0), (utc(9, 11, 54), -4.0))


@pytest.fixture(scope="module")
def replayed(demo_replay):
    """(front_crossing events as Messages, front alert payloads), from the session's replay of the demo."""
    msgs = demo_replay.messages
    events = [m for m in msgs if m.topic.endswith("/events") and m.payload.get("kind") == "front_crossing"]
    alerts = [m.payload for m in msgs if m.topic.endswith("/alerts/front")]
    return events, alerts


@pytest.fixture(scope="module")
def truth():
    """The truth track: columns t_s, lat, lon, sea_temp_c and the distance run d_nm (geodesic sums)."""
    cols = {k: v for k, v in read_truth_csv(TRUTH).items() if k in ("t_s", "lat", "lon", "sea_temp_c")}
    steps = [WGS84.Inverse(a, b, c, d)["s12"] for a, b, c, d in
             zip(cols["lat"][:-1], cols["lon"][:-1], cols["lat"][1:], cols["lon"][1:])]
    cols["d_nm"] = np.concatenate(([0.0], np.cumsum(steps) / NM_M))
    return cols


def _at(truth, field: str, t_s: float) -> float:
    return float(np.interp(t_s, truth["t_s"], truth[field]))


def _true_step(truth, t_edge: float) -> float:
    """The true change across an edge: mean water 1-2 nm after less mean water 1-2 nm before (°C)."""
    d0, d, temp = _at(truth, "d_nm", t_edge), truth["d_nm"], truth["sea_temp_c"]
    before = temp[(d >= d0 - 2.0) & (d <= d0 - 1.0)]
    after = temp[(d >= d0 + 1.0) & (d <= d0 + 2.0)]
    return float(after.mean() - before.mean())


def test_exactly_one_event_per_edge_warmer_then_colder(replayed):
    events, _ = replayed
    # GIVEN the demo passage, which crosses the warm band once: in at its near edge, out at its far edge
    # THEN two front_crossing events, the first warmer, the second colder, each after its own edge
    assert [e.payload["warmer"] for e in events] == [True, False], [e.payload for e in events]
    assert all((e.payload["delta_c"] > 0) == e.payload["warmer"] for e in events)
    (t_near, _), (t_far, _) = EDGES
    assert t_near < events[0].t_s < t_far < events[1].t_s


def test_each_event_is_at_its_edge_and_declared_within_a_third_of_a_mile(replayed, truth):
    events, _ = replayed
    for ev, (t_edge, _) in zip(events, EDGES):
        edge_lat, edge_lon = _at(truth, "lat", t_edge), _at(truth, "lon", t_edge)
        # THEN the position the event reports (the steepest point) is within 0.3 nm of the true mid-edge
        off_nm = WGS84.Inverse(edge_lat, edge_lon, ev.payload["lat"], ev.payload["lon"])["s12"] / NM_M
        assert off_nm <= MAX_LAG_NM, off_nm
        # AND the boat, when it was declared, was 0 to 0.3 nm past the mid-edge (truth position at that time)
        boat_lat, boat_lon = _at(truth, "lat", ev.t_s), _at(truth, "lon", ev.t_s)
        lag_nm = WGS84.Inverse(edge_lat, edge_lon, boat_lat, boat_lon)["s12"] / NM_M
        assert ev.t_s > t_edge and lag_nm <= MAX_LAG_NM, lag_nm


def test_each_event_measures_most_of_the_true_step(replayed, truth):
    events, _ = replayed
    for ev, (t_edge, step) in zip(events, EDGES):
        # GIVEN the band's step at the edge (±4 °C), which the water along the track bears out (the mean
        #       1-2 nm after less 1-2 nm before, from the truth file: within its ±0.2 °C patchiness)
        assert _true_step(truth, t_edge) == pytest.approx(step, abs=0.3)
        # THEN the event's measured delta_c is within 25 % of it, of its sign, and never under the 2 °C threshold
        # (declared a quarter of a mile past the steepest point, the edge's last fifth is still ahead)
        assert abs(ev.payload["delta_c"] - step) <= STEP_TOLERANCE * abs(step), (ev.payload["delta_c"], step)
        assert abs(ev.payload["delta_c"]) >= 2.0


def test_the_front_caution_is_raised_once_per_edge(replayed):
    _, alerts = replayed
    # THEN the front caution went active twice (once per edge), each time with what was seen
    raised = [a for a in alerts if a.get("state") == "active"]
    assert len({a.get("since") for a in raised}) == 2
    assert all(a.get("priority") == "caution" for a in raised)
    texts = [a.get("text", "") for a in raised]
    assert any("rose" in t for t in texts) and any("fell" in t for t in texts)
