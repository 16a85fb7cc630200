"""True wind, depth and what wind over a current does to the sea.

Theory of operation
-------------------
Frames (all vectors east/north in knots, in the earth frame; directions in
degrees true):
- *apparent wind*: the air's velocity relative to the moving boat, what the
  masthead vane and cups measure (MWV relative: an angle off the bow, the
  direction it blows *from*, and a speed);
- *true wind over water* (the sailor's "true wind"): the air's velocity
  relative to the water, ``air/water = apparent + boat/water``;
- *wind over ground*: ``air/ground = apparent + boat/ground``
  (= air/water + current, since ``boat/ground = boat/water + current``).
The boat's velocity through the water is ``stw_scale x log`` along
``heading + heading_offset + leeway`` (the calibration the current estimator
has learnt, read from its publication, never by importing it), the same water
track as the current estimator's triangle ``g = c + k s u(psi + d + lambda)``;
its velocity over ground is the GNSS SOG/COG when fresh, else the water
velocity plus the current.

Leeway (``lambda``): the hull slides to leeward, so the water track is turned
from the heading by a few degrees under sail. offwatch cannot measure it; it
takes the same rule of thumb as the current estimator, ``lambda = K heel /
STW^2`` with the heel of the interval (XDR attitude), from the one place the
boat's hull is described, ``[current] leeway_coefficient`` (with its
``leeway_max_deg`` and ``leeway_min_stw_kn``; ``estimators.current.leeway_deg``).
By default K = 0: no leeway, and the frame of "true wind over water" is then
the one along the heading; what that leaves out is ``STW sin(lambda)`` of the
boat's velocity across the heading, which goes straight into the true wind:
5 degrees at 6.5 kn is 0.57 kn, mostly along the wind on a reach (its speed),
across it close-hauled and on a run (its direction). Published as
``leeway_deg`` (the interval's leeway used, 0 without a coefficient or a heel).

Averaging: the vane sits on a yawing, rolling hull. Each apparent wind sample
is turned into the earth frame with the heading of its own moment (so the
yaw cancels), and the samples of one fix interval (or of ``max_epoch_s``
without fixes) are averaged as vectors, never as angles. The boat's motion
over the same interval is averaged the same way and added. The mean wind is
the moving average of those vectors over ``mean_window_s`` (a block average:
the way WMO-No. 8, the Guide to Instruments and Methods of Observation,
defines a mean wind; from memory); the gust is the highest 3-second running
mean speed over the last ``gust_window_s`` (WMO-No. 8's gust, 10 minutes
being the usual reporting period). Sigmas come from the spread of the
interval vectors in the window with ``n_eff = window / decorrelation_s``
independent samples, plus the calibration's own sigmas.

Sources: ``wind_source = "apparent"`` (default) uses MWV relative and falls
back to the instrument's own true wind (MWV theoretical / MWD, ``WaterWind``)
only while no apparent wind has come for ``source_timeout_s``;
``"instrument"`` prefers the instrument's true wind the same way round.

Depth: DPT/DBT plus the configured transducer depth; published with its age,
used for the waves while younger than ``depth_max_age_s`` (else deep water).

Waves against the current (see ``estimators.waves`` for the physics): the wind
sea travels downwind of the true wind over water, so the current opposes it
by ``opposing = current . u(wind from)`` (signed, positive against). For each
period of the wind sea's band (and a swell: from the config, or a ``Swell`` sample:
what the crew reports on ``<prefix>/swell``, see ``daemon.intake.swell``) the factors
are computed on the current component along that wave's travel; the published
factors are those of the worst (steepest) period not blocked.

Near blocking, linear theory's factors grow without bound (the energy piles up
as the group speed over the ground falls to zero), a figure no sea shows: the
waves break first. So ``height_factor``/``steepness_factor`` are published as
linear theory gives them (the interface's fields) and beside them, bounded at
breaking, ``bounded_height_factor``/``bounded_steepness_factor`` (and the
peak's, ``peak_bounded_*``): the steepness factor stops where the wind sea's
highest waves (``highest_wave_factor`` x Hs on the peak's still-water
wavelength, the one steepness offwatch estimates) reach Michell's 1/7,
``steepness <= (1/7) / (2 Hs / L0(Tp))`` (about 2.8 for a fully developed sea),
``height = steepness x length_factor``. ``near_blocking`` is true where the
bound bites the worst period: its waves break on the current rather than grow.
The caution judges by the wind sea's peak period (``breaking_fraction``, which
passes 1 where linear theory would carry the peak's waves past breaking); the
watch view shows the peak's bounded factors, never the worst period's unbounded ones.

``wind_against_current`` (a caution): the wind sea's significant height and
peak period from the wind (Pierson–Moskowitz, or JONSWAP with a fetch), made
steeper by the current's factors at the peak period; the highest wave is
taken as ``highest_wave_factor`` x Hs (about 2, common practice). The caution
is raised when that wave's H/L reaches ``raise_fraction`` of the breaking
limit 1/7 (Michell 1893), or the peak period is blocked, with an opposing
current of at least ``min_opposing_kn`` and a steepened sea of at least
``min_height_m``; it clears at ``clear_fraction``. A fully developed sea with
no current sits at about 0.36 of the limit whatever the wind (its Hs / Lp is
about 1/39), so the default 0.6 is reached where the current has nearly
doubled the sea's steepness: about 2.3 kn against 20 kn of wind, 3.5 kn
against 30 kn. These defaults are a judgement, not a published threshold.

``unstable_air`` (a caution): the air colder than the sea by
``unstable_raise_c`` or more (each the mean of the last minute), cleared
below ``unstable_clear_c``. Cold air over much warmer water is unstable and
breeds squalls; the default margin of a few degrees is common practice, not a
published threshold.
"""

from __future__ import annotations

import bisect
import math
from collections import deque
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any

from estimators.angles import KN_TO_MPS, from_east_north, to_east_north, wrap_180, wrap_360
from estimators.base import CAUTION, Condition, Context, EstimatorBase, Output, Publication
from estimators.current import CurrentParams, leeway_deg
from estimators.params import check, param
from estimators.samples import (
    AirTemperature, ApparentWind, Attitude, Depth, Fix, GroundVelocity, Heading, Sample, SeaTemperature, Swell,
    WaterSpeed, WaterWind,
)
from estimators.thresholds import Hysteresis
from estimators.wording import fixed
from estimators.waves import (
    BREAKING_STEEPNESS, WaveOnCurrent, blocking_period_s, wave_on_current, wavelength_m, wind_at_10m, wind_sea,
)

TOPIC = "sea_state"
HEADING_MAX_AGE_S = 2.0  # a heading older than this does not turn an apparent wind sample
LOG_MAX_AGE_S = 10.0  # a log reading older than this does not move the boat
GUST_AVERAGE_S = 3.0  # WMO gust: the highest 3-s running mean
TEMPERATURE_MEAN_S = 60.0
USABLE_CURRENT = ("valid", "degraded", "converging")
CAUTION_CURRENT = ("valid", "degraded")


@dataclass(frozen=True)
class SeaStateParams:
    """The [sea_state] section."""

    wind_source: str = param("apparent", choices=("apparent", "instrument"),
                             doc="apparent: MWV relative, the instrument's true wind (MWV T / MWD) only while "
                                 "no apparent wind comes; instrument: the other way round")
    source_timeout_s: float = param(10.0, "s", 1.0, 600.0, "a wind source silent this long gives way to the other")
    max_epoch_s: float = param(2.0, "s", 0.5, 10.0, "without fixes, wind samples are averaged over this")
    mean_window_s: float = param(600.0, "s", 10.0, 1800.0, "block average of the wind vectors (WMO: 10 min; 120 s "
                                                               "follows changes sooner, gusts show more)")
    gust_window_s: float = param(600.0, "s", 60.0, 3600.0, "the gust is the highest 3-s mean over this (WMO: 10 min)")
    decorrelation_s: float = param(10.0, "s", 1.0, 120.0, "gusts this long count as one independent sample (sigma)")
    anemometer_height_m: float = param(10.0, "m", 1.0, 60.0, "anemometer height above the sea (wind taken to 10 m)")
    transducer_depth_m: float = param(0.0, "m", -5.0, 10.0, "added to each depth reading (0 when DPT already has it)")
    depth_max_age_s: float = param(60.0, "s", 5.0, 3600.0, "a depth older than this is not used for the waves")
    fetch_nm: float = param(0.0, "nm", 0.0, 1000.0, "fetch for the wind sea (JONSWAP); 0: fully developed (PM)")
    swell_period_s: float = param(0.0, "s", 0.0, 30.0, "a swell's period to include; 0: none")
    swell_from_deg: float = param(0.0, "deg", 0.0, 360.0, "where that swell comes from, degrees true")
    band_periods: int = param(7, "", 1, 21, "periods computed across the wind sea's half-power band")
    highest_wave_factor: float = param(2.0, "", 1.0, 2.5, "highest wave / significant height (about 2, common practice)")
    raise_fraction: float = param(0.6, "", 0.3, 1.5, "wind_against_current when the highest wave's H/L reaches "
                                                     "this x 1/7 (a fully developed sea alone: about 0.36)")
    clear_fraction: float = param(0.5, "", 0.2, 1.4, "...and clears below this x 1/7")
    min_opposing_kn: float = param(1.0, "kn", 0.1, 10.0, "no wind_against_current with less opposing current")
    min_height_m: float = param(1.0, "m", 0.0, 10.0, "no wind_against_current for a steepened sea lower than this")
    unstable_raise_c: float = param(3.0, "°C", 0.5, 20.0, "unstable_air when the air is this much colder than the sea")
    unstable_clear_c: float = param(2.0, "°C", 0.0, 19.5, "...and clears when the difference falls below this")
    temperature_max_age_s: float = param(300.0, "s", 10.0, 3600.0, "older air or sea temperatures are not compared")
    publish_interval_s: float = param(2.0, "s", 1.0, 60.0, "sea_state is published at most this often")

    def __post_init__(self) -> None:
        if check(self):  # a value out of its own range: the loader names that first
            return
        if not self.clear_fraction < self.raise_fraction:
            raise ValueError(f"clear_fraction = {self.clear_fraction!r}: expected less than raise_fraction "
                             f"({self.raise_fraction!r}), or the caution would chatter")
        if not self.unstable_clear_c < self.unstable_raise_c:
            raise ValueError(f"unstable_clear_c = {self.unstable_clear_c!r}: expected less than unstable_raise_c "
                             f"({self.unstable_raise_c!r}), or the caution would chatter")


# not frozen: made about every second of data (DEVELOPERS.md, estimators/)
@dataclass(slots=True)
class WindEpoch:
    """One averaging interval's wind vectors (east, north; air velocity *toward*, kn)."""

    t_s: float
    water: tuple[float, float]  # air over water
    ground: tuple[float, float] | None  # air over ground (None without a ground velocity)
    source: str  # "apparent" or "instrument"


# not frozen: made about every second of data (DEVELOPERS.md, estimators/)
@dataclass(slots=True)
class Boat:
    """The boat's motion over one interval (kn, east/north) and the calibration used."""

    water: tuple[float, float] | None
    ground: tuple[float, float] | None
    stw_scale: float
    heading_offset_deg: float


# not frozen: made for each sea-state publication (DEVELOPERS.md, estimators/)
@dataclass(slots=True)
class MeanWind:
    from_deg: float
    speed_kn: float
    sigma_kn: float
    sigma_deg: float
    samples: int


def wind_from(vec: tuple[float, float]) -> tuple[float, float]:
    """(from_deg, speed) of an air velocity (east, north) that blows *toward* the vector."""
    speed, toward = from_east_north(*vec)
    return wrap_360(toward + 180.0), speed


def apparent_air_velocity(heading_true_deg: float, angle_deg: float, speed_kn: float) -> tuple[float, float]:
    """The apparent wind (from ``angle_deg`` off the bow) as an earth-frame air velocity (toward), kn."""
    return to_east_north(speed_kn, heading_true_deg + angle_deg + 180.0)


def true_wind(apparent_air: tuple[float, float], boat_water: tuple[float, float],
              boat_ground: tuple[float, float] | None = None
              ) -> tuple[tuple[float, float], tuple[float, float] | None]:
    """Apparent air velocity to (air over water, air over ground) velocities, kn (east, north)."""
    ae, an = apparent_air
    water = (ae + boat_water[0], an + boat_water[1])  # air/water = apparent + boat/water
    ground = None if boat_ground is None else (ae + boat_ground[0], an + boat_ground[1])  # air/ground = apparent + boat/ground
    return water, ground


def _mean(vecs: Sequence[tuple[float, float]]) -> tuple[float, float]:
    n = len(vecs)
    # sum() of a list, in order: the same figures as a generator's, without a frame per item
    return sum([v[0] for v in vecs]) / n, sum([v[1] for v in vecs]) / n


def _along(current: tuple[float, float], toward_deg: float) -> float:
    """The current's component along a direction it might flow toward, kn."""
    ue, un = to_east_north(1.0, toward_deg)
    return current[0] * ue + current[1] * un


# not frozen: made about every second of data (DEVELOPERS.md, estimators/)
@dataclass(slots=True)
class Spread:
    """A window's vectors summed up: how many, their mean, and the sums of the departures' products."""

    n: int
    mean: tuple[float, float]
    see: float  # sum of (east - mean east)^2
    sen: float  # sum of (east - mean east)(north - mean north)
    snn: float  # sum of (north - mean north)^2


class WindowSums:
    """Running sums of a window's vectors (east, north; their squares and product), so its mean and
    spread cost the same whatever its length instead of a pass over every vector per publication.

    Taken about a reference vector (the first added to an empty window, or the newest when summed
    afresh): the departures from it are small beside the wind's speed, so the sums of squares keep
    their digits when the mean's part is taken away. Summed afresh from the vectors once as many
    have left as the window holds, so the rounding of adding and taking away never builds up past
    one window's worth (parts in 1e14 of the figures, published to 0.01 at most).
    """

    def __init__(self) -> None:
        self.rebase(())

    def rebase(self, vectors: Iterable[tuple[float, float] | None]) -> None:
        kept = [v for v in vectors if v is not None]
        self._n, self._ref, self._se, self._sn, self._see, self._sen, self._snn = 0, (0.0, 0.0), 0.0, 0.0, 0.0, 0.0, 0.0
        self.left = 0  # vectors taken away since the last rebase
        for v in kept[-1:] + kept[:-1]:  # the newest first: it is the reference
            self.add(v)

    def add(self, v: tuple[float, float] | None) -> None:
        if v is not None:
            if self._n == 0:  # the first of a window (or of one emptied by a gap): the reference, all else 0
                self._ref, self._se, self._sn, self._see, self._sen, self._snn = v, 0.0, 0.0, 0.0, 0.0, 0.0
            de, dn = v[0] - self._ref[0], v[1] - self._ref[1]
            self._n += 1
            self._se += de
            self._sn += dn
            self._see += de * de
            self._sen += de * dn
            self._snn += dn * dn

    def remove(self, v: tuple[float, float] | None) -> None:
        if v is not None:
            de, dn = v[0] - self._ref[0], v[1] - self._ref[1]
            self._n -= 1
            self._se -= de
            self._sn -= dn
            self._see -= de * de
            self._sen -= de * dn
            self._snn -= dn * dn
            self.left += 1

    def spread(self, leaving: Iterable[tuple[float, float] | None] = ()) -> Spread | None:
        """The window's spread without the ``leaving`` vectors (a few at its old end); None when empty."""
        n, se, sn, see, sen, snn = self._n, self._se, self._sn, self._see, self._sen, self._snn
        re, rn = self._ref
        for v in leaving:
            if v is not None:
                de, dn = v[0] - re, v[1] - rn
                n, se, sn, see, sen, snn = n - 1, se - de, sn - dn, see - de * de, sen - de * dn, snn - dn * dn
        if n <= 0:
            return None
        me, mn = se / n, sn / n  # the mean's departure from the reference
        return Spread(n, (re + me, rn + mn),
                      max(0.0, see - n * me * me), sen - n * me * mn, max(0.0, snn - n * mn * mn))


class SeaStateEstimator(EstimatorBase):
    """Publishes ``sea_state``; raises ``wind_against_current`` and ``unstable_air``."""

    name = "sea_state"
    accepts = (Fix, GroundVelocity, ApparentWind, WaterWind, Depth, AirTemperature, SeaTemperature, Swell)

    def __init__(self, params: SeaStateParams | None = None, hull: CurrentParams | None = None) -> None:
        """``hull``: the [current] section, whose leeway rule (``leeway_coefficient``...) describes the hull."""
        self.params = p = params or SeaStateParams()
        self.hull = hull or CurrentParams()
        self._leeway = 0.0  # the last interval's leeway, deg
        self._epochs: deque[WindEpoch] = deque()
        # the epochs' water and ground winds beside them, in the same order, and their running sums
        self._waters: deque[tuple[float, float]] = deque()
        self._grounds: deque[tuple[float, float] | None] = deque()
        self._water_sums, self._ground_sums = WindowSums(), WindowSums()
        # neighbours in the deque out of time order (a sample stepped late can close an epoch older than
        # the last one): while there are any, the window is found by testing every epoch, as it always was
        self._inversions = 0
        self._gust_speeds: deque[tuple[float, float]] = deque()  # (t, 3-s mean speed), descending speeds
        self._t_epoch: float | None = None
        self._t_pub: float | None = None
        self._seen: dict[str, float] = {}
        self._depth: Depth | None = None
        self._swell: tuple[float, float] | None = (p.swell_period_s, p.swell_from_deg) if p.swell_period_s > 0 else None
        self._against = Hysteresis(p.raise_fraction, p.clear_fraction)
        self._unstable = Hysteresis(p.unstable_raise_c, p.unstable_clear_c)
        self.epochs_made = 0

    # -- the protocol ------------------------------------------------------------------------

    def step(self, sample: Sample, ctx: Context) -> Sequence[Output]:
        if isinstance(sample, Swell):  # the crew's report; no period: back to the config's swell (or none)
            p = self.params
            if sample.period_s is not None and sample.from_deg is not None:
                self._swell = (sample.period_s, sample.from_deg)
            else:
                self._swell = (p.swell_period_s, p.swell_from_deg) if p.swell_period_s > 0 else None
            return ()
        if isinstance(sample, Depth):
            self._depth = Depth(sample.t_s, sample.depth_m + self.params.transducer_depth_m)
            return ()
        if isinstance(sample, (ApparentWind, WaterWind)):
            self._seen[type(sample).__name__] = sample.t_s
            if self._t_epoch is None:
                self._t_epoch = sample.t_s - 1e-6
            return ()
        if isinstance(sample, (Fix, GroundVelocity)) and self._t_epoch is not None:
            self._close_epoch(sample.t_s, ctx, sample)
            return self._maybe_publish(sample.t_s, ctx)
        return ()

    def tick(self, t_s: float, ctx: Context) -> Sequence[Output]:
        if self._t_epoch is not None and t_s - self._t_epoch >= self.params.max_epoch_s:
            self._close_epoch(t_s, ctx, None)
        return self._maybe_publish(t_s, ctx)

    # -- wind ---------------------------------------------------------------------------------

    def _source(self, t: float) -> str | None:
        """Which wind to use now: the preferred one while it comes, the other while it does not."""
        app = t - self._seen.get("ApparentWind", -math.inf) <= self.params.source_timeout_s
        ins = t - self._seen.get("WaterWind", -math.inf) <= self.params.source_timeout_s
        if self.params.wind_source == "apparent":
            return "apparent" if app else ("instrument" if ins else None)
        return "instrument" if ins else ("apparent" if app else None)

    def _close_epoch(self, t1: float, ctx: Context, ground_sample: Fix | GroundVelocity | None) -> None:
        t0, self._t_epoch = self._t_epoch, t1
        if t1 <= t0:
            return
        source = self._source(t1)
        current = self._current(ctx)
        heads = ctx.history.between(Heading, t0 - HEADING_MAX_AGE_S, t1)  # asked once, used by each step below
        boat = self._boat(t0, t1, ctx, current, ground_sample, heads)
        epoch = None
        if source == "apparent":
            epoch = self._apparent_epoch(t0, t1, ctx, boat, heads)
        elif source == "instrument":
            epoch = self._instrument_epoch(t0, t1, ctx, boat, current, heads)
        if epoch is not None:
            self._add_epoch(epoch)

    def _current(self, ctx: Context) -> dict[str, Any] | None:
        pub = ctx.latest("current")
        return dict(pub.payload) if pub is not None else None

    def _boat(self, t0: float, t1: float, ctx: Context, current: dict[str, Any] | None,
              ground_sample: Fix | GroundVelocity | None, heads: list[Heading]) -> Boat:
        k, d = 1.0, 0.0
        if current is not None and current.get("stw_scale") is not None:
            k, d = float(current["stw_scale"]), float(current.get("heading_offset_deg") or 0.0)
        logs = ctx.history.between(WaterSpeed, t0 - LOG_MAX_AGE_S, t1)
        water = None
        if heads and logs:
            # the heading's circular mean over the interval (as unit vectors), the log's mean, calibrated
            # (sin, cos) of each, summed by map in C: to_east_north(1.0, ...)'s figures and _mean's sums in
            # the same order, without two Python calls for each heading of each epoch
            angles = ([math.radians(h.true_deg + d) for h in heads if h.t_s > t0]
                      or [math.radians(heads[-1].true_deg + d)])
            ue, un = sum(map(math.sin, angles)) / len(angles), sum(map(math.cos, angles)) / len(angles)
            in_interval = [w.speed_kn for w in logs if w.t_s > t0] or [logs[-1].speed_kn]
            stw = k * sum(in_interval) / len(in_interval)  # true STW = stw_scale x log
            heels = [a.heel_deg for a in ctx.history.between(Attitude, t0, t1) if a.heel_deg is not None]
            lam = leeway_deg(self.hull, sum(heels) / len(heels) if heels else None, stw)
            _, track = from_east_north(ue, un)
            water = to_east_north(stw, track + lam)  # along the water track: heading + offset + leeway
            self._leeway = lam
        ground = None
        if ground_sample is not None and ground_sample.sog_kn is not None and ground_sample.cog_deg is not None:
            ground = to_east_north(ground_sample.sog_kn, ground_sample.cog_deg)
        elif water is not None and _usable(current):
            ground = (water[0] + current["east_kn"], water[1] + current["north_kn"])
        return Boat(water, ground, k, d)

    def _apparent_epoch(self, t0: float, t1: float, ctx: Context, boat: Boat, heads: list[Heading]) -> WindEpoch | None:
        if boat.water is None:
            return None
        winds = ctx.history.between(ApparentWind, t0, t1)
        if not winds or not heads:
            return None
        times = [h.t_s for h in heads]
        air = []
        for w in winds:
            i = bisect.bisect_right(times, w.t_s) - 1  # the heading of the wind sample's own moment
            if i < 0 or w.t_s - times[i] > HEADING_MAX_AGE_S:
                continue
            air.append(apparent_air_velocity(heads[i].true_deg + boat.heading_offset_deg, w.angle_deg, w.speed_kn))
        if not air:
            return None
        water, ground = true_wind(_mean(air), boat.water, boat.ground)
        return WindEpoch(t1, water, ground, "apparent")

    def _instrument_epoch(self, t0: float, t1: float, ctx: Context, boat: Boat,
                          current: dict[str, Any] | None, heads: list[Heading]) -> WindEpoch | None:
        winds = ctx.history.between(WaterWind, t0, t1)
        vecs = []
        for w in winds:
            if w.from_true_deg is not None:
                vecs.append(to_east_north(w.speed_kn, w.from_true_deg + 180.0))
            elif w.angle_deg is not None and heads:
                vecs.append(to_east_north(w.speed_kn, heads[-1].true_deg + boat.heading_offset_deg + w.angle_deg + 180.0))
        if not vecs:
            return None
        water = _mean(vecs)
        ground = None
        if _usable(current):  # air/ground = air/water + current
            ground = (water[0] + current["east_kn"], water[1] + current["north_kn"])
        return WindEpoch(t1, water, ground, "instrument")

    def _add_epoch(self, epoch: WindEpoch) -> None:
        self.epochs_made += 1
        p = self.params
        if self._epochs and epoch.t_s <= self._epochs[-1].t_s:
            self._inversions += 1
        self._epochs.append(epoch)
        self._waters.append(epoch.water)
        self._grounds.append(epoch.ground)
        self._water_sums.add(epoch.water)
        self._ground_sums.add(epoch.ground)
        while self._epochs and self._epochs[0].t_s < epoch.t_s - max(p.mean_window_s, GUST_AVERAGE_S):
            gone = self._epochs.popleft()
            self._water_sums.remove(self._waters.popleft())
            self._ground_sums.remove(self._grounds.popleft())
            if self._epochs and self._epochs[0].t_s <= gone.t_s:
                self._inversions -= 1
        for sums, vectors in ((self._water_sums, self._waters), (self._ground_sums, self._grounds)):
            if sums.left >= len(vectors):  # a window's worth has left: sum afresh (see WindowSums)
                sums.rebase(vectors)
        recent = self._recent_water(epoch.t_s - GUST_AVERAGE_S)
        speed = math.hypot(*_mean(recent))
        q = self._gust_speeds
        while q and q[-1][1] <= speed:  # a monotone queue: the front is the window's maximum
            q.pop()
        q.append((epoch.t_s, speed))
        while q[0][0] < epoch.t_s - p.gust_window_s:
            q.popleft()

    def _recent_water(self, after_s: float) -> list[tuple[float, float]]:
        """The water winds of the epochs after ``after_s``, oldest first (epochs come in time order,
        so they are the deque's tail: walked from the newest instead of over the whole window)."""
        if self._inversions:
            return [e.water for e in self._epochs if e.t_s > after_s]
        recent = []
        for e in reversed(self._epochs):
            if e.t_s <= after_s:
                break
            recent.append(e.water)
        recent.reverse()
        return recent

    def _window(self, t: float, sums: WindowSums, vectors: deque) -> Spread | None:
        """The spread of the ``vectors`` (waters or grounds) of the epochs inside the mean window ending at
        ``t``: in time order the epochs before it are a few at the deque's head, taken off the running sums."""
        after_s = t - self.params.mean_window_s
        if self._inversions:
            fresh = WindowSums()
            fresh.rebase(v for e, v in zip(self._epochs, vectors) if e.t_s > after_s)
            return fresh.spread()
        leaving = []
        for e, v in zip(self._epochs, vectors):
            if e.t_s > after_s:
                break
            leaving.append(v)
        return sums.spread(leaving)

    def _ground_wind(self, t: float) -> tuple[float, float] | None:
        """(from_deg, speed) of the mean wind over ground over the window (its spread is not published)."""
        spread = self._window(t, self._ground_sums, self._grounds)
        return wind_from(spread.mean) if spread else None

    def _mean_wind(self, t: float) -> MeanWind | None:
        """The mean wind over water over the window, with its sigmas."""
        p = self.params
        spread = self._window(t, self._water_sums, self._waters)
        if spread is None:
            return None
        me, mn = spread.mean
        from_deg, speed = wind_from((me, mn))
        # the spread along and across the mean, as the sigma of a mean of n_eff independent samples:
        # sum((d . u)^2) = ue^2 see + 2 ue un sen + un^2 snn, and across with u turned a right angle
        ue, un = (me / speed, mn / speed) if speed > 1e-6 else (0.0, 1.0)
        cross = 2.0 * ue * un * spread.sen
        along2 = max(0.0, ue * ue * spread.see + cross + un * un * spread.snn)
        across2 = max(0.0, un * un * spread.see - cross + ue * ue * spread.snn)
        n = spread.n
        span = min(p.mean_window_s, t - self._epochs[0].t_s + 1.0)
        n_eff = max(1.0, min(n, span / p.decorrelation_s))
        s_along = math.sqrt(along2 / max(1, n - 1) / n_eff)
        s_across = math.sqrt(across2 / max(1, n - 1) / n_eff)
        sigma_deg = 180.0 if speed < 1e-6 else min(180.0, math.degrees(math.atan2(s_across, speed)))
        return MeanWind(from_deg, speed, s_along, sigma_deg, n)

    # -- publishing ---------------------------------------------------------------------------

    def _maybe_publish(self, t: float, ctx: Context) -> list[Output]:
        if self._t_pub is not None and t - self._t_pub < self.params.publish_interval_s:
            return []
        water = self._mean_wind(t)
        if water is None:
            return []
        self._t_pub = t
        return self._publish(t, ctx, water)

    def _publish(self, t: float, ctx: Context, water: MeanWind) -> list[Output]:
        p = self.params
        ground = self._ground_wind(t)
        current = self._current(ctx)
        depth_m, depth_age = self._depth_now(t)
        payload: dict[str, Any] = {
            "true_wind_from_deg": water.from_deg, "true_wind_kn": water.speed_kn,
            "true_wind_sigma_deg": water.sigma_deg, "true_wind_sigma_kn": water.sigma_kn,
            "true_wind_gust_kn": self._gust_speeds[0][1] if self._gust_speeds else None,
            "ground_wind_from_deg": ground[0] if ground else None,
            "ground_wind_kn": ground[1] if ground else None,
            "wind_source": self._epochs[-1].source if self._epochs else None,
            "wind_mean_s": p.mean_window_s,
            "depth_m": depth_m,
            "depth_age_s": depth_age,
            "leeway_deg": self._leeway,
        }
        air, sea = self._temperatures(t, ctx)
        payload["air_temp_c"] = air
        payload["sea_minus_air_c"] = None if air is None or sea is None else sea - air
        waves = self._waves(water, current, depth_m if depth_age is not None and depth_age <= p.depth_max_age_s else None)
        payload.update(waves)
        out: list[Output] = [Publication(t, TOPIC, payload)]
        out.extend(self._against_condition(t, water, waves, current))
        out.extend(self._unstable_condition(t, air, sea))
        return out

    def _depth_now(self, t: float) -> tuple[float | None, float | None]:
        if self._depth is None:
            return None, None
        return self._depth.depth_m, max(0.0, t - self._depth.t_s)

    def _waves(self, water: MeanWind, current: dict[str, Any] | None, depth_m: float | None) -> dict[str, Any]:
        """The opposing current, the wind sea, and each period's factors on that current."""
        p = self.params
        if not _usable(current):
            return _no_waves(depth_m)
        c = (float(current["east_kn"]), float(current["north_kn"]))
        opposing = _along(c, water.from_deg)  # the current's component into the wind: against the wind sea
        u10 = wind_at_10m(water.speed_kn * KN_TO_MPS, p.anemometer_height_m)
        sea = wind_sea(u10, p.fetch_nm * 1852.0, p.band_periods)
        runs: list[WaveOnCurrent] = [wave_on_current(T, -opposing * KN_TO_MPS, depth_m) for T in sea.periods_s]
        if self._swell is not None:
            runs.append(wave_on_current(self._swell[0], -_along(c, self._swell[1]) * KN_TO_MPS, depth_m))
        free = [r for r in runs if not r.blocked]
        worst = max(free, key=lambda r: r.steepness_factor) if free else None
        peak = wave_on_current(sea.peak_period_s, -opposing * KN_TO_MPS, depth_m)
        ceiling = _breaking_ceiling(p.highest_wave_factor * sea.significant_height_m, sea.peak_period_s, depth_m)
        bounded, peak_bounded = _bounded(worst, ceiling), _bounded(peak, ceiling)
        h_peak = sea.significant_height_m * (peak.height_factor or 0.0)
        if peak.blocked:
            fraction = None
        else:
            steep = p.highest_wave_factor * h_peak / (wavelength_m(sea.peak_period_s, depth_m) * peak.length_factor)
            fraction = steep / BREAKING_STEEPNESS  # the highest wave's H/L as a fraction of Michell's 1/7
        return {
            "opposing_current_kn": opposing,
            "opposing_current_sigma_kn": _opposing_sigma(current, water.from_deg),
            "height_factor": worst.height_factor if worst else None,
            "length_factor": worst.length_factor if worst else None,
            "steepness_factor": worst.steepness_factor if worst else None,
            "worst_period_s": worst.period_s if worst else None,
            "bounded_height_factor": bounded[0],
            "bounded_steepness_factor": bounded[1],
            "near_blocking": bounded[2],
            "blocking_period_s": _blocking(opposing, depth_m),
            "blocked_periods_s": [r.period_s for r in runs if r.blocked],
            "periods_s": [r.period_s for r in runs],
            "swell_period_s": self._swell[0] if self._swell else None,
            "swell_from_deg": self._swell[1] if self._swell else None,
            "wind_sea_height_m": sea.significant_height_m,
            "wind_sea_period_s": sea.peak_period_s,
            "wind_sea_fully_developed": not sea.fetch_limited,
            "peak_height_factor": peak.height_factor,
            "peak_length_factor": peak.length_factor,
            "peak_steepness_factor": peak.steepness_factor,
            "peak_bounded_height_factor": peak_bounded[0],
            "peak_bounded_steepness_factor": peak_bounded[1],
            "steepened_height_m": h_peak if not peak.blocked else None,
            "breaking_fraction": fraction,
            "peak_blocked": peak.blocked,
            "depth_used_m": depth_m,
        }

    # -- cautions -----------------------------------------------------------------------------

    def _against_condition(self, t: float, water: MeanWind, waves: dict[str, Any],
                           current: dict[str, Any] | None) -> list[Output]:
        p = self.params
        value = 0.0
        opposing = waves["opposing_current_kn"]
        if current is not None and current.get("quality") in CAUTION_CURRENT and opposing is not None \
                and opposing >= p.min_opposing_kn:
            if waves["peak_blocked"]:  # breaking where the current stops them, if the sea is worth it at all
                value = math.inf if waves["wind_sea_height_m"] >= p.min_height_m else 0.0
            elif waves["steepened_height_m"] is not None and waves["steepened_height_m"] >= p.min_height_m:
                value = waves["breaking_fraction"]
        was = self._against.active
        self._against.update(value if math.isfinite(value) else 1e9)
        if not self._against.active:
            if not was:
                return []
            return [Condition(t, "wind_against_current", CAUTION, False,
                              "Wind and current no longer stack up the sea (estimate).", {})]
        # said again while it lasts: the alert's figures follow the sea (the alert manager rate-limits the news)
        return [Condition(t, "wind_against_current", CAUTION, True, _against_text(water, waves),
                          # the peak's factors first (what the text says); the worst period's beside them,
                          # linear theory's and bounded at breaking, with near_blocking (a display shows those)
                          {k: waves[k] for k in ("opposing_current_kn", "peak_height_factor", "peak_length_factor",
                                                 "peak_steepness_factor", "peak_bounded_height_factor",
                                                 "peak_bounded_steepness_factor", "height_factor", "length_factor",
                                                 "steepness_factor", "bounded_height_factor",
                                                 "bounded_steepness_factor", "near_blocking", "breaking_fraction",
                                                 "wind_sea_height_m", "wind_sea_period_s", "blocking_period_s")}
                          | {"true_wind_kn": round(water.speed_kn, 1), "true_wind_from_deg": round(water.from_deg)})]

    def _temperatures(self, t: float, ctx: Context) -> tuple[float | None, float | None]:
        """The air's and the sea's mean of the last minute, °C (None where none is recent)."""
        age = self.params.temperature_max_age_s
        return _recent_mean(ctx, AirTemperature, t, age), _recent_mean(ctx, SeaTemperature, t, age)

    def _unstable_condition(self, t: float, air: float | None, sea: float | None) -> list[Output]:
        """The caution from the minute's means the publication carries (taken once, at the same time)."""
        was = self._unstable.active
        self._unstable.update(None if air is None or sea is None else sea - air)
        if not self._unstable.active:
            if not was:
                return []
            return [Condition(t, "unstable_air", CAUTION, False, "The air is no longer much colder than the sea.", {})]
        text = (f"Air {fixed(air)} °C is {fixed(sea - air)} °C colder than the sea ({fixed(sea)} °C): unstable air over "
                f"warmer water breeds squalls; check the sky to windward, the barometer and the forecast.")
        return [Condition(t, "unstable_air", CAUTION, True, text,
                          {"air_temp_c": round(air, 1), "sea_temp_c": round(sea, 1), "difference_c": round(sea - air, 1)})]


def _against_text(water: MeanWind, w: dict[str, Any]) -> str:
    seen = (f"True wind {water.speed_kn:.0f} kn from {round(water.from_deg) % 360:03d}° over a current of "
            f"{w['opposing_current_kn']:.1f} kn setting into it")
    stopped = w["blocking_period_s"]
    stopped_text = f"waves of {stopped:.1f} s and shorter cannot travel against it" if stopped else "no wave can travel against it"
    if w["peak_blocked"]:
        sea = f": the wind sea's {w['wind_sea_period_s']:.0f}-s waves are stopped ({stopped_text}) and break where they meet it"
    else:
        sea = (f": the wind sea (about {w['wind_sea_height_m']:.1f} m, {w['wind_sea_period_s']:.0f}-s peak, without the current) "
               f"estimated {w['peak_height_factor']:.1f}x higher "
               f"and {w['peak_length_factor']:.2f}x as long (steepness x{w['peak_steepness_factor']:.1f}), its highest "
               f"waves near {w['breaking_fraction'] * 100:.0f} % of the breaking steepness 1/7; {stopped_text}")
    return (f"{seen}{sea}. An estimate from linear wave theory and a wind sea estimated from the wind: "
            f"check the sea itself.")


def _breaking_ceiling(highest_m: float, peak_period_s: float, depth_m: float | None) -> float:
    """The largest steepness factor a wave of the wind sea can reach before it breaks.

    Linear theory's steepening has no ceiling near blocking; a wave has: H/L = 1/7 (Michell 1893). The
    wind sea's highest waves stand at s0 = H / L0(Tp) in still water (the one steepness offwatch
    estimates; about 0.36 of the limit in a fully developed sea), so a factor of (1/7) / s0 brings them
    to breaking: never below 1 (a sea already that steep is not made less so by the bound). The same
    ceiling for every period, so a bounded worst period is never below the bounded peak.
    """
    s0 = highest_m / wavelength_m(peak_period_s, depth_m)
    return max(1.0, BREAKING_STEEPNESS / s0) if s0 > 0.0 else math.inf


def _bounded(run: WaveOnCurrent | None, ceiling: float) -> tuple[float | None, float | None, bool | None]:
    """(height, steepness factor, beyond breaking) of one period, its steepness factor capped at the
    ceiling; the height factor is that steepness times the length factor (which stays bounded: deep
    water at blocking 1/4), since steepness = height / length."""
    if run is None or run.blocked:
        return None, None, None
    steep = min(run.steepness_factor, ceiling)
    return steep * run.length_factor, steep, run.steepness_factor > ceiling


def _usable(current: dict[str, Any] | None) -> bool:
    return (current is not None and current.get("quality") in USABLE_CURRENT
            and current.get("east_kn") is not None and current.get("north_kn") is not None)


def _no_waves(depth_m: float | None) -> dict[str, Any]:
    """The wave fields without a usable current: each null (the lists empty). Made only then, not at every
    publication to be thrown away."""
    return {"opposing_current_kn": None, "opposing_current_sigma_kn": None, "height_factor": None,
            "length_factor": None, "steepness_factor": None, "worst_period_s": None,
            "blocking_period_s": None, "blocked_periods_s": [], "periods_s": [],
            "swell_period_s": None, "swell_from_deg": None,
            "wind_sea_height_m": None, "wind_sea_period_s": None, "wind_sea_fully_developed": None,
            "peak_height_factor": None, "peak_length_factor": None, "peak_steepness_factor": None,
            "steepened_height_m": None, "breaking_fraction": None, "peak_blocked": None,
            "bounded_height_factor": None, "bounded_steepness_factor": None, "near_blocking": None,
            "peak_bounded_height_factor": None, "peak_bounded_steepness_factor": None,
            "depth_used_m": depth_m}


def _opposing_sigma(current: dict[str, Any], wind_from_deg: float) -> float:
    """Linearised sigma of drift x cos(set - wind_from) from the drift and set sigmas."""
    drift = float(current.get("drift_kn") or 0.0)
    sd = float(current.get("drift_sigma_kn") or 0.0)
    ss = math.radians(min(90.0, float(current.get("set_sigma_deg") or 0.0)))
    a = math.radians(wrap_180(float(current.get("set_deg") or 0.0) - wind_from_deg))
    return math.hypot(sd * math.cos(a), drift * ss * math.sin(a))


def _recent_mean(ctx: Context, kind: type, t: float, max_age_s: float) -> float | None:
    latest = ctx.history.latest(kind)
    if latest is None or t - latest.t_s > max_age_s:
        return None
    vals = [s.temp_c for s in ctx.history.between(kind, latest.t_s - TEMPERATURE_MEAN_S, latest.t_s)]
    return sum(vals) / len(vals) if vals else None


def _blocking(opposing_kn: float, depth_m: float | None) -> float | None:
    """The longest period the opposing current stops, s; None without an opposing current or where it
    outruns every wave (then every period is listed as blocked)."""
    if opposing_kn <= 0.0:
        return None
    tb = blocking_period_s(opposing_kn * KN_TO_MPS, depth_m)
    return tb if math.isfinite(tb) else None
