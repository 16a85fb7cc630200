"""The boat: a helm plan, how she answers it, and the true track it gives.

State (integrated every ``truth_dt_s``, 1 s by default): position (lat, lon,
WGS84 degrees), heading (degrees true, turn-rate limited), speed through the
water (knots, first-order response). Each step:

    water velocity  w = STW · (sin(H + λ), cos(H + λ))       (east, north), kn
    ground velocity g = w + c(t, lat, lon)                   the current c is the truth
    position        p ← p + g · dt   (1 kn = 1852 m / 3600 s; flat-earth step, WGS84 radii)

with the current taken at the step's midpoint (second-order Runge–Kutta), so a
track that crosses a narrow band is integrated without a lag.

Heel and leeway (optional). Heel φ grows with the square of the beam component
of the apparent wind, φ = φ_max · min(1, (AWS·|sin AWA| / heel_ref_kn)²),
positive to starboard, zero when motoring. Leeway follows R. Garrett, *The
Symmetry of Sailing* (Adlard Coles, 1987), §3.5.3: leeway ∝ sin φ / STW²
(his constant 464 for a 12.2-m yacht, degrees and knots, i.e. about 8·φ°/STW²
at small heel; quoted from a secondary source, not checked against the book).
Here λ = K · φ / STW² with φ in degrees (K of 5–16 is the usual range of
instrument calibrations), toward leeward, capped at 10°. ``leeway_k = 0`` (the
default) turns it off, so the only water-relative error an estimator meets is
the log and compass error it is meant to calibrate. The log measures the
speed along the keel, STW · cos λ.

Yaw: the helm wanders about the commanded heading by a sum of two slow sines
(a few degrees, periods of tens of seconds), seeded, so mean heading is right
but individual samples are not.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from estimators.angles import KN_TO_MPS, NM_M, from_east_north, to_east_north, wrap_180, wrap_360

from .ocean import Ocean, offset_m, step_position


# --------------------------------------------------------------------------- helm plan


@dataclass(frozen=True)
class Steer:
    """Steer a true heading at a speed through the water for a while."""

    heading_deg: float
    stw_kn: float
    duration_s: float
    motoring: bool = False


@dataclass(frozen=True)
class Waypoint:
    """Steer straight at a waypoint (bearing, no allowance for current) until within ``arrive_nm``."""

    lat: float
    lon: float
    stw_kn: float
    max_duration_s: float
    arrive_nm: float = 0.1
    motoring: bool = False


@dataclass(frozen=True)
class Beat:
    """Sail close-hauled, ``twa_deg`` off the wind over the water, tacking every ``tack_every_s``."""

    twa_deg: float
    stw_kn: float
    tack_every_s: float
    duration_s: float
    first_tack: str = "starboard"  # "starboard": wind over the starboard bow


Leg = Steer | Waypoint | Beat


def box(first_heading_deg: float, side_s: float, stw_kn: float, motoring: bool = True,
        turn: str = "right") -> tuple[Steer, ...]:
    """Four legs of a square: a classic calibration box."""
    sign = 1.0 if turn == "right" else -1.0
    return tuple(Steer(wrap_360(first_heading_deg + sign * 90.0 * i), stw_kn, side_s, motoring)
                 for i in range(4))


def tacks(heading_a_deg: float, heading_b_deg: float, stw_kn: float, leg_s: float, n: int) -> tuple[Steer, ...]:
    """``n`` legs alternating between two headings (fixed-heading tacks or gybes)."""
    return tuple(Steer(heading_a_deg if i % 2 == 0 else heading_b_deg, stw_kn, leg_s) for i in range(n))


@dataclass(frozen=True)
class HelmModel:
    """How the boat answers the helm."""

    turn_rate_deg_s: float = 6.0
    speed_tau_s: float = 20.0  # first-order STW response
    turn_speed_loss: float = 0.4  # fraction of STW lost while far off the commanded heading
    yaw_deg: float = 2.0  # amplitude of helm wander
    heel_max_deg: float = 25.0
    heel_ref_kn: float = 20.0
    leeway_k: float = 0.0  # λ = K φ / STW²; 0 = no leeway


# Truth row fields, in order. Angles in degrees true, speeds in knots.
TRUTH_FIELDS: tuple[str, ...] = (
    "t_s", "lat", "lon",
    "heading_true_deg", "helm_heading_deg", "stw_true_kn", "leeway_deg",
    "water_east_kn", "water_north_kn",
    "sog_kn", "cog_deg", "ground_east_kn", "ground_north_kn",
    "current_east_kn", "current_north_kn", "set_deg", "drift_kn",
    "sea_temp_c", "air_temp_c", "msl_hpa",
    "ground_wind_from_deg", "ground_wind_kn", "water_wind_from_deg", "water_wind_kn",
    "apparent_wind_angle_deg", "apparent_wind_kn",
    "heel_deg", "depth_m", "motoring", "leg",
)
TRUTH_DTYPE = np.dtype([(f, "i4" if f in ("motoring", "leg") else "f8") for f in TRUTH_FIELDS])
ANGLE_FIELDS = frozenset({"heading_true_deg", "helm_heading_deg", "cog_deg", "set_deg",
                          "ground_wind_from_deg", "water_wind_from_deg", "apparent_wind_angle_deg"})


@dataclass(frozen=True)
class _Command:
    heading_deg: float
    stw_kn: float
    motoring: bool
    done: bool


class _Helm:
    """Walks the helm plan: what to steer now."""

    def __init__(self, legs: tuple[Leg, ...], t0_s: float) -> None:
        self.legs = legs
        self.i = 0
        self.leg_t0 = t0_s
        self.tack_side = legs[0].first_tack if legs and isinstance(legs[0], Beat) else "starboard"
        self.last_tack_t = t0_s

    def command(self, t_s: float, lat: float, lon: float, water_wind_from: float, heading_now: float) -> _Command:
        while self.i < len(self.legs):
            leg = self.legs[self.i]
            elapsed = t_s - self.leg_t0
            if isinstance(leg, Steer):
                if elapsed < leg.duration_s:
                    return _Command(leg.heading_deg, leg.stw_kn, leg.motoring, False)
            elif isinstance(leg, Waypoint):
                east, north = offset_m(lat, lon, leg.lat, leg.lon)
                if elapsed < leg.max_duration_s and math.hypot(east, north) > leg.arrive_nm * NM_M:
                    return _Command(from_east_north(east, north)[1], leg.stw_kn, leg.motoring, False)
            elif isinstance(leg, Beat):
                if elapsed < leg.duration_s:
                    if t_s - self.last_tack_t >= leg.tack_every_s:
                        self.tack_side = "port" if self.tack_side == "starboard" else "starboard"
                        self.last_tack_t = t_s
                    sign = -1.0 if self.tack_side == "starboard" else 1.0  # starboard: H = W − twa
                    return _Command(wrap_360(water_wind_from + sign * leg.twa_deg), leg.stw_kn, False, False)
            self._next(t_s)
        return _Command(heading_now, 0.0, True, True)

    def _next(self, t_s: float) -> None:
        self.i += 1
        self.leg_t0 = t_s
        self.last_tack_t = t_s
        if self.i < len(self.legs) and isinstance(self.legs[self.i], Beat):
            self.tack_side = self.legs[self.i].first_tack


def _yaw_deg(t_rel_s: float, amp: float, phases: tuple[float, float]) -> float:
    """Helm wander (degrees): periods of 37 s and 113 s, slow enough to interpolate between 1-s rows."""
    return amp * (0.7 * math.sin(2 * math.pi * t_rel_s / 37.0 + phases[0])
                  + 0.5 * math.sin(2 * math.pi * t_rel_s / 113.0 + phases[1]))


def sail_track(ocean: Ocean, legs: tuple[Leg, ...], t0_s: float, duration_s: float,
               lat0: float, lon0: float, helm: HelmModel, dt_s: float,
               yaw_phases: tuple[float, float]) -> np.ndarray:
    """Integrate the true track; returns a structured array with ``TRUTH_FIELDS``."""
    n = int(math.floor(duration_s / dt_s)) + 1
    out = np.zeros(n, dtype=TRUTH_DTYPE)
    lat, lon = lat0, lon0
    helm_state = _Helm(legs, t0_s)
    wfrom, wspd = ocean.wind_over_ground(t0_s, lat, lon)
    ce, cn = ocean.current(t0_s, lat, lon)
    first = helm_state.command(t0_s, lat, lon, _water_wind(wfrom, wspd, ce, cn)[0], 0.0)
    heading, stw = first.heading_deg, first.stw_kn
    for k in range(n):
        t = t0_s + k * dt_s
        wfrom, wspd = ocean.wind_over_ground(t, lat, lon)
        ce, cn = ocean.current(t, lat, lon)
        ww_from, ww_kn = _water_wind(wfrom, wspd, ce, cn)
        cmd = helm_state.command(t, lat, lon, ww_from, heading)
        err = wrap_180(cmd.heading_deg - heading)
        target_stw = cmd.stw_kn * (1.0 - helm.turn_speed_loss if abs(err) > 20.0 else 1.0)
        row = _truth_row(ocean, t, lat, lon, heading, stw, cmd.motoring, helm, k, t0_s, yaw_phases,
                         wfrom, wspd, ce, cn, ww_from, ww_kn)
        row["leg"] = helm_state.i
        out[k] = tuple(row[f] for f in TRUTH_FIELDS)
        # advance: midpoint current (RK2), heading turn-rate limited, STW first order
        ge, gn = row["water_east_kn"] + ce, row["water_north_kn"] + cn
        mlat, mlon = step_position(lat, lon, 0.5 * ge * KN_TO_MPS * dt_s, 0.5 * gn * KN_TO_MPS * dt_s)
        mce, mcn = ocean.current(t + 0.5 * dt_s, mlat, mlon)
        ge, gn = row["water_east_kn"] + mce, row["water_north_kn"] + mcn
        lat, lon = step_position(lat, lon, ge * KN_TO_MPS * dt_s, gn * KN_TO_MPS * dt_s)
        max_turn = helm.turn_rate_deg_s * dt_s
        heading = wrap_360(heading + max(-max_turn, min(max_turn, err)))
        stw += (target_stw - stw) * (1.0 - math.exp(-dt_s / helm.speed_tau_s))
    return out


def _water_wind(from_deg: float, speed_kn: float, ce: float, cn: float) -> tuple[float, float]:
    """Wind over the water = wind over the ground − current (both as velocity vectors)."""
    ve, vn = to_east_north(speed_kn, from_deg + 180.0)  # air velocity, toward
    s, toward = from_east_north(ve - ce, vn - cn)
    return wrap_360(toward + 180.0), s


def _truth_row(ocean: Ocean, t: float, lat: float, lon: float, helm_heading: float, stw: float,
               motoring: bool, helm: HelmModel, k: int, t0_s: float, yaw_phases: tuple[float, float],
               wfrom: float, wspd: float, ce: float, cn: float, ww_from: float, ww_kn: float) -> dict:
    yaw_scale = 0.3 if motoring else 1.0  # an autopilot under power wanders less
    heading = wrap_360(helm_heading + yaw_scale * _yaw_deg(t - t0_s, helm.yaw_deg, yaw_phases))
    # apparent wind = wind over water − boat velocity through water (heading frame)
    ae, an = to_east_north(ww_kn, ww_from + 180.0)
    he, hn = to_east_north(stw, heading)
    aws, a_toward = from_east_north(ae - he, an - hn)
    awa = wrap_360((a_toward + 180.0) - heading)  # angle off the bow the wind comes from
    heel = 0.0
    if not motoring and aws > 0.0:
        beam = aws * abs(math.sin(math.radians(awa)))
        heel = helm.heel_max_deg * min(1.0, (beam / helm.heel_ref_kn) ** 2)
        heel = heel if awa > 180.0 else -heel  # wind from port → heel to starboard (positive)
    leeway = 0.0
    if helm.leeway_k and stw > 0.5:
        leeway = max(-10.0, min(10.0, helm.leeway_k * heel / stw**2))  # λ = K φ / V², to leeward
    we, wn = to_east_north(stw, heading + leeway)
    ge, gn = we + ce, wn + cn
    sog, cog = from_east_north(ge, gn)
    drift, set_ = from_east_north(ce, cn)
    return {
        "t_s": t, "lat": lat, "lon": lon,
        "heading_true_deg": heading, "helm_heading_deg": helm_heading, "stw_true_kn": stw, "leeway_deg": leeway,
        "water_east_kn": we, "water_north_kn": wn,
        "sog_kn": sog, "cog_deg": cog, "ground_east_kn": ge, "ground_north_kn": gn,
        "current_east_kn": ce, "current_north_kn": cn, "set_deg": set_, "drift_kn": drift,
        "sea_temp_c": ocean.sea_temp_c(lat, lon), "air_temp_c": ocean.air_temp_c,
        "msl_hpa": ocean.msl_hpa(t, lat, lon),
        "ground_wind_from_deg": wfrom, "ground_wind_kn": wspd,
        "water_wind_from_deg": ww_from, "water_wind_kn": ww_kn,
        "apparent_wind_angle_deg": awa, "apparent_wind_kn": aws,
        "heel_deg": heel, "depth_m": ocean.depth(lat, lon), "motoring": int(motoring), "leg": 0,
    }


__all__ = ["Steer", "Waypoint", "Beat", "Leg", "box", "tacks", "HelmModel", "TRUTH_FIELDS",
           "TRUTH_DTYPE", "ANGLE_FIELDS", "sail_track"]
