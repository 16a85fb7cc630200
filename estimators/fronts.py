"""Sea-temperature fronts: temperature and its gradient along the track, and crossings.

Theory of operation
-------------------
A front is a change of water temperature *in space*. A boat samples the water
along its track, so the question is how temperature changes with the distance
run over ground, not with time: a hull warming in the afternoon sun, or a boat
hove-to while the surface layer heats, changes the reading in time without
any distance run, and must not look like a front.

Independent variable: ``d``, the distance run over ground in nautical miles,
summed from successive GNSS fixes on the WGS84 ellipsoid (a local step with
the radii of curvature; the geodesic from geographiclib after a long gap).
GNSS jitter while stopped would add distance that was never run, so fixes are
averaged over ``position_average_s`` and the odometer advances only once the
boat is ``min_step_m`` from the last counted position (a step odometer).

Method (a robust windowed regression in distance; no state-space model):
1. Despike in time: each reading is replaced by the median of the readings of
   the last ``despike_s`` seconds. A splash or an air bubble that upsets the
   sensor for a few seconds is outvoted; a change that lasts is passed with a
   lag of about half the window (8 s, about 0.01 nm at 6 kn).
2. Bin in distance: despiked readings are averaged into bins of ``bin_nm``
   of distance run. While stopped no bin closes, so time alone adds nothing
   to the profile. A bin that takes longer than ``bin_nm`` at ``min_speed_kn``
   to fill means the boat was (nearly) stopped: the profile restarts there, so
   a change that happened in time while stopped is never spread over the few
   metres run either side of the stop.
3. Regress in distance: temperature and gradient are the least-squares line
   through the bins of the last ``smoothing_nm``: ``T(d) = a + g (d - d_c)``,
   ``g`` in °C/nm, signed along the track (positive: warmer ahead). The slope
   belongs to the window's centre ``d_c`` (half a window behind the boat).
4. Decide (a small state machine on ``g``): a *run* starts when ``|g|`` reaches
   ``min_gradient_c_per_nm`` and lasts while ``g`` keeps its sign and ``|g|``
   stays above ``run_keep_fraction`` of that (hysteresis against the
   gradient's noise). The steepest point is the centroid of the gradient's
   top (``|g|`` above ``steepest_fraction`` of the run's peak, weighted by how
   far above): the maximum alone wanders by a tenth of a mile on a wide
   front, whose top is flat. The far side is the coldest (warming run) or
   warmest (cooling run) bin before the steepest point within the trailing
   ``window_nm``, and never before the end of the last front declared, so
   the tail of a front (its last tenth often creeps in over most of a mile)
   is never measured again as a front of its own. The change, ``delta_c``, is
   *measured*: the newest bin less the far side, nothing extrapolated. A
   crossing is declared once per run, when that change reaches
   ``min_delta_c`` and the gradient is past its peak: fallen to
   ``past_peak_fraction`` of the peak, ``confirm_nm`` run past the steepest
   point, or the run ended. Detection lag: ``confirm_nm`` plus half of
   ``smoothing_nm`` plus the despike lag, about 0.25 nm past the steepest
   point by default (less on a narrow front, whose gradient falls sooner),
   for a front whose measured change has reached ``min_delta_c`` by then; a
   front only just over the threshold is declared later, once it has.
   By then about 80 % of a 0.8-nm front's change (10-90 %) has been run, so
   ``delta_c`` is that much of the whole change; the rest is its tail.
   One front gives one event: a new run of the same sign is a new front only
   once the water has changed by ``min_delta_c`` again since the last one
   ended; the far side of a current's band (a run of the other sign) is its
   own event.

Why a windowed regression and not a Kalman filter with a local linear trend
or Bayesian online change-point detection (Adams & MacKay 2007): a front is a
ramp of a few tenths of a mile, not a step between constant segments (the
change-point model's assumption), and a Kalman trend filter trades lag
against noise through a process noise that has no natural value for a front;
the regression's lag is fixed and known (half of ``smoothing_nm`` plus the
confirmation distance), so the detection lag can be stated and tested.

What does not trigger: patchiness of a few tenths of a degree (steep, but
``|delta| < min_delta_c``); a splash spike of seconds (removed in step 1);
slow warming in time (a small gradient per mile under way, nothing while
stopped); a gentle change of 2 °C over many miles (too shallow). A current's
warm core crossed from one side to the other gives two runs of opposite sign,
so two events.

Current change: while a run lasts, the newest ``current`` publication (any
estimator's, through ``ctx.latest``) is noted at each bin; the event reports
how much the current vector changed between the start of the front and the
detection, and says so in its note when that is ``current_note_kn`` or more.

Published: topic ``sea_temperature`` (at most once per ``publish_interval_s``):
``temp_c`` (despiked), ``gradient_c_per_nm`` (null until a regression window
of profile exists), ``distance_run_nm``; event ``front_crossing`` and the
``front`` caution, active from the crossing until ``caution_nm`` more has been
run or ``caution_s`` has passed, whichever comes first.

Default thresholds are common practice for what a sailor would call a
front worth remarking (a change of a couple of degrees within a mile), not
taken from a published source.
"""

from __future__ import annotations

import bisect
import math
import statistics
from collections import deque
from collections.abc import Sequence
from dataclasses import dataclass

from geographiclib.geodesic import Geodesic

from estimators import wording
from estimators.base import CAUTION, Condition, Context, EstimatorBase, Output, Publication
from estimators.params import param
from estimators.samples import Fix, SeaTemperature

_GEOD = Geodesic.WGS84
_M_PER_NM = 1852.0  # international nautical mile, exactly


@dataclass(frozen=True)
class FrontParams:
    """Parameters of the front detector ([front] in the config)."""

    min_gradient_c_per_nm: float = param(1.0, "°C/nm", 0.1, 50.0,
                                          "gradient (regression over smoothing_nm) that starts a front run")
    min_delta_c: float = param(2.0, "°C", 0.3, 20.0, "total change across the front that makes it a crossing")
    window_nm: float = param(2.0, "nm", 0.1, 10.0, "longest distance over which the total change is measured")
    smoothing_nm: float = param(0.1, "nm", 0.02, 1.0, "regression window for temperature and gradient")
    bin_nm: float = param(0.01, "nm", 0.002, 0.1, "distance bin of the profile")
    despike_s: float = param(15.0, "s", 0.0, 120.0, "running-median window against splash spikes")
    min_speed_kn: float = param(1.5, "kn", 0.1, 10.0, "below this the profile restarts (time is not distance)")
    min_step_m: float = param(10.0, "m", 0.0, 100.0, "odometer step: GNSS jitter below this is not distance")
    position_average_s: float = param(10.0, "s", 0.0, 60.0, "fixes are averaged over this before the odometer")
    run_keep_fraction: float = param(0.5, "", 0.1, 1.0, "a run lasts while |g| >= this x min_gradient")
    past_peak_fraction: float = param(0.5, "", 0.1, 0.95, "gradient fallen to this x its peak: past the front")
    confirm_nm: float = param(0.18, "nm", 0.0, 1.0, "distance past the peak after which a crossing is declared")
    caution_nm: float = param(2.0, "nm", 0.1, 50.0, "the front caution lasts this far past the crossing...")
    caution_s: float = param(1200.0, "s", 60.0, 86400.0, "...or this long, whichever comes first")
    current_note_kn: float = param(0.5, "kn", 0.0, 10.0, "current change across the front worth a note")
    gap_s: float = param(120.0, "s", 5.0, 3600.0, "no fix or temperature for this long restarts the profile")
    publish_interval_s: float = param(1.0, "s", 1.0, 60.0, "sea_temperature is published at most this often")
    steepest_fraction: float = param(0.7, "", 0.3, 0.95,
                                     "the steepest point is the centroid of the gradient above this x its peak")


@dataclass(frozen=True)
class _Bin:
    """One closed distance bin of the profile."""

    d_nm: float  # odometer at the bin's centre
    temp_c: float  # mean despiked temperature
    lat: float
    lon: float
    t_s: float  # when it closed


@dataclass(frozen=True)
class FrontReport:
    """Health of the detector, for status and tests."""

    fixes: int
    temperatures: int
    bins: int
    restarts: int
    crossings: int


_WGS84_A_M = 6378137.0  # WGS84 semi-major axis (NIMA TR8350.2)
_WGS84_E2 = (1.0 / 298.257223563) * (2.0 - 1.0 / 298.257223563)  # first eccentricity squared
_LOCAL_STEP_MAX_M = 2000.0


def step_distance_m(lat1: float, lon1: float, lat2: float, lon2: float) -> float:
    """Distance over ground between two positions, metres (WGS84).

    A step between successive fixes is short, so it is measured on the local
    tangent plane with the ellipsoid's radii of curvature at the mid-latitude
    (about 10x faster than the full geodesic, and within a few millimetres
    of it for a step of a mile; checked against geographiclib in the tests).
    Longer steps (after a gap) take the geodesic.
    """
    phi = math.radians(0.5 * (lat1 + lat2))
    w = math.sqrt(1.0 - _WGS84_E2 * math.sin(phi) ** 2)
    m = _WGS84_A_M * (1.0 - _WGS84_E2) / w**3  # meridional radius M = a(1-e²)/W³
    n = _WGS84_A_M / w  # prime-vertical radius N = a/W
    dlon = (lon2 - lon1 + 180.0) % 360.0 - 180.0
    north = math.radians(lat2 - lat1) * m
    east = math.radians(dlon) * n * math.cos(phi)
    s = math.hypot(east, north)
    if s <= _LOCAL_STEP_MAX_M:
        return s
    return _GEOD.Inverse(lat1, lon1, lat2, lon2, Geodesic.DISTANCE)["s12"]  # geodesic on WGS84


def _nearest_bin(bins: Sequence[_Bin], d_nm: float) -> _Bin:
    """The first of the bins whose centre is nearest ``d_nm`` (``min`` by |d - d_nm|, which keeps the first of
    equals). The centres are in order along the track (the odometer only grows, and a restart clears the
    bins), so |d - d_nm| falls to the first centre at or past ``d_nm`` and rises after it: the nearest is that
    one or the run of equal centres just before it, found by bisection, not a key function called for each
    of some hundred bins."""
    centres = [b.d_nm for b in bins]
    i = bisect.bisect_left(centres, d_nm)                # the first centre at or past d_nm
    if i == len(centres) or (i > 0 and abs(centres[i - 1] - d_nm) <= abs(centres[i] - d_nm)):
        i = bisect.bisect_left(centres, centres[i - 1])   # the first of the run of equal centres before it
    return bins[i]


class _Odometer:
    """Distance run over ground from fixes.

    Positions are first averaged over ``average_s`` (GNSS jitter of a few
    metres a fix would otherwise add up to knots of speed that never was), and
    the distance advances only in steps of at least ``min_step_m`` from the
    last counted position.
    """

    def __init__(self, min_step_m: float, average_s: float) -> None:
        self.min_step_m = min_step_m
        self.average_s = average_s
        self.distance_m = 0.0
        self.anchor: tuple[float, float] | None = None  # last counted (averaged) position
        self.last: Fix | None = None  # newest fix
        self._recent: deque[Fix] = deque()

    def add(self, fix: Fix) -> float:
        """Take a fix; return the distance run in metres it added (0 within the step)."""
        self.last = fix
        self._recent.append(fix)
        while self._recent[0].t_s < fix.t_s - self.average_s:
            self._recent.popleft()
        here = self._mean_position()
        if self.anchor is None:
            self.anchor = here
            return 0.0
        s12 = step_distance_m(self.anchor[0], self.anchor[1], here[0], here[1])
        if s12 < self.min_step_m:
            return 0.0
        self.anchor = here
        self.distance_m += s12
        return s12

    def _mean_position(self) -> tuple[float, float]:
        ref = self._recent[-1].lon_deg
        n = len(self._recent)
        # lists summed, not generators: a generator resumed for each of the window's fixes, twice at every
        # fix, was most of the cost (the same sums in the same order)
        lat = sum([f.lat_deg for f in self._recent]) / n
        dlon = sum([(f.lon_deg - ref + 180.0) % 360.0 - 180.0 for f in self._recent]) / n  # across ±180 too
        return lat, (ref + dlon + 180.0) % 360.0 - 180.0

    def reset_average(self) -> None:
        self._recent.clear()

    @property
    def nm(self) -> float:
        return self.distance_m / _M_PER_NM


def _fit_line(ds: Sequence[float], ts: Sequence[float]) -> tuple[float, float, float]:
    """Least squares T = a + g (d - d_c): returns (d_c, a, g); g in °C per nm."""
    n = len(ds)
    d_c = sum(ds) / n
    t_m = sum(ts) / n
    sdd = sum((d - d_c) ** 2 for d in ds)
    sdt = sum((d - d_c) * (t - t_m) for d, t in zip(ds, ts))
    g = sdt / sdd if sdd > 0.0 else 0.0  # g = Σ(d-d̄)(T-T̄) / Σ(d-d̄)²
    return d_c, t_m, g


def format_lat_lon(lat: float, lon: float) -> str:
    """Degrees and decimal minutes, e.g. ``36°12.3′N 012°34.5′W``: the one position format of texts."""
    return wording.position(lat, lon)


class _Run:
    """A stretch of steep gradient of one sign: a front being crossed."""

    def __init__(self, sign: int, start_d: float, top_fraction: float, keep_nm: float) -> None:
        self.sign = sign
        self.start_d = start_d
        self.top_fraction = top_fraction
        self.keep_nm = keep_nm
        self.peak_g = 0.0  # signed, the largest |g| seen in the run
        self.top: deque[tuple[float, float, float, float]] = deque()  # (d_c nm, g, lat, lon) with |g| near the peak
        self.fired = False
        self.current_at_start: tuple[float, float] | None = None

    def note_gradient(self, g: float, d_c: float, lat: float, lon: float) -> None:
        if abs(g) > abs(self.peak_g):
            self.peak_g = g
        floor = self.top_fraction * abs(self.peak_g)
        if abs(g) > floor:
            self.top.append((d_c, g, lat, lon))
        while self.top and (abs(self.top[0][1]) <= floor or self.top[0][0] < d_c - self.keep_nm):
            self.top.popleft()  # the floor only rises: what falls under it never counts again

    def steepest(self) -> tuple[float, float, float]:
        """(odometer nm, lat, lon) of the steepest point: the centroid of the gradient's top.

        The gradient's maximum alone wanders by a tenth of a mile on a wide
        front (its top is flat and the noise picks the highest point); the
        centroid of ``|g| - top_fraction x |peak|`` over the points above that
        floor is about three times steadier and, for a symmetric ramp, at the
        same place once both sides of the top have been run.
        """
        floor = self.top_fraction * abs(self.peak_g)
        pts = [(abs(g) - floor, d, lat, lon) for d, g, lat, lon in self.top if abs(g) > floor]
        if not pts:
            return self.start_d, math.nan, math.nan
        w_sum = sum(w for w, _, _, _ in pts)
        d_s = sum(w * d for w, d, _, _ in pts) / w_sum if w_sum > 0.0 else pts[-1][1]  # Σ w d / Σ w
        _, _, lat, lon = min(pts, key=lambda p: abs(p[1] - d_s))
        return d_s, lat, lon

    @property
    def peak_d(self) -> float:
        return self.steepest()[0]


class FrontDetector(EstimatorBase):
    """Sea temperature against distance run; one ``front_crossing`` event per front."""

    name = "fronts"
    accepts = (SeaTemperature, Fix)

    def __init__(self, params: FrontParams | None = None) -> None:
        self.p = params or FrontParams()
        self._odo = _Odometer(self.p.min_step_m, self.p.position_average_s)
        self._raw: deque[SeaTemperature] = deque()  # readings within despike_s
        self._bins: deque[_Bin] = deque()
        self._bin_sum = 0.0
        self._bin_n = 0
        self._bin_start_d = 0.0
        self._bin_start_t: float | None = None
        self._run: _Run | None = None
        self._far_side_from_d = -math.inf  # the far side of a new front is never before this (nm)
        self._caution_until: tuple[float, float] | None = None  # (odometer nm, t_s)
        self._last_pub_t = -math.inf
        self._last_temp: SeaTemperature | None = None
        self._temp_c: float | None = None
        self._gradient: float | None = None
        self._counts = {"fixes": 0, "temperatures": 0, "bins": 0, "restarts": 0, "crossings": 0}

    # ------------------------------------------------------------------ protocol

    def step(self, sample, ctx: Context) -> Sequence[Output]:
        if isinstance(sample, Fix):
            return self._on_fix(sample)
        if isinstance(sample, SeaTemperature):
            return self._on_temperature(sample, ctx)
        return ()

    def tick(self, t_s: float, ctx: Context) -> Sequence[Output]:
        return self._caution_expiry(t_s)

    def report(self) -> FrontReport:
        return FrontReport(**self._counts)

    # ------------------------------------------------------------------ inputs

    def _on_fix(self, fix: Fix) -> Sequence[Output]:
        if not (math.isfinite(fix.lat_deg) and math.isfinite(fix.lon_deg)):
            return ()
        prev = self._odo.last
        if prev is not None and fix.t_s - prev.t_s > self.p.gap_s:
            self._odo.reset_average()
            self._restart()
        self._counts["fixes"] += 1
        self._odo.add(fix)
        return self._caution_expiry(fix.t_s)

    def _on_temperature(self, s: SeaTemperature, ctx: Context) -> Sequence[Output]:
        if not math.isfinite(s.temp_c):
            return ()
        self._counts["temperatures"] += 1
        if self._last_temp is not None and s.t_s - self._last_temp.t_s > self.p.gap_s:
            self._restart()
        self._last_temp = s
        despiked = self._despike(s)
        self._temp_c = despiked
        out: list[Output] = []
        if self._odo.last is not None and s.t_s - self._odo.last.t_s <= self.p.gap_s:
            out.extend(self._add_to_profile(s.t_s, despiked, ctx))
        out.extend(self._caution_expiry(s.t_s))
        if s.t_s - self._last_pub_t >= self.p.publish_interval_s:
            self._last_pub_t = s.t_s
            out.append(Publication(s.t_s, "sea_temperature", {
                "temp_c": round(despiked, 3),
                "gradient_c_per_nm": None if self._gradient is None else round(self._gradient, 3),
                "distance_run_nm": round(self._odo.nm, 4),
            }))
        return out

    def _despike(self, s: SeaTemperature) -> float:
        """Median of the readings of the last ``despike_s`` seconds (°C)."""
        self._raw.append(s)
        while self._raw and self._raw[0].t_s < s.t_s - self.p.despike_s:
            self._raw.popleft()
        return statistics.median(r.temp_c for r in self._raw)

    # ------------------------------------------------------------------ profile

    def _restart(self) -> None:
        """Forget the profile: what follows is not comparable along a distance."""
        if self._bins or self._bin_n:
            self._counts["restarts"] += 1
        self._bins.clear()
        self._bin_sum, self._bin_n = 0.0, 0
        self._bin_start_d = self._odo.nm
        self._bin_start_t = None
        self._run = None
        self._gradient = None

    def _add_to_profile(self, t_s: float, temp_c: float, ctx: Context) -> Sequence[Output]:
        d = self._odo.nm
        if self._bin_start_t is None:
            self._bin_start_t, self._bin_start_d = t_s, d
        max_bin_s = self.p.bin_nm / self.p.min_speed_kn * 3600.0  # time to run one bin at the minimum speed
        if d - self._bin_start_d < self.p.bin_nm:
            if t_s - self._bin_start_t > max_bin_s:
                self._restart()  # (nearly) stopped: time, not distance, is changing the water here
                self._bin_start_t, self._bin_start_d = t_s, d
            self._bin_sum += temp_c
            self._bin_n += 1
            return ()
        out: list[Output] = []
        if self._bin_n:
            fix = self._odo.last
            self._bins.append(_Bin(0.5 * (self._bin_start_d + d), self._bin_sum / self._bin_n,
                                   fix.lat_deg, fix.lon_deg, t_s))
            self._counts["bins"] += 1
            keep_nm = max(self.p.window_nm, self.p.smoothing_nm) + self.p.bin_nm
            while self._bins and self._bins[0].d_nm < d - keep_nm:
                self._bins.popleft()
            out.extend(self._on_new_bin(t_s, ctx))
        self._bin_start_t, self._bin_start_d = t_s, d
        self._bin_sum, self._bin_n = temp_c, 1
        return out

    def _regression(self) -> tuple[float, float, float] | None:
        """(d_c, temp at d_c, gradient °C/nm) over the last ``smoothing_nm``, or None."""
        if not self._bins:
            return None
        d_end = self._bins[-1].d_nm
        win = [b for b in self._bins if b.d_nm > d_end - self.p.smoothing_nm]
        if len(win) < 3 or win[-1].d_nm - win[0].d_nm < 0.5 * self.p.smoothing_nm:
            return None
        return _fit_line([b.d_nm for b in win], [b.temp_c for b in win])

    # ------------------------------------------------------------------ decision

    def _on_new_bin(self, t_s: float, ctx: Context) -> Sequence[Output]:
        fit = self._regression()
        if fit is None:
            self._gradient = None
            return ()
        d_c, _, g = fit
        self._gradient = g
        centre = _nearest_bin(self._bins, d_c)
        p = self.p
        out: list[Output] = []
        run = self._run
        if run is not None and (math.copysign(1, g) != run.sign
                                or abs(g) < p.run_keep_fraction * p.min_gradient_c_per_nm):
            self._run = None  # the run is over: a last chance for a front that is only now large enough
            if not run.fired:
                out.extend(self._maybe_fire(run, t_s, d_c, ctx, ended_now=True))
            if run.fired:
                self._far_side_from_d = d_c  # the front ends here: its tail is no new front's far side
            run = None
        if run is None and abs(g) >= p.min_gradient_c_per_nm:
            run = self._run = _Run(int(math.copysign(1, g)), d_c, p.steepest_fraction, p.window_nm)
            run.current_at_start = self._current_vector(ctx)
        if run is not None:
            run.note_gradient(g, d_c, centre.lat, centre.lon)
            if not run.fired:
                out.extend(self._maybe_fire(run, t_s, d_c, ctx, ended_now=False))
        return out

    def _delta(self, run: _Run) -> tuple[float, float]:
        """(change measured so far °C, signed; distance nm over which it happened).

        The far side is the coldest (warming run) or warmest (cooling run) bin
        before the steepest point, within the trailing ``window_nm`` and never
        before the end of the last front declared (``_far_side_from_d``): the
        tail of a front already reported is not counted again.
        """
        sign = run.sign
        d_end = self._bins[-1].d_nm
        start = max(d_end - self.p.window_nm, self._far_side_from_d)
        win = [b for b in self._bins if b.d_nm >= start] or [self._bins[-1]]
        smooth = _running_mean([b.temp_c for b in win], 3)  # three bins take the edge off sensor noise
        pick = min if sign > 0 else max
        peak_d = run.peak_d  # the steepest point's centroid, over the run's top: found once, not per bin
        before_peak = [k for k in range(len(win)) if win[k].d_nm <= peak_d] or [0]
        i = pick(before_peak, key=lambda k: smooth[k])
        delta = smooth[-1] - smooth[i]  # measured: newest less the far side
        # The front's width: from the last bin still within 10 % of the change of the far side's extreme.
        j = max(k for k in range(i, len(smooth)) if sign * (smooth[k] - smooth[i]) <= 0.1 * abs(delta))
        return delta, d_end - win[j].d_nm

    def _maybe_fire(self, run: _Run, t_s: float, d_c: float, ctx: Context, ended_now: bool) -> Sequence[Output]:
        p = self.p
        delta, dist = self._delta(run)
        if run.sign * delta < p.min_delta_c:  # the measured change itself, so no event reports less
            return ()
        g_now = self._gradient if self._gradient is not None else 0.0
        past_peak = (ended_now or d_c - run.peak_d >= p.confirm_nm
                     or abs(g_now) <= p.past_peak_fraction * abs(run.peak_g))
        if not past_peak:
            return ()
        run.fired = True
        self._counts["crossings"] += 1
        return self._crossing_outputs(run, t_s, delta, dist, ctx)

    # ------------------------------------------------------------------ outputs

    @staticmethod
    def _current_vector(ctx: Context) -> tuple[float, float] | None:
        pub = ctx.latest("current") if ctx is not None else None
        if pub is None:
            return None
        east, north = pub.payload.get("east_kn"), pub.payload.get("north_kn")
        if east is None or north is None:
            return None
        return float(east), float(north)

    def _crossing_outputs(self, run: _Run, t_s: float, delta: float, dist: float, ctx: Context) -> list[Output]:
        before, after = run.current_at_start, self._current_vector(ctx)
        change = None if before is None or after is None else math.hypot(after[0] - before[0], after[1] - before[1])
        steep_d, steep_lat, steep_lon = run.steepest()
        where = format_lat_lon(steep_lat, steep_lon)
        verb = "rose" if delta > 0 else "fell"
        note = None
        if change is not None and change >= self.p.current_note_kn:
            note = f"the current estimate changed by {change:.1f} kn across the front"
        detected_after = self._bins[-1].d_nm - steep_d
        payload = {
            "kind": "front_crossing",
            "lat": round(steep_lat, 6),
            "lon": round(steep_lon, 6),
            "delta_c": round(delta, 2),  # measured, from the far side to the detection
            "gradient_c_per_nm": round(run.peak_g, 2),
            "warmer": delta > 0,
            "distance_nm": round(dist, 3),  # over which delta_c was measured
            "distance_run_nm": round(steep_d, 3),  # odometer at the steepest point
            "detected_after_nm": round(detected_after, 3),  # run past the steepest point when declared
            "current_change_kn": None if change is None else round(change, 2),
            "current_note": note,
        }
        text = (f"Sea temperature {verb} {abs(delta):.1f} °C in {max(dist, self.p.bin_nm):.1f} nm at {where} "
                f"(steepest {abs(run.peak_g):.1f} °C/nm): a current's edge often lies along such a front; "
                f"check set and drift.")
        if note:
            text += f" Note: {note}."
        self._caution_until = (self._odo.nm + self.p.caution_nm, t_s + self.p.caution_s)
        values = {k: payload[k] for k in ("delta_c", "gradient_c_per_nm", "distance_nm", "lat", "lon",
                                          "current_change_kn")}
        return [Publication(t_s, "events", payload, retain=False),
                Condition(t_s, "front", CAUTION, True, text, values)]

    def _caution_expiry(self, t_s: float) -> Sequence[Output]:
        if self._caution_until is None:
            return ()
        until_nm, until_t = self._caution_until
        if self._odo.nm >= until_nm or t_s >= until_t:
            self._caution_until = None
            return [Condition(t_s, "front", CAUTION, False, "Sea-temperature front left astern.", {})]
        return ()


def _running_mean(xs: Sequence[float], k: int) -> list[float]:
    """Centred running mean of ``k`` points (shorter at the ends)."""
    h = k // 2
    out = []
    for i in range(len(xs)):
        seg = xs[max(0, i - h): i + h + 1]
        out.append(sum(seg) / len(seg))
    return out
