"""Front detection against distance run, on synthetic passages made here.

The boat runs due east along a parallel at a steady speed, one fix and one
sea-temperature reading a second; the water temperature is a function of
the distance run (the fronts) plus whatever the test adds in time (sun on
the hull), sensor noise, quantisation and spikes. Seeded RNG throughout.
"""

from __future__ import annotations

import math
import random
from collections.abc import Callable

import pytest
from geographiclib.geodesic import Geodesic

from estimators.base import Condition, Publication
from estimators.fronts import FrontDetector, FrontParams, format_lat_lon, step_distance_m
from estimators.params import check
from estimators.runner import Runner, RunContext
from estimators.samples import Fix, SeaTemperature

LAT0, LON0 = 36.2, -12.5  # invented open water
T0 = 1_780_000_000.0
M_PER_DEG_LON = Geodesic.WGS84.Inverse(LAT0, 0.0, LAT0, 1.0)["s12"]  # along the parallel (geographiclib)


def tanh_front(x0_nm: float, delta_c: float, width_nm: float) -> Callable[[float], float]:
    """A ramp of ``delta_c`` whose 10-90 % rise spans ``width_nm``, steepest at ``x0_nm``."""
    k = 2.197 / width_nm  # tanh(1.0986) = 0.8: 10-90 % over the width
    return lambda x: 0.5 * delta_c * (1.0 + math.tanh(k * (x - x0_nm)))


def sail(sea: Callable[[float], float], *, hours: float, speed_kn: float = 6.0, seed: int = 1,
         noise_c: float = 0.03, quantum_c: float = 0.1, in_time: Callable[[float], float] = lambda s: 0.0,
         spikes: tuple[tuple[float, float, float], ...] = (), gnss_jitter_m: float = 2.0,
         current: Callable[[float], tuple[float, float]] | None = None, params: FrontParams | None = None):
    """Run the detector as the service does (the estimators' runner: history, a tick each data second);
    returns (events as (payload, x_nm of the boat), conditions, publications, detector)."""
    rng = random.Random(seed)
    det = FrontDetector(params or FrontParams())
    runner = Runner([det])
    events, conditions, pubs = [], [], []
    for k in range(int(hours * 3600)):
        t = T0 + k
        x_nm = speed_kn * k / 3600.0
        jitter_e, jitter_n = rng.gauss(0, gnss_jitter_m), rng.gauss(0, gnss_jitter_m)
        lon = LON0 + (x_nm * 1852.0 + jitter_e) / M_PER_DEG_LON
        lat = LAT0 + jitter_n / 111_000.0
        if current is not None:
            e, n = current(x_nm)
            runner.ctx.note([Publication(t, "current", {"east_kn": e, "north_kn": n})])  # the current estimator's
        outs = [o for _, got in runner.feed(Fix(t, lat, lon, speed_kn, 90.0)) for o in got]
        temp = 18.0 + sea(x_nm) + in_time(k) + rng.gauss(0.0, noise_c)
        for start, dur, amp in spikes:
            if start <= k < start + dur:
                temp += amp
        temp = round(temp / quantum_c) * quantum_c
        outs += [o for _, got in runner.feed(SeaTemperature(t + 0.5, temp)) for o in got]
        for out in outs:
            if isinstance(out, Condition):
                conditions.append(out)
            elif out.topic == "events":
                events.append((out.payload, speed_kn * (k + 0.5) / 3600.0))
            else:
                pubs.append(out)
    return events, conditions, pubs, det


def test_defaults_pass_their_own_check():
    assert check(FrontParams()) == []


def test_one_event_per_front_within_a_third_of_a_mile():
    # GIVEN a 3.4 °C warming front 0.6 nm wide, steepest at 3.0 nm, crossed at 6 kn
    events, conditions, _, _ = sail(tanh_front(3.0, 3.4, 0.6), hours=1.0)
    # THEN exactly one front_crossing, warmer, declared within 0.3 nm past the steepest point
    assert len(events) == 1
    ev, x_boat = events[0]
    assert ev["kind"] == "front_crossing" and ev["warmer"] is True and ev["delta_c"] > 0
    assert 0.0 <= x_boat - 3.0 <= 0.3
    # AND the reported steepest point is near the true one (within 0.05 nm along the parallel)
    x_reported = (ev["lon"] - LON0) * M_PER_DEG_LON / 1852.0
    assert abs(x_reported - 3.0) < 0.05
    # AND the peak gradient is of the right size: the ramp's steepest is 3.4 x 2.197 / (2 x 0.6) = 6.2 °C/nm
    assert 4.0 < ev["gradient_c_per_nm"] < 8.0
    # AND delta_c is the change measured up to the detection: most of the 3.4 °C, never under min_delta_c
    assert 2.0 <= ev["delta_c"] <= 3.4
    assert "delta_expected_c" not in ev
    # AND the front caution was raised once, with what was seen
    raised = [c for c in conditions if c.active]
    assert len(raised) == 1 and raised[0].alert_id == "front" and raised[0].priority == "caution"
    assert "rose" in raised[0].text and "check set and drift" in raised[0].text


@pytest.mark.parametrize("speed_kn", [5.0, 7.0])
def test_lag_at_normal_boat_speeds(speed_kn):
    # GIVEN a 2.8 °C cooling front 0.4 nm wide at 2 nm, at 5 and 7 kn
    events, _, _, _ = sail(tanh_front(2.0, -2.8, 0.4), hours=0.8, speed_kn=speed_kn, seed=3)
    # THEN one cooler event, within 0.3 nm past the steepest point
    assert len(events) == 1
    ev, x_boat = events[0]
    assert ev["warmer"] is False and ev["delta_c"] < 0 and ev["gradient_c_per_nm"] < 0
    assert 0.0 <= x_boat - 2.0 <= 0.3


def test_far_side_of_a_warm_current_is_its_own_event():
    # GIVEN a warm band: +3 °C at 2 nm, back down -3 °C at 5 nm
    sea = lambda x: tanh_front(2.0, 3.0, 0.5)(x) + tanh_front(5.0, -3.0, 0.5)(x)
    events, conditions, _, _ = sail(sea, hours=1.2, seed=4)
    # THEN two events: warmer, then cooler, each near its own edge
    assert [e["warmer"] for e, _ in events] == [True, False]
    assert 0.0 <= events[0][1] - 2.0 <= 0.3 and 0.0 <= events[1][1] - 5.0 <= 0.3


def test_the_tail_of_a_front_is_not_a_second_front():
    # GIVEN a +2.4 °C front 0.6 nm wide at 2 nm whose last 0.8 °C creeps in over the next 0.8 nm, with
    #       ±0.15 °C patches every 0.8 nm (the demo passage's band edge along a crabbing track looks like this;
    #       the tail's own gradient reaches the 1 °C/nm that starts a run)
    tail = lambda x: 0.8 * min(max(x - 2.3, 0.0) / 0.8, 1.0)
    sea = lambda x: tanh_front(2.0, 2.4, 0.6)(x) + tail(x) + 0.15 * math.sin(2 * math.pi * x / 0.8)
    for seed in (21, 22, 23):
        events, conditions, _, _ = sail(sea, hours=0.9, seed=seed)
        # THEN exactly one event and one caution, declared at the front, not in its tail
        assert len(events) == 1, (seed, [e for e, _ in events])
        assert len([c for c in conditions if c.active]) == 1
        assert 0.0 <= events[0][1] - 2.0 <= 0.3
        assert events[0][0]["delta_c"] >= 2.0


def test_delta_c_is_measured_and_never_under_the_threshold():
    # GIVEN fronts just over the 2.0 °C threshold, wide enough that at the usual detection point
    #       (about 0.27 nm past the steepest point) only about 80 % of the change has been run
    for seed, (dc, width) in enumerate(((2.2, 0.8), (-2.3, 0.9), (2.1, 0.6)), start=30):
        events, _, _, _ = sail(tanh_front(2.0, dc, width), hours=0.8, seed=seed)
        # THEN the detector waits until the measured change reaches the threshold; it reports no more than it saw
        assert len(events) == 1
        ev, x_boat = events[0]
        assert abs(ev["delta_c"]) >= FrontParams().min_delta_c
        assert abs(ev["delta_c"]) <= abs(dc) + 0.15  # + sensor noise and quantisation, no extrapolation
        # AND the whole change the boat had run through by then, by the formula, is at least what it reports
        seen = abs(tanh_front(2.0, dc, width)(x_boat) - tanh_front(2.0, dc, width)(0.0))
        assert abs(ev["delta_c"]) <= seen + 0.15


def test_steepest_point_is_steady_on_a_wide_front():
    # GIVEN a 4 °C front 1.0 nm wide (flat-topped gradient), four seeds, at 5 and 7 kn
    for speed_kn in (5.0, 7.0):
        for seed in range(40, 44):
            events, _, _, _ = sail(tanh_front(1.5, 4.0, 1.0), hours=2.6 / speed_kn, speed_kn=speed_kn, seed=seed)
            # THEN one event, declared within 0.3 nm past the steepest point, which it places within 0.05 nm
            assert len(events) == 1
            ev, x_boat = events[0]
            assert 0.0 <= x_boat - 1.5 <= 0.3
            x_reported = (ev["lon"] - LON0) * M_PER_DEG_LON / 1852.0
            assert abs(x_reported - 1.5) < 0.05


def test_same_sign_front_after_a_plateau_is_its_own_event():
    # GIVEN +2.8 °C at 2 nm, a plateau, then +2.6 °C at 3.2 nm (0.4 nm wide each)
    sea = lambda x: tanh_front(2.0, 2.8, 0.4)(x) + tanh_front(3.2, 2.6, 0.4)(x)
    events, _, _, _ = sail(sea, hours=0.8, seed=13)
    # THEN two warmer events, each near its own front, each measured from its own far side
    assert [e["warmer"] for e, _ in events] == [True, True]
    assert 0.0 <= events[0][1] - 2.0 <= 0.3 and 0.0 <= events[1][1] - 3.2 <= 0.3
    assert all(2.0 <= e["delta_c"] <= 2.95 for e, _ in events)


def test_two_warming_steps_a_few_miles_apart_are_two_events():
    # GIVEN two separate +2.5 °C steps at 2 and 6 nm
    sea = lambda x: tanh_front(2.0, 2.5, 0.4)(x) + tanh_front(6.0, 2.5, 0.4)(x)
    events, _, _, _ = sail(sea, hours=1.3, seed=5)
    # THEN each is its own event (the second is measured from after the first)
    assert len(events) == 2 and all(e["warmer"] for e, _ in events)


def test_patchiness_of_a_few_tenths_is_not_a_front():
    # GIVEN ±0.3 °C patches every half mile and ±0.2 every 2 nm, for 12 nm
    sea = lambda x: 0.3 * math.sin(2 * math.pi * x / 0.5) + 0.2 * math.sin(2 * math.pi * x / 2.0 + 1.0)
    events, conditions, _, _ = sail(sea, hours=2.0, seed=6)
    # THEN no event, no caution
    assert events == [] and conditions == []


def test_a_gentle_change_over_many_miles_is_not_a_front():
    # GIVEN 2.5 °C spread over 10 nm (0.25 °C/nm)
    events, _, _, _ = sail(lambda x: 0.25 * x, hours=2.0, seed=7)
    # THEN nothing: too shallow
    assert events == []


def test_splash_spikes_of_seconds_are_not_fronts():
    # GIVEN flat water with spikes of +4 °C for 5 s and -3 °C for 3 s, and one of +6 °C for 7 s
    spikes = ((600, 5, 4.0), (1500, 3, -3.0), (2400, 7, 6.0))
    events, conditions, pubs, _ = sail(lambda x: 0.0, hours=1.0, spikes=spikes, seed=8)
    # THEN no event, and the published temperature never jumps with them
    assert events == [] and conditions == []
    assert max(p.payload["temp_c"] for p in pubs) < 18.5


def test_sun_warming_under_way_is_not_a_front():
    # GIVEN a hull warming 2.5 °C over 3 hours in time while under way at 6 kn (18 nm)
    events, _, pubs, _ = sail(lambda x: 0.0, hours=3.0, in_time=lambda s: 2.5 * s / 10800.0, seed=9)
    # THEN no event; the gradient seen is the slow warming per mile run, well under the threshold
    assert events == []
    grads = [p.payload["gradient_c_per_nm"] for p in pubs if p.payload["gradient_c_per_nm"] is not None]
    assert abs(sum(grads) / len(grads) - 2.5 / 18.0) < 0.1


def test_hove_to_in_a_warming_afternoon_is_not_a_front():
    # GIVEN a boat hove-to (GNSS jitter only) for 3 hours while the water warms 3 °C in time
    events, conditions, pubs, det = sail(lambda x: 0.0, hours=3.0, speed_kn=0.0,
                                         in_time=lambda s: 3.0 * s / 10800.0, seed=10, gnss_jitter_m=3.0)
    # THEN no event, no gradient at all (no distance run), but the temperature is followed
    assert events == [] and conditions == []
    assert all(p.payload["gradient_c_per_nm"] is None for p in pubs)
    assert pubs[-1].payload["temp_c"] == pytest.approx(21.0, abs=0.15)
    # AND jitter added no distance run
    assert pubs[-1].payload["distance_run_nm"] < 0.05


def test_stop_then_go_after_warming_is_not_a_front():
    # GIVEN 1 h at 6 kn, 2 h stopped while the water warms 3 °C, then 1 h at 6 kn
    def speed_at(k):  # seconds -> kn
        return 6.0 if k < 3600 or k >= 3 * 3600 else 0.0
    rng = random.Random(11)
    det, ctx = FrontDetector(FrontParams()), RunContext()
    x, events = 0.0, []
    for k in range(4 * 3600):
        x += speed_at(k) / 3600.0
        t = T0 + k
        det.step(Fix(t, LAT0, LON0 + x * 1852.0 / M_PER_DEG_LON), ctx)
        warm = 3.0 * min(max(k - 3600, 0), 7200) / 7200.0
        out = det.step(SeaTemperature(t + 0.5, round(18.0 + warm + rng.gauss(0, 0.03), 1)), ctx)
        events += [o for o in out if isinstance(o, Publication) and o.topic == "events"]
    # THEN the change that came in time while stopped is no front
    assert events == []
    assert det.report().restarts >= 1


def test_caution_clears_after_the_distance_and_reports_a_current_change():
    # GIVEN a 3 °C front at 2 nm where the current turns from nothing to 2.5 kn east across the front
    current = lambda x: (2.5 * tanh_front(2.0, 1.0, 0.5)(x), 0.0)
    p = FrontParams(caution_nm=1.0, caution_s=3600.0)
    events, conditions, _, _ = sail(tanh_front(2.0, 3.0, 0.5), hours=0.8, seed=12, current=current, params=p)
    # THEN the event says the current estimate changed, by roughly the 2.5 kn it did up to the detection
    ev, x_boat = events[0]
    assert 1.5 <= ev["current_change_kn"] <= 2.5 and "current estimate changed" in ev["current_note"]
    # AND the caution cleared once the boat had run 1 nm past the detection (at 6 kn: 10 min)
    assert [c.active for c in conditions] == [True, False]
    run_nm = (conditions[1].t_s - conditions[0].t_s) * 6.0 / 3600.0
    assert 0.95 <= run_nm <= 1.2


def test_sea_temperature_is_published_at_most_once_a_second():
    # GIVEN readings twice a second
    det, ctx = FrontDetector(FrontParams()), RunContext()
    pubs = []
    for k in range(120):
        t = T0 + 0.5 * k
        det.step(Fix(t, LAT0, LON0 + k * 1.5 / M_PER_DEG_LON), ctx)
        pubs += [o for o in det.step(SeaTemperature(t, 18.0), ctx) if isinstance(o, Publication)]
    # THEN one publication a second, with the interface's fields
    assert len(pubs) == 60
    assert {"temp_c", "gradient_c_per_nm"} <= set(pubs[0].payload)


@pytest.mark.parametrize("a", [(36.0, -12.0, 36.01, -11.99), (60.0, 10.0, 60.005, 10.02),
                               (-45.0, 179.995, -45.001, -179.995), (0.0, 0.0, 0.0001, 0.0001)])
def test_step_distance_matches_the_geodesic(a):
    # GIVEN short steps, one across the antimeridian; WHEN measured on the local plane
    # THEN within 1 cm of the WGS84 geodesic (geographiclib, Karney 2013)
    assert step_distance_m(*a) == pytest.approx(Geodesic.WGS84.Inverse(*a)["s12"], abs=0.01)


def test_long_steps_fall_back_to_the_geodesic():
    a = (36.0, -12.0, 36.5, -11.0)
    assert step_distance_m(*a) == pytest.approx(Geodesic.WGS84.Inverse(*a)["s12"], abs=1e-6)


def test_positions_in_degrees_and_minutes():
    assert format_lat_lon(36.205, -12.5758) == "36°12.3′N 012°34.5′W"
    assert format_lat_lon(-0.9999999, 0.0) == "01°00.0′S 000°00.0′E"


# --------------------------------------------------------------------------- simulator scenario and a real capture


def _fronts_on(run, params: FrontParams | None = None) -> list[Publication]:
    det, ctx, events = FrontDetector(params or FrontParams()), RunContext(), []
    for s in run.samples:
        if isinstance(s, (Fix, SeaTemperature)):
            events += [o for o in det.step(s, ctx) if isinstance(o, Publication) and o.topic == "events"]
    return events


@pytest.mark.parametrize("seed", [1, 2])
def test_simulated_front_crossing_one_event_for_the_main_front_none_for_the_weak_one(seed):
    from tools.simulator import scenarios, simulate

    # GIVEN the simulator's front_crossing scenario: a +3 °C front at 5 nm, patchiness of ±0.3 °C,
    #       a −0.8 °C front at 14 nm (under the 2 °C threshold), sensor noise, sun on the hull
    run = simulate(scenarios.front_crossing(), seed=seed)
    main, weak = [e for e in run.events if e.kind == "front_crossing"]
    assert main.detail["delta_c"] == 3.0 and weak.detail["delta_c"] == -0.8
    # WHEN the detector runs over its fixes and sea temperatures
    events = _fronts_on(run)
    # THEN exactly one event, warmer, for the main front, and none for the weak one
    assert len(events) == 1
    ev = events[0]
    assert ev.payload["warmer"] is True and ev.t_s < weak.t_s
    # AND it was declared 0 to 0.3 nm past the true crossing (WGS84 geodesic, geographiclib)
    boat = run.truth_at(ev.t_s)
    lag_nm = Geodesic.WGS84.Inverse(main.lat, main.lon, boat.lat, boat.lon)["s12"] / 1852.0
    assert ev.t_s >= main.t_s and lag_nm <= 0.3
    # AND it reports the change it measured: over the threshold, not more than the true 3 °C + noise
    assert 2.0 <= ev.payload["delta_c"] <= 3.2


def test_real_survey_with_a_mild_gradient_gives_no_front():
    from daemon.core.config import load_config
    from daemon.commands.replay import run_replay
    from tests.shared import shared_path

    # GIVEN a real 43-minute sounder survey from a small boat (paleolimbot/nmea, inst/extdata/depths.nmea,
    #       MIT; see SOURCES.md): SDMTW every 2 s, 20.5–21.5 °C in 0.1 °C steps, a mild gradient, no sharp front
    path = shared_path("real-captures", "sounder-survey-43min-dpt-mtw.nmea")

    from tests.helpers import Keep

    sink = Keep()
    # WHEN it is replayed through the whole pipeline
    run_replay([str(path)], load_config(None), extra_sinks=[sink], progress=False)
    # THEN the detector followed the water along the track (temperatures in the range the source states,
    #      gradients once distance had been run) ...
    sea = [m.payload for m in sink.messages if m.topic.endswith("/sea_temperature")]
    temps = [p["temp_c"] for p in sea]
    grads = [p["gradient_c_per_nm"] for p in sea if p["gradient_c_per_nm"] is not None]
    assert len(temps) > 500 and 20.4 <= min(temps) and max(temps) <= 21.6
    assert len(grads) > 300 and max(p["distance_run_nm"] for p in sea) > 1.0
    # ... AND reported no front_crossing event and raised no front caution
    kinds = [m.payload.get("kind") for m in sink.messages if m.topic.endswith("/events")]
    assert "front_crossing" not in kinds
    assert not [m for m in sink.messages if m.topic.endswith("/alerts/front")]
