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
last usable current estimate is held through the outage; with no heading or
log (or a log the current estimator calls suspect) the last fix's SOG/COG is
held instead, with the larger ``hold_sigma_kn``.

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
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime, timezone
from typing import Any

from geographiclib.geodesic import Geodesic

from estimators.angles import KN_TO_MPS, from_east_north, to_east_north, wrap_360
from estimators.base import WARNING, Condition, Context, EstimatorBase, Output, Publication
from estimators.params import param
from estimators.samples import Fix, Heading, Sample, WaterSpeed

TOPIC = "position"
ALERT_ID = "gnss_lost"
_EPS_S = 1e-6
_GEOD = Geodesic.WGS84


HDOP_KEEP_S = 5.0  # a fix without HDOP takes the receiver's latest this young

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


@dataclass
class PositionHealth:
    fixes_used: int = 0
    rejected_hdop: int = 0
    rejected_jump: int = 0
    dr_steps: int = 0
    hold_steps: int = 0
    outages: int = 0

    def as_dict(self) -> dict[str, int]:
        return dict(self.__dict__)


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
    basis: str  # "water_and_current", "water_no_current" or "last_ground_velocity"


class PositionEstimator(EstimatorBase):
    """GNSS fixes in, ``position`` out; dead reckoning through outages; the ``gnss_lost`` warning."""

    name = "position"
    accepts = (Fix,)

    def __init__(self, params: PositionParams | None = None) -> None:
        self.params = params or PositionParams()
        self.health = PositionHealth()
        self._fix: Fix | None = None
        self._fix_sigma_m = 0.0
        self._dr: _Reckoning | None = None
        self._current: Mapping[str, Any] | None = None  # last usable current payload
        self._current_unavailable = False
        self._last_pub_s = -math.inf
        self._last_source = ""
        self._lost = False
        self._jump_rejects = 0
        self._dr_error_m: float | None = None
        self._last_hdop: tuple[float | None, float | None] = (None, None)

    # -- the protocol --------------------------------------------------------

    def step(self, sample: Sample, ctx: Context) -> Sequence[Output]:
        fix = sample
        if fix.hdop is not None:
            self._last_hdop = (fix.t_s, fix.hdop)
        if self._fix is not None and fix.t_s <= self._fix.t_s:
            return ()
        if not self._usable(fix):
            return ()
        self._note_current(ctx)
        out: list[Output] = []
        if self._dr is not None and self._dr.running:
            self._advance(fix.t_s, ctx)
            self._dr_error_m = _distance_m(self._dr.lat, self._dr.lon, fix.lat_deg, fix.lon_deg)
        self._fix, self._fix_sigma_m = fix, self._sigma_of(fix)
        self._dr = _Reckoning(fix.lat_deg, fix.lon_deg, fix.t_s, self._fix_sigma_m)
        self.health.fixes_used += 1
        if self._lost:
            self._lost = False
            out.append(Condition(fix.t_s, ALERT_ID, WARNING, False, "GNSS fixes have returned.", {}))
        if fix.t_s - self._last_pub_s >= self.params.publish_interval_s - _EPS_S or self._last_source != "gnss":
            out.append(self._gnss_publication(fix))  # the return to GNSS is news: published at once
        return out

    def tick(self, t_s: float, ctx: Context) -> Sequence[Output]:
        self._note_current(ctx)
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
        if _distance_m(prev.lat_deg, prev.lon_deg, fix.lat_deg, fix.lon_deg) > allowed \
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
        p = self.params
        cur = self._current
        heading = self._recent_heading(t_s, ctx)
        log_kn = self._recent_log(t_s, ctx)
        if heading is None or log_kn is None or (cur is not None and cur.get("log") == "suspect"):
            return self._held_velocity()
        k = _num(cur, "stw_scale", 1.0)
        d = _num(cur, "heading_offset_deg", 0.0)
        sigma_k = _num(cur, "stw_scale_sigma", p.stw_scale_sigma)
        sigma_d = math.radians(_num(cur, "heading_offset_sigma_deg", p.heading_offset_sigma_deg))
        we, wn = to_east_north(k * log_kn, wrap_360(heading + d))     # water velocity k s u(psi + d)
        ce, cn, sigma_c = self._current_vector()
        var = sigma_c ** 2 + (log_kn * sigma_k) ** 2 + (k * log_kn * sigma_d) ** 2
        basis = "water_and_current" if cur is not None else "water_no_current"
        return _Velocity(we + ce, wn + cn, math.sqrt(var), basis)

    def _held_velocity(self) -> _Velocity:
        fix = self._fix
        if fix.sog_kn is not None and fix.cog_deg is not None and math.isfinite(fix.sog_kn):
            e, n = to_east_north(fix.sog_kn, fix.cog_deg)
        else:
            e = n = 0.0
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
        if pub is None:
            return
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
        speeds = list(ctx.history.values(WaterSpeed, t_s - p.heading_window_s, t_s, lambda s: s.speed_kn))
        if speeds:
            return sum(speeds) / len(speeds)
        last = ctx.history.latest(WaterSpeed)
        return last.speed_kn if last is not None and t_s - last.t_s <= p.input_max_age_s else None

    def _dr_publication(self, t_s: float) -> Publication:
        self._last_pub_s, self._last_source = t_s, "dead_reckoning"
        dr = self._dr
        payload = {
            "lat": dr.lat, "lon": dr.lon, "source": "dead_reckoning", "sigma_m": round(dr.sigma_m, 1),
            "sog_kn": round(dr.sog_kn, 2), "cog_deg": round(dr.cog_deg, 1),
            "dr_elapsed_s": round(t_s - self._fix.t_s, 1), "dr_basis": dr.basis,
        }
        return Publication(t_s, TOPIC, payload)

    def _lost_condition(self, t_s: float, gap_s: float) -> Condition:
        fix, dr = self._fix, self._dr
        text = (f"No GNSS fix for {gap_s:.0f} s, the last at {_clock(fix.t_s)} near {_latlon(fix.lat_deg, fix.lon_deg)}; "
                f"the position shown is dead reckoning, uncertain by about {dr.sigma_m:.0f} m and growing. "
                f"Check the GNSS receiver, its antenna and its cable.")
        values = {"since_last_fix_s": round(gap_s, 1), "last_fix_lat": fix.lat_deg, "last_fix_lon": fix.lon_deg,
                  "dr_sigma_m": round(dr.sigma_m, 1)}
        return Condition(t_s, ALERT_ID, WARNING, True, text, values)


def _distance_m(lat1: float, lon1: float, lat2: float, lon2: float) -> float:
    return _GEOD.Inverse(lat1, lon1, lat2, lon2, Geodesic.DISTANCE)["s12"]


def _finite(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _num(payload: Mapping[str, Any] | None, key: str, default: float) -> float:
    """payload[key] when it is a finite number, else ``default``."""
    if payload is None:
        return default
    v = payload.get(key)
    return float(v) if _finite(v) else default


def _clock(t_s: float) -> str:
    """Data time of day for a text, ``08:40:12 UTC`` (never an ISO string inside a sentence)."""
    return datetime.fromtimestamp(t_s, tz=timezone.utc).strftime("%H:%M:%S UTC")


def _latlon(lat: float, lon: float) -> str:
    return f"{abs(lat):.4f}°{'N' if lat >= 0 else 'S'} {abs(lon):.4f}°{'E' if lon >= 0 else 'W'}"
