"""Position: the GNSS fix while there is one, dead reckoning when it stops.

Theory of operation
-------------------
Inputs: ``Fix`` samples (the daemon drops void fixes, so a lost receiver is
simply an absence of fixes), and through the context the recent true headings
and log speeds (``ctx.history``) and the current estimator's newest
publication (``ctx.latest("current")``). Output: topic ``position`` at most
once per ``publish_interval_s`` and the warning ``gnss_lost``.

GNSS. Each usable fix is published with ``source: "gnss"`` and
``sigma_m = HDOP x UERE``: the horizontal RMS error (DRMS, about a 63 to 68 %
circle) of a fix is the horizontal dilution of precision times the user
equivalent range error (the standard GNSS error budget; see e.g. the
geodetic survey literature on DOP). ``uere_m`` defaults to 5 m, a figure from
memory for a single-frequency receiver without augmentation. A fix whose
HDOP exceeds ``max_hdop`` is not used. A fix implying a jump faster than
``max_jump_kn`` from the previous one (plus three sigmas of both) is rejected,
but never more than ``max_jump_rejects`` times in a row: then the receiver is
believed and the estimate restarts from it.

Dead reckoning. With no fix for more than ``dr_after_s`` the position is
advanced from the last fix with the velocity over ground

    v_ground = k * s * u(psi + d) + c                      (east, north; kn)

    s    log speed, mean over the last ``heading_window_s``
    psi  true heading, circular mean over the same window
    k    the current estimator's stw_scale  (true STW = k * s)
    d    its heading_offset_deg            (true heading = psi + d)
    c    its (east_kn, north_kn); zero when none was ever published
    u(a) = (sin a, cos a), the unit vector toward a

i.e. the water velocity plus the set and drift. Leeway is not modelled here:
the current estimator measures ground minus (k s u(psi + d)), so whatever
leeway the boat makes on a steady point of sail is part of its "current". The
last usable current estimate is held through the outage.

When the heading and the log fall silent too (every feed stops at once: a
multiplexer or a network gateway failing), the boat has not stopped: the last
water velocity seen while they were alive is held, plus the held current, its
velocity sigma widened by ``water_hold_sigma_kn`` for the course and speed
changes nobody can see (basis ``last_water_and_current``). With no heading or
log at all (or a log the current estimator calls suspect) the last ground
velocity is held instead, with the larger ``hold_sigma_kn``: the last fix's
SOG/COG, or a VTG's, or the displacement between the last two fixes when the
sentences carried no SOG (a GGA-only receiver). The reckoning never stands
still at 0 kn for want of a SOG field.

Each tick advances the position along the geodesic (geographiclib
``Geodesic.WGS84.Direct``) by |v_ground| x dt at the azimuth of v_ground, so a
steady velocity traces a rhumb line in steps of one tick.

Uncertainty. The velocity error is dominated by biases that persist through
the outage (the current's error, the log scale's, the compass offset's), so it
integrates linearly, not as a random walk:

    sigma_v^2 = sigma_drift^2 + (drift * sigma_set)^2          current, along and across
              + (s * sigma_k)^2                                 log scale
              + (k * s * sigma_d)^2                             heading offset (rad)
    sigma_int = sum over ticks of sigma_v * dt                  (fully correlated errors)
    sigma_m   = sqrt(sigma_fix_at_loss^2 + sigma_int^2)

with sigma_v converted to m/s. With a constant sigma_v this is
``sigma_m^2 = sigma_at_loss^2 + (sigma_v * dt)^2``. The three terms are added
as independent, which overstates the error on a steady course where the
current's error and the calibration's are anti-correlated (the current
publication does not carry their covariance): a safe side. sigma_m never
shrinks during an outage. With no current known it is taken as zero with
``no_current_sigma_kn``; with no calibration published ``stw_scale_sigma``
and ``heading_offset_sigma_deg`` are used.

When a fix returns, the distance between the dead-reckoned position at the
fix time and the fix is published once as ``dr_error_m`` with the GNSS
position, published at once (the one exception to the rate limit), and dead reckoning restarts from the fix at the next outage.
``gnss_lost`` is active once no fix has come for
``gnss_lost_after_s`` and inactive with the first usable fix.

A frozen receiver. A GNSS that fails by freezing keeps sending its last
sentence: the same position, often the same time. Two signs make the fixes
stale, not merely old: (1) the same position repeated while the boat, by its
own figures, has moved ``frozen_distance_m`` (integrating the larger of the
fix's SOG and the dead-reckoned ground speed: a static-hold receiver at anchor
reports SOG 0 and water plus current is near zero there, so it is not taken
for frozen); (2) a receiver time that has not advanced for ``frozen_time_s``.
Then the fixes since the repetition began are dropped, dead reckoning runs
from the last fix before it, and ``gnss_lost`` says the receiver is frozen (one
failure, one alert). A fix with a new position and time ends it.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from geographiclib.geodesic import Geodesic

from estimators.angles import KN_TO_MPS, from_east_north, to_east_north, wrap_360
from estimators import wording
from estimators.base import WARNING, Condition, Context, EstimatorBase, Output, Publication
from estimators.params import param
from estimators.samples import Fix, GroundVelocity, Heading, Sample, WaterSpeed

TOPIC = "position"
ALERT_ID = "gnss_lost"
_EPS_S = 1e-6
_GEOD = Geodesic.WGS84


HDOP_KEEP_S = 5.0  # a fix without HDOP takes the receiver's latest this young
GROUND_FROM_FIXES_MIN_S = 0.5  # two fixes at least this far apart (two epochs, not two sentences of one)
GROUND_FROM_FIXES_MAX_S = 10.0  # and at most this far apart give a ground velocity
FROZEN_MAX_STEP_S = 10.0  # repeats further apart than this (a gap in the data) say nothing of a frozen receiver

@dataclass(frozen=True)
class PositionParams:
    """The [position] section."""

    publish_interval_s: float = param(1.0, "s", 1.0, 60.0, "at most one position per this interval")
    uere_m: float = param(5.0, "m", 0.5, 100.0, "user equivalent range error, 1 sigma: sigma_m = HDOP x UERE")
    hdop_when_missing: float = param(2.0, "", 0.5, 50.0, "HDOP assumed for a fix that gives none")
    max_hdop: float = param(20.0, "", 1.0, 99.9, "a fix with a larger HDOP is not used")
    max_jump_kn: float = param(60.0, "kn", 5.0, 2000.0, "a fix implying a faster move from the last one is rejected")
    max_jump_rejects: int = param(3, "", 0, 100, "after this many rejected fixes in a row the next one is believed")
    dr_after_s: float = param(3.0, "s", 1.0, 120.0, "dead reckoning starts after this long without a fix")
    gnss_lost_after_s: float = param(10.0, "s", 2.0, 3600.0, "gnss_lost is raised after this long without a fix")
    heading_window_s: float = param(1.0, "s", 0.1, 30.0, "heading and log speed are averaged over this window")
    input_max_age_s: float = param(5.0, "s", 0.5, 120.0, "a heading or log speed older than this is not used")
    stw_scale_sigma: float = param(0.05, "", 0.0, 0.5, "log scale sigma when the current gives none")
    heading_offset_sigma_deg: float = param(3.0, "deg", 0.0, 45.0, "compass offset sigma when the current gives none")
    no_current_sigma_kn: float = param(1.0, "kn", 0.0, 10.0, "sigma of the current taken as zero when none is known")
    hold_sigma_kn: float = param(1.5, "kn", 0.0, 20.0, "velocity sigma while holding the last SOG/COG")
    water_hold_sigma_kn: float = param(0.5, "kn", 0.0, 10.0,
                                       "velocity sigma added while holding the last water velocity (heading and "
                                       "log silent too)")
    frozen_distance_m: float = param(50.0, "m", 5.0, 5000.0,
                                     "one position repeated while the boat's own figures say it moved this far: "
                                     "a frozen receiver")
    frozen_time_s: float = param(30.0, "s", 5.0, 3600.0,
                                 "a receiver time that has not advanced for this long: a frozen receiver")


@dataclass
class PositionHealth:
    fixes_used: int = 0
    rejected_hdop: int = 0
    rejected_jump: int = 0
    dr_steps: int = 0
    hold_steps: int = 0
    outages: int = 0
    frozen: int = 0  # times a frozen receiver was detected
    frozen_fixes: int = 0  # fixes dropped as repeats of a frozen receiver

    def as_dict(self) -> dict[str, int]:
        return dict(self.__dict__)

    def fusion_dict(self) -> dict[str, int | None]:
        """The fix step in the words of ``estimators.fusion.FusionHealth`` (no Kalman NIS: a gate on the jump)."""
        return {"fused": self.fixes_used, "rejected": self.rejected_hdop + self.rejected_jump, "faults": 0,
                "resets": self.outages, "last_nis": None}


@dataclass
class _Reckoning:
    """The dead-reckoned position (deg), its time (s) and its error budget (m)."""

    lat: float
    lon: float
    t_s: float
    sigma0_m: float
    sigma_int_m: float = 0.0
    running: bool = False  # advanced at least once past dr_after_s
    sog_kn: float = 0.0
    cog_deg: float = 0.0
    basis: str = ""

    @property
    def sigma_m(self) -> float:
        return math.hypot(self.sigma0_m, self.sigma_int_m)  # sqrt(sigma0^2 + sigma_int^2)


@dataclass(frozen=True)
class _Velocity:
    east_kn: float
    north_kn: float
    sigma_kn: float
    basis: str  # "water_and_current", "water_no_current", "last_water_and_current" or "last_ground_velocity"


# not frozen: made about every second of data (DEVELOPERS.md, estimators/)
@dataclass(slots=True)
class _Water:
    """The last water velocity k s u(psi + d) seen with a live heading and log, and its calibration variance."""

    t_s: float
    east_kn: float
    north_kn: float
    var_kn2: float


class PositionEstimator(EstimatorBase):
    """GNSS fixes in, ``position`` out; dead reckoning through outages; the ``gnss_lost`` warning."""

    name = "position"
    accepts = (Fix, GroundVelocity)

    def __init__(self, params: PositionParams | None = None) -> None:
        self.params = params or PositionParams()
        self.health = PositionHealth()
        self._fix: Fix | None = None
        self._fix_sigma_m = 0.0
        self._dr: _Reckoning | None = None
        self._current: Mapping[str, Any] | None = None  # last usable current payload
        self._current_unavailable = False
        self._current_seen: Publication | None = None  # the publication those two were taken from
        self._last_pub_s = -math.inf
        self._last_source = ""
        self._lost = False
        self._jump_rejects = 0
        self._dr_error_m: float | None = None
        self._last_hdop: tuple[float | None, float | None] = (None, None)
        self._water: _Water | None = None  # the last water velocity with a live heading and log
        self._ground_v: tuple[float, float] | None = None  # last ground velocity (east, north kn)
        self._prev_raw: Fix | None = None  # the last fix received, used or not
        self._same_pos_start: Fix | None = None  # first fix of a run repeating one position
        self._same_pos_moved_m = 0.0  # how far the boat moved by its own figures during that run
        self._same_time_start: Fix | None = None  # first fix of a run repeating one receiver time
        self._frozen: str | None = None  # "position" or "time" while a frozen receiver is seen
        self._outage_frozen = False  # the present outage began with a frozen receiver

    # -- the protocol --------------------------------------------------------

    def step(self, sample: Sample, ctx: Context) -> Sequence[Output]:
        if isinstance(sample, GroundVelocity):
            self._note_ground_velocity(sample.sog_kn, sample.cog_deg)
            return ()
        fix = sample
        if fix.hdop is not None:
            self._last_hdop = (fix.t_s, fix.hdop)
        if self._fix is not None and fix.t_s <= self._fix.t_s:
            return ()
        self._note_current(ctx)
        if self._repeats_a_frozen_receiver(fix, ctx):
            self.health.frozen_fixes += 1
            return ()
        if not self._usable(fix):
            return ()
        out: list[Output] = []
        if self._dr is not None and self._dr.running:
            self._advance(fix.t_s, ctx)
            self._dr_error_m = _distance_m(self._dr.lat, self._dr.lon, fix.lat_deg, fix.lon_deg)
        self._note_fix_velocity(fix)
        self._fix, self._fix_sigma_m = fix, self._sigma_of(fix)
        self._dr = _Reckoning(fix.lat_deg, fix.lon_deg, fix.t_s, self._fix_sigma_m)
        self.health.fixes_used += 1
        if self._lost:
            self._lost = False
            out.append(self._returned_condition(fix.t_s))
        if fix.t_s - self._last_pub_s >= self.params.publish_interval_s - _EPS_S or self._last_source != "gnss":
            out.append(self._gnss_publication(fix))  # the return to GNSS is news: published at once
        return out

    def fusion_health(self) -> dict[str, dict]:
        """Each fusion step's health for the status topic."""
        return {"fix": self.health.fusion_dict()}

    def tick(self, t_s: float, ctx: Context) -> Sequence[Output]:
        self._note_current(ctx)
        self._note_water(t_s, ctx)
        if self._fix is None or self._dr is None:
            return ()
        gap = t_s - self._fix.t_s
        out: list[Output] = []
        if gap > self.params.dr_after_s + _EPS_S:
            if not self._dr.running:
                self.health.outages += 1
            self._advance(t_s, ctx)
            if t_s - self._last_pub_s >= self.params.publish_interval_s - _EPS_S:
                out.append(self._dr_publication(t_s))
        if gap >= self.params.gnss_lost_after_s - _EPS_S:
            self._lost = True
            out.append(self._lost_condition(t_s, gap))
        return out

    # -- a frozen receiver ---------------------------------------------------------

    def _repeats_a_frozen_receiver(self, fix: Fix, ctx: Context) -> bool:
        """True when ``fix`` repeats a receiver that has frozen (see the module text); not to be used."""
        prev, self._prev_raw = self._prev_raw, fix
        if prev is None:
            return False
        if fix.t_s - prev.t_s > FROZEN_MAX_STEP_S:
            # a gap in the data (a logger switched off) is no evidence either way: start counting afresh
            self._same_pos_start = self._same_time_start = None
            self._frozen = None
            return False
        if (fix.lat_deg, fix.lon_deg) == (prev.lat_deg, prev.lon_deg):
            if self._same_pos_start is None:
                self._same_pos_start, self._same_pos_moved_m = prev, 0.0
            claimed_kn = max(_num({"v": fix.sog_kn}, "v", 0.0), self._modelled_ground_kn(fix.t_s, ctx))
            self._same_pos_moved_m += claimed_kn * KN_TO_MPS * (fix.t_s - prev.t_s)   # distance = v dt
        else:
            self._same_pos_start = None
        if fix.gnss_time_s is not None and fix.gnss_time_s == prev.gnss_time_s:
            if self._same_time_start is None:
                self._same_time_start = prev
        else:
            self._same_time_start = None
        p = self.params
        reason, start = None, None
        if self._same_pos_start is not None and self._same_pos_moved_m >= p.frozen_distance_m:
            reason, start = "position", self._same_pos_start
        elif self._same_time_start is not None and fix.t_s - self._same_time_start.t_s >= p.frozen_time_s:
            reason, start = "time", self._same_time_start
        if reason is None:
            self._frozen = None
            return False
        if self._frozen is None:
            self._freeze(start, reason)
        return True

    def _freeze(self, start: Fix, reason: str) -> None:
        """Drop the repeated fixes: dead reckoning runs from the last fix before the repetition."""
        self._frozen, self._outage_frozen = reason, True
        self.health.frozen += 1
        if self._fix is not None and self._fix.t_s > start.t_s and not (self._dr is not None and self._dr.running):
            self._fix = start
            self._dr = _Reckoning(start.lat_deg, start.lon_deg, start.t_s, self._fix_sigma_m)

    # -- velocities seen while the sensors were alive -----------------------------------

    def _note_ground_velocity(self, sog_kn: float | None, cog_deg: float | None) -> None:
        if _finite(sog_kn) and _finite(cog_deg) and sog_kn >= 0.0:
            self._ground_v = to_east_north(sog_kn, cog_deg)

    def _note_fix_velocity(self, fix: Fix) -> None:
        """The ground velocity from the fix's SOG/COG, or from the displacement since the last fix."""
        if _finite(fix.sog_kn) and _finite(fix.cog_deg):
            self._note_ground_velocity(fix.sog_kn, fix.cog_deg)
            return
        prev = self._fix
        if prev is None or (prev.lat_deg, prev.lon_deg) == (fix.lat_deg, fix.lon_deg):
            return  # a repeated position says nothing of the speed (a coarse or a frozen receiver)
        # the receiver's own epochs where both fixes have them (exact, whatever the line timing)
        if fix.gnss_time_s is not None and prev.gnss_time_s is not None:
            dt = fix.gnss_time_s - prev.gnss_time_s
        else:
            dt = fix.t_s - prev.t_s
        if not GROUND_FROM_FIXES_MIN_S <= dt <= GROUND_FROM_FIXES_MAX_S:
            return  # two sentences of one epoch, or too far apart to say how the boat moves now
        g = _GEOD.Inverse(prev.lat_deg, prev.lon_deg, fix.lat_deg, fix.lon_deg)
        speed_kn = g["s12"] / dt / KN_TO_MPS                                     # v = s / dt
        self._ground_v = to_east_north(speed_kn, wrap_360(g["azi1"]))

    def _note_water(self, t_s: float, ctx: Context) -> None:
        v = self._water_velocity(t_s, ctx)
        if v is not None:
            self._water = v

    def _water_velocity(self, t_s: float, ctx: Context) -> _Water | None:
        """k s u(psi + d) from a live heading and log, with its calibration variance; None without them."""
        p = self.params
        cur = self._current
        if cur is not None and cur.get("log") == "suspect":
            return None
        heading = self._recent_heading(t_s, ctx)
        log_kn = self._recent_log(t_s, ctx)
        if heading is None or log_kn is None:
            return None
        k = _num(cur, "stw_scale", 1.0)
        d = _num(cur, "heading_offset_deg", 0.0)
        sigma_k = _num(cur, "stw_scale_sigma", p.stw_scale_sigma)
        sigma_d = math.radians(_num(cur, "heading_offset_sigma_deg", p.heading_offset_sigma_deg))
        we, wn = to_east_north(k * log_kn, wrap_360(heading + d))     # water velocity k s u(psi + d)
        var = (log_kn * sigma_k) ** 2 + (k * log_kn * sigma_d) ** 2
        return _Water(t_s, we, wn, var)

    def _modelled_ground_kn(self, t_s: float, ctx: Context) -> float:
        """|water + current| from live sensors, or 0 without them (for the frozen-receiver test)."""
        w = self._water_velocity(t_s, ctx)
        if w is None:
            return 0.0
        ce, cn, _ = self._current_vector()
        return math.hypot(w.east_kn + ce, w.north_kn + cn)

    # -- fixes -------------------------------------------------------------------

    def _hdop_of(self, fix: Fix) -> float | None:
        """The fix's HDOP, or the receiver's latest (GGA gives it, RMC of the same epoch does not)."""
        if fix.hdop is not None:
            return fix.hdop
        t, hdop = self._last_hdop
        return hdop if t is not None and fix.t_s - t <= HDOP_KEEP_S else None

    def _sigma_of(self, fix: Fix) -> float:
        hdop = self._hdop_of(fix)
        if hdop is None or not math.isfinite(hdop) or hdop <= 0:
            hdop = self.params.hdop_when_missing
        return hdop * self.params.uere_m  # DRMS = HDOP x UERE

    def _usable(self, fix: Fix) -> bool:
        p = self.params
        if not (math.isfinite(fix.lat_deg) and math.isfinite(fix.lon_deg)) or abs(fix.lat_deg) > 90.0:
            self.health.rejected_hdop += 1
            return False
        if fix.hdop is not None and fix.hdop > p.max_hdop:
            self.health.rejected_hdop += 1
            return False
        prev = self._fix
        if prev is None or (self._dr is not None and self._dr.running):
            self._jump_rejects = 0
            return True  # nothing to compare with, or back from an outage: GNSS beats reckoning
        dt = fix.t_s - prev.t_s
        allowed = p.max_jump_kn * KN_TO_MPS * dt + 3.0 * (self._fix_sigma_m + self._sigma_of(fix))
        if _farther_than(prev.lat_deg, prev.lon_deg, fix.lat_deg, fix.lon_deg, allowed) \
                and self._jump_rejects < p.max_jump_rejects:
            self._jump_rejects += 1
            self.health.rejected_jump += 1
            return False
        self._jump_rejects = 0
        return True

    def _gnss_publication(self, fix: Fix) -> Publication:
        self._last_pub_s, self._last_source = fix.t_s, "gnss"
        payload: dict[str, Any] = {
            "lat": fix.lat_deg, "lon": fix.lon_deg, "source": "gnss",
            "sigma_m": round(self._fix_sigma_m, 1),
            "sog_kn": fix.sog_kn, "cog_deg": fix.cog_deg, "hdop": self._hdop_of(fix),
        }
        if self._dr_error_m is not None:
            payload["dr_error_m"] = round(self._dr_error_m, 1)
            self._dr_error_m = None
        return Publication(fix.t_s, TOPIC, payload)

    # -- dead reckoning ----------------------------------------------------------

    def _advance(self, t_s: float, ctx: Context) -> None:
        """Move the reckoning to ``t_s`` along the geodesic at the present ground velocity."""
        dr = self._dr
        dt = t_s - dr.t_s
        if dt <= 0.0:
            return
        v = self._ground_velocity(t_s, ctx)
        speed_kn, toward_deg = from_east_north(v.east_kn, v.north_kn)
        distance_m = speed_kn * KN_TO_MPS * dt                         # s = |v| dt
        if distance_m > 0.0:
            g = _GEOD.Direct(dr.lat, dr.lon, toward_deg, distance_m, Geodesic.LATITUDE | Geodesic.LONGITUDE)
            dr.lat, dr.lon = g["lat2"], g["lon2"]
        dr.sigma_int_m += v.sigma_kn * KN_TO_MPS * dt                  # sigma_int += sigma_v dt
        dr.t_s, dr.running = t_s, True
        dr.sog_kn, dr.cog_deg, dr.basis = speed_kn, toward_deg, v.basis
        if v.basis == "last_ground_velocity":
            self.health.hold_steps += 1
        else:
            self.health.dr_steps += 1

    def _ground_velocity(self, t_s: float, ctx: Context) -> _Velocity:
        ce, cn, sigma_c = self._current_vector()
        water = self._water_velocity(t_s, ctx)
        if water is not None:
            self._water = water
            basis = "water_and_current" if self._current is not None else "water_no_current"
            return _Velocity(water.east_kn + ce, water.north_kn + cn, math.sqrt(sigma_c ** 2 + water.var_kn2), basis)
        held = self._water
        log_suspect = self._current is not None and self._current.get("log") == "suspect"
        if held is not None and not log_suspect and held.t_s >= self._fix.t_s - self.params.input_max_age_s:
            # every feed stopped at once: the boat sails on as it last did through the water
            var = sigma_c ** 2 + held.var_kn2 + self.params.water_hold_sigma_kn ** 2
            return _Velocity(held.east_kn + ce, held.north_kn + cn, math.sqrt(var), "last_water_and_current")
        return self._held_velocity()

    def _held_velocity(self) -> _Velocity:
        e, n = self._ground_v if self._ground_v is not None else (0.0, 0.0)
        return _Velocity(e, n, self.params.hold_sigma_kn, "last_ground_velocity")

    def _current_vector(self) -> tuple[float, float, float]:
        """(east kn, north kn, vector sigma kn) of the held current; zero with a wide sigma if none."""
        cur = self._current
        if cur is None:
            return 0.0, 0.0, self.params.no_current_sigma_kn
        drift = math.hypot(cur["east_kn"], cur["north_kn"])
        sigma_drift = _num(cur, "drift_sigma_kn", self.params.no_current_sigma_kn)
        sigma_set = math.radians(_num(cur, "set_sigma_deg", 180.0))
        sigma = math.hypot(sigma_drift, drift * sigma_set)            # along and across the set
        if self._current_unavailable:
            sigma = max(sigma, self.params.no_current_sigma_kn)
        return cur["east_kn"], cur["north_kn"], sigma

    def _note_current(self, ctx: Context) -> None:
        pub = ctx.latest("current")
        if pub is None or pub is self._current_seen:  # the same publication as at the last fix or tick: taken
            return
        self._current_seen = pub
        payload = pub.payload
        usable = (payload.get("quality") != "unavailable"
                  and all(_finite(payload.get(k)) for k in ("east_kn", "north_kn")))
        if usable:
            self._current = dict(payload)
        self._current_unavailable = not usable

    def _recent_heading(self, t_s: float, ctx: Context) -> float | None:
        p = self.params
        mean = ctx.history.mean_heading_deg(t_s - p.heading_window_s, t_s)
        if mean is not None:
            return mean
        last = ctx.history.latest(Heading)
        return last.true_deg if last is not None and t_s - last.t_s <= p.input_max_age_s else None

    def _recent_log(self, t_s: float, ctx: Context) -> float | None:
        p = self.params
        speeds = [s.speed_kn for s in ctx.history.between(WaterSpeed, t_s - p.heading_window_s, t_s)]
        if speeds:
            return sum(speeds) / len(speeds)
        last = ctx.history.latest(WaterSpeed)
        return last.speed_kn if last is not None and t_s - last.t_s <= p.input_max_age_s else None

    def _dr_publication(self, t_s: float) -> Publication:
        self._last_pub_s, self._last_source = t_s, "dead_reckoning"
        dr = self._dr
        payload = {
            "lat": dr.lat, "lon": dr.lon, "source": "dead_reckoning", "sigma_m": round(dr.sigma_m, 1),
            "sog_kn": round(dr.sog_kn, 2),
            "cog_deg": round(dr.cog_deg, 1) if dr.sog_kn >= 0.05 else None,  # no course when not moving
            "dr_elapsed_s": round(t_s - self._fix.t_s, 1), "dr_basis": dr.basis,
        }
        if self._frozen:
            payload["gnss_frozen"] = self._frozen
        return Publication(t_s, TOPIC, payload)

    def _lost_condition(self, t_s: float, gap_s: float) -> Condition:
        fix, dr = self._fix, self._dr
        where = wording.position(fix.lat_deg, fix.lon_deg)
        if self._frozen == "position":
            seen = (f"GNSS frozen: the receiver has repeated one position since {wording.clock(fix.t_s)} "
                    f"({where}) while the boat moved")
        elif self._frozen == "time":
            seen = f"GNSS frozen: the receiver's clock has stood still since {wording.clock(fix.t_s)}"
        else:
            seen = f"No GNSS fix for {wording.duration(gap_s)}, the last at {wording.clock(fix.t_s)} near {where}"
        text = (f"{seen}; the position shown is dead reckoning {_BASIS_WORDS.get(dr.basis, '')}".rstrip() + ", "
                f"uncertain by about {_metres(dr.sigma_m)} and growing. "
                f"Check the GNSS receiver, its antenna and its cable.")
        values = {"since_last_fix_s": round(gap_s), "last_fix_lat": round(fix.lat_deg, 5),
                  "last_fix_lon": round(fix.lon_deg, 5), "dr_sigma_m": round(dr.sigma_m), "frozen": self._frozen}
        return Condition(t_s, ALERT_ID, WARNING, True, text, values)

    def _returned_condition(self, t_s: float) -> Condition:
        what = "GNSS receiver frozen" if self._outage_frozen else "GNSS fixes lost"
        self._outage_frozen = False
        values: dict[str, Any] = {}
        text = f"{what}; fixes back"
        if self._dr_error_m is not None:
            text += f", dead reckoning was {_metres(self._dr_error_m)} off"
            values["dr_error_m"] = round(self._dr_error_m)
        return Condition(t_s, ALERT_ID, WARNING, False, text + ".", values)


def _distance_m(lat1: float, lon1: float, lat2: float, lon2: float) -> float:
    return _GEOD.Inverse(lat1, lon1, lat2, lon2, Geodesic.DISTANCE)["s12"]


# c = a^2 / b = a / sqrt(1 - e^2): the largest radius of curvature of the WGS84 ellipsoid (at the poles).
_POLAR_CURVATURE_M = _GEOD.a / math.sqrt(1.0 - _GEOD.f * (2.0 - _GEOD.f))


def distance_upper_bound_m(lat1: float, lon1: float, lat2: float, lon2: float) -> float:
    """An upper bound of the geodesic distance, cheap: the length of a path along the meridian, then
    along the parallel of lat2. The meridian's radius of curvature M and the prime vertical's N are
    both at most c (M = a(1-e^2)/W^3, N = a/W, W = sqrt(1 - e^2 sin^2 lat): the ellipsoid's radii of
    curvature, written from memory; tests/test_position.py checks the bound against geographiclib), so
    that path is at most c (|dlat| + cos(lat2) |dlon|), and the geodesic, the shortest, no longer."""
    dlon = abs(lon2 - lon1) % 360.0
    dlon = min(dlon, 360.0 - dlon)
    return _POLAR_CURVATURE_M * (abs(math.radians(lat2 - lat1)) + math.cos(math.radians(lat2)) * math.radians(dlon))


def _farther_than(lat1: float, lon1: float, lat2: float, lon2: float, limit_m: float) -> bool:
    """Whether the geodesic distance exceeds ``limit_m``: the exact geodesic (geographiclib) only when
    the bound does not settle it (a fix a second apart is metres away, the limit tens of metres)."""
    if distance_upper_bound_m(lat1, lon1, lat2, lon2) * (1.0 + 1e-9) < limit_m:  # 1e-9: rounding of the bound
        return False
    return _distance_m(lat1, lon1, lat2, lon2) > limit_m


def _finite(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _num(payload: Mapping[str, Any] | None, key: str, default: float) -> float:
    """payload[key] when it is a finite number, else ``default``."""
    if payload is None:
        return default
    v = payload.get(key)
    return float(v) if _finite(v) else default


_BASIS_WORDS = {
    "water_and_current": "from the log, the compass and the current",
    "water_no_current": "from the log and the compass (no current known)",
    "last_water_and_current": "from the last log, compass and current (those feeds are silent too)",
    "last_ground_velocity": "from the last course and speed over ground",
}


def _metres(m: float) -> str:
    """A distance as a person reads it: ``40 m``, ``1.2 km`` is not a sea unit: ``0.65 nm``."""
    return f"{m:.0f} m" if m < 1852.0 else f"{m / 1852.0:.2f} nm"
