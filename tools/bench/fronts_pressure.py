"""Benchmark: front detection and pressure alerts against the simulator's truth.

    python -m tools.bench.fronts_pressure

Runs the simulator's scenarios through ``FrontDetector`` and
``PressureTendency``, each driven by the estimators' runner as the service
drives it (data-time ticks included) but on its own: no current estimate is
offered to the front detector here and, side by side, the naive
methods a plain instrument would use:
- fronts: the raw reading now against the raw reading 5 minutes ago, a front
  when they differ by ``min_delta_c`` or more (re-armed below half of it);
- pressure: the raw 3-hour difference of readings, an alert at a fall of
  3.6 hPa or more (cleared above 3.0).

Truth: a front is expected where the simulator's track crosses a front or a
current band's edge AND the true water temperature along the track changes
by at least ``min_delta_c`` from within 1 nm before to within 1 nm after
(patchiness can make a nominal 2.0 °C front 1.8 °C at the boat). Each true
front takes at most one detection, matched by sign within 1 nm; a second
detection of the same front, one of a front under ``min_delta_c`` (counted
apart as "on weak") or one far from any front is false. A scenario passes
when every expected front is found once, nothing else is reported, and each
is declared 0 to 0.3 nm past the front. The demo passage is the recorded
one (its seed), simulated afresh rather than read from its file. The pressure
alert is due when the true 3-hour change of MSL pressure (the simulator's
truth, tide included where the scenario has one) first reaches -3.6 hPa.
Lag is signed: negative means before that moment.
Prints a Markdown table. Takes well under a minute.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np

from tools.simulator import scenarios, simulate
from tools.simulator.__main__ import DEMO_SEED
from estimators.base import Condition, Publication
from estimators.fronts import FrontDetector, FrontParams, step_distance_m
from estimators.pressure import PressureParams, PressureTendency
from estimators.runner import run as run_estimators
from estimators.samples import Pressure, SeaTemperature

NAIVE_FRONT_SPAN_S = 300.0
FALL_HPA = 3.6
MATCH_NM = 1.0
MAX_LAG_NM = 0.3  # a crossing is due within this far past the steepest point


@dataclass
class FrontScore:
    expected: int = 0
    found: int = 0
    missed: int = 0
    false: int = 0  # detections matching no front, a second one of the same front, or a sub-threshold front
    on_weak: int = 0  # of the false: detections of a front whose true change is under min_delta_c
    lags_nm: list[float] | None = None

    def passes(self, max_lag_nm: float) -> bool:
        """Every front found once, nothing else, each within ``max_lag_nm`` past its steepest point."""
        lags = self.lags_nm or []
        return self.missed == 0 and self.false == 0 and all(0.0 <= x <= max_lag_nm for x in lags)


def _truth_fronts(run, min_delta: float) -> list[tuple[float, float, float, float]]:
    """(t_s, lat, lon, signed delta along the track) of each front the track crosses."""
    tr = run.truth
    out = []
    for ev in run.events:
        if ev.kind not in ("front_crossing", "band_edge"):
            continue
        i = int(np.searchsorted(tr["t_s"], ev.t_s))
        sog = max(float(tr["sog_kn"][i]), 0.5)
        n = int(MATCH_NM / sog * 3600.0 / run.scenario.truth_dt_s)
        before, after = tr["sea_temp_c"][max(0, i - n): i + 1], tr["sea_temp_c"][i: i + n + 1]
        sign = 1.0 if ev.detail["delta_c"] > 0 else -1.0
        delta = (after.max() - before.min()) if sign > 0 else (after.min() - before.max())
        out.append((ev.t_s, ev.lat, ev.lon, float(delta)))
    return out


def _score_fronts(run, detections: list[tuple[float, bool]], min_delta: float) -> FrontScore:
    """Match detections (t_s, warmer) to the truth fronts by sign and distance run.

    Each truth front takes at most one detection; a detection of a front
    whose true change is under ``min_delta`` is a false one (``on_weak``).
    """
    truth = _truth_fronts(run, min_delta)
    score = FrontScore(lags_nm=[])
    used = set()
    for t_s, warmer in detections:
        here = run.truth_at(t_s)
        best = None
        for j, (tt, lat, lon, delta) in enumerate(truth):
            if j in used or (delta > 0) != warmer:
                continue
            d_nm = step_distance_m(lat, lon, here.lat, here.lon) / 1852.0 * (1 if t_s >= tt else -1)
            if abs(d_nm) <= MATCH_NM and (best is None or abs(d_nm) < abs(best[1])):
                best = (j, d_nm)
        if best is None:
            score.false += 1
            continue
        used.add(best[0])
        if abs(truth[best[0]][3]) >= min_delta:
            score.found += 1
            score.lags_nm.append(best[1])
        else:
            score.false += 1
            score.on_weak += 1
    score.expected = sum(1 for f in truth if abs(f[3]) >= min_delta)
    score.missed = score.expected - score.found
    return score


def _naive_fronts(samples, min_delta: float) -> list[tuple[float, bool]]:
    temps = [s for s in samples if isinstance(s, SeaTemperature)]
    out, armed, j = [], True, 0
    for s in temps:
        while temps[j].t_s < s.t_s - NAIVE_FRONT_SPAN_S:
            j += 1
        diff = s.temp_c - temps[j].temp_c
        if armed and abs(diff) >= min_delta:
            out.append((s.t_s, diff > 0))
            armed = False
        elif not armed and abs(diff) < 0.5 * min_delta:
            armed = True
    return out


def _run_fronts(run, params: FrontParams) -> list[tuple[float, bool]]:
    out = []
    for _, outputs in run_estimators(FrontDetector(params), run.samples):  # as the service drives it
        for o in outputs:
            if isinstance(o, Publication) and o.topic == "events":
                out.append((o.t_s, o.payload["warmer"]))
    return out


def _true_fall_time(run) -> float | None:
    """When the true 3-hour MSL change first reaches -3.6 hPa (UNIX s), or None."""
    t, p = run.truth["t_s"], run.truth["msl_hpa"]
    then = np.interp(t - 3 * 3600.0, t, p)
    ok = (t - 3 * 3600.0 >= t[0]) & (p - then <= -FALL_HPA)
    return float(t[np.argmax(ok)]) if ok.any() else None


def _raises(times: list[float], due: float | None) -> tuple[float | None, int]:
    """(lag minutes of the first raise, false raises) against the due time."""
    if due is None:
        return None, len(times)
    if not times:
        return None, 0
    return (times[0] - due) / 60.0, 0


def _run_pressure(run, params: PressureParams) -> list[float]:
    est = PressureTendency(params, run.scenario.sensors.barometer_height_m)
    raised = []
    for _, outputs in run_estimators(est, run.samples):  # as the service drives it, ticks included
        for o in outputs:
            if isinstance(o, Condition) and o.alert_id == "pressure_fall" and o.active and o.priority == "caution":
                raised.append(o.t_s)
    return raised


def _naive_pressure(samples) -> list[float]:
    ps = [s for s in samples if isinstance(s, Pressure)]
    raised, active, j = [], False, 0
    for s in ps:
        if s.t_s - ps[0].t_s < 3 * 3600.0:
            continue
        while ps[j + 1].t_s <= s.t_s - 3 * 3600.0:
            j += 1
        diff = s.station_hpa - ps[j].station_hpa
        if not active and diff <= -FALL_HPA:
            raised.append(s.t_s)
            active = True
        elif active and diff > -3.0:
            active = False
    return raised


def _fmt(x: float | None, nd: int = 2) -> str:
    return "–" if x is None else f"{x:.{nd}f}"


def main() -> int:
    started = time.monotonic()
    fp = FrontParams()
    lines = ["## Fronts (nm past the steepest point; expected = |true change across| ≥ "
             f"{fp.min_delta_c:.1f} °C; pass = each found once, nothing else, lag 0 to {MAX_LAG_NM} nm)", "",
             "| scenario | seed | expected | method | found | missed | false (on weak) | lag mean nm | lag max nm "
             "| pass |",
             "| --- | --- | --- | --- | --- | --- | --- | --- | --- | --- |"]
    for name, seeds in (("front_crossing", (1, 2)), ("current_crossing", (1, 2)), ("tacking_leg", (1, 2)),
                        ("demo_passage", (DEMO_SEED,))):
        for seed in seeds:
            run = simulate(getattr(scenarios, name)(), seed)
            for label, dets in (("offwatch", _run_fronts(run, fp)),
                                ("naive 5-min difference", _naive_fronts(run.samples, fp.min_delta_c))):
                sc = _score_fronts(run, dets, fp.min_delta_c)
                lags = sc.lags_nm or []
                lines.append(f"| {name} | {seed} | {sc.expected} | {label} | {sc.found} | {sc.missed} "
                             f"| {sc.false} ({sc.on_weak}) | {_fmt(sum(lags) / len(lags) if lags else None)} "
                             f"| {_fmt(max(lags) if lags else None)} | {'yes' if sc.passes(MAX_LAG_NM) else 'no'} |")
    lines += ["", "## Pressure fall (caution; lag in minutes after the true 3-h fall reaches 3.6 hPa)", "",
              "| scenario | seed | due (h in) | method | first alert (h in) | lag min | false alarms |",
              "| --- | --- | --- | --- | --- | --- | --- |"]
    for name in ("pressure_fall", "steady_pressure_12h"):
        run = simulate(getattr(scenarios, name)(), 1)
        t0 = run.scenario.start_utc
        due = _true_fall_time(run)
        methods = (("offwatch (3-h + early rule)", _run_pressure(run, PressureParams())),
                   ("offwatch, 3-h rule only", _run_pressure(run, PressureParams(early_rule=False))),
                   ("naive raw 3-h difference", _naive_pressure(run.samples)))
        for label, raised in methods:
            lag, false = _raises(raised, due)
            first = (raised[0] - t0) / 3600.0 if raised else None
            lines.append(f"| {name} | 1 | {_fmt(None if due is None else (due - t0) / 3600.0)} | {label} "
                         f"| {_fmt(first)} | {_fmt(lag, 1)} | {false} |")
    lines += ["", f"_{time.monotonic() - started:.0f} s in all._"]
    print("\n".join(lines))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
