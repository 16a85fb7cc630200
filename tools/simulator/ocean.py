"""The invented world a simulated boat sails in: current, sea temperature, air, wind, depth.

Every field is a pure function of absolute time ``t_s`` (UNIX seconds, UTC)
and position (degrees, WGS84). Nothing here is random: randomness belongs to
the sensors (``sensors.py``), so one ocean gives the same truth for any seed.

Frames and conventions (those of the interface):
- a current is an (east, north) vector in knots, the direction it flows *toward*;
- a wind is given by where it blows *from*, speed in knots, over the ground;
- pressure is mean-sea-level pressure in hPa; temperatures are in °C.

Positions across a band or a front are measured on a local flat projection
about the feature's reference point (east/north metres from the WGS84 radii of
curvature): good to well under a metre per mile for features a few tens of
miles across, which is all a scenario needs.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

from estimators.angles import NM_M, to_east_north, wrap_360

# WGS84 ellipsoid (NIMA TR8350.2): semi-major axis and first eccentricity squared.
WGS84_A_M = 6378137.0
WGS84_F = 1.0 / 298.257223563
WGS84_E2 = WGS84_F * (2.0 - WGS84_F)

M2_PERIOD_S = 12.4206012 * 3600.0  # principal lunar semidiurnal constituent (tide tables)


def radii_m(lat_deg: float) -> tuple[float, float]:
    """(meridional radius M, prime-vertical radius N) in metres at a latitude (WGS84)."""
    s2 = math.sin(math.radians(lat_deg)) ** 2
    w = math.sqrt(1.0 - WGS84_E2 * s2)
    return WGS84_A_M * (1.0 - WGS84_E2) / w**3, WGS84_A_M / w  # M = a(1-e²)/W³, N = a/W


def offset_m(lat0: float, lon0: float, lat: float, lon: float) -> tuple[float, float]:
    """(east, north) metres of (lat, lon) from (lat0, lon0), local flat projection."""
    m, n = radii_m(lat0)
    north = math.radians(lat - lat0) * m
    east = math.radians(lon - lon0) * n * math.cos(math.radians(lat0))
    return east, north


def step_position(lat: float, lon: float, east_m: float, north_m: float) -> tuple[float, float]:
    """Move a position by a small (east, north) displacement in metres (flat-earth step).

    Uses the radii at the mid-latitude of the step, so a 1-s step of a boat is
    exact to far below a millimetre (checked against geographiclib in the tests).
    """
    m0, _ = radii_m(lat)
    lat_mid = lat + math.degrees(0.5 * north_m / m0)
    m, n = radii_m(lat_mid)
    dlat = math.degrees(north_m / m)  # dφ = dn / M
    dlon = math.degrees(east_m / (n * math.cos(math.radians(lat_mid))))  # dλ = de / (N cos φ)
    return lat + dlat, lon + dlon


def cross_track_m(lat0: float, lon0: float, along_deg: float, lat: float, lon: float) -> float:
    """Signed distance (m) of a point from the line through (lat0, lon0) running toward ``along_deg``.

    Positive to the right of the line as seen looking along it.
    """
    east, north = offset_m(lat0, lon0, lat, lon)
    a = math.radians(along_deg)
    return east * math.cos(a) - north * math.sin(a)  # right-hand normal of (sin a, cos a)


def smooth_step(x_m: float, width_m: float) -> float:
    """0 → 1 across a feature of ``width_m`` (10–90 % rise over about that width)."""
    if width_m <= 0.0:
        return 1.0 if x_m >= 0.0 else 0.0
    return 0.5 * (1.0 + math.tanh(2.2 * x_m / width_m))  # tanh(1.1) ≈ 0.8: 10–90 % over width_m


def interp_knots(knots: Sequence[tuple[float, float]], t_s: float) -> float:
    """Piecewise-linear value through (t_s, value) knots, held flat beyond the ends."""
    if t_s <= knots[0][0]:
        return knots[0][1]
    for (t0, v0), (t1, v1) in zip(knots, knots[1:]):
        if t_s <= t1:
            return v0 + (v1 - v0) * (t_s - t0) / (t1 - t0) if t1 > t0 else v1
    return knots[-1][1]


# --------------------------------------------------------------------------- currents


@dataclass(frozen=True)
class SteadyCurrent:
    """The same current everywhere and always."""

    set_deg: float
    drift_kn: float

    def velocity(self, t_s: float, lat: float, lon: float) -> tuple[float, float]:
        return to_east_north(self.drift_kn, self.set_deg)


@dataclass(frozen=True)
class TidalStream:
    """A rotating tidal stream: a current ellipse turning once per tidal period.

    v(t) = major·cos ω(t−t_max) along ``flood_set_deg`` + minor·sin ω(t−t_max)
    across it (to the right when ``clockwise``), ω = 2π / period. At ``t_max_s``
    the stream runs ``major_kn`` toward ``flood_set_deg``; half a period later it
    runs the other way. A minor axis of zero gives a rectilinear stream.
    """

    flood_set_deg: float
    major_kn: float
    minor_kn: float
    t_max_s: float
    period_s: float = M2_PERIOD_S
    clockwise: bool = True

    def velocity(self, t_s: float, lat: float, lon: float) -> tuple[float, float]:
        phase = 2.0 * math.pi * (t_s - self.t_max_s) / self.period_s
        along = self.major_kn * math.cos(phase)
        across = self.minor_kn * math.sin(phase) * (1.0 if self.clockwise else -1.0)
        ae, an = to_east_north(1.0, self.flood_set_deg)
        re, rn = to_east_north(1.0, self.flood_set_deg + 90.0)
        return along * ae + across * re, along * an + across * rn


@dataclass(frozen=True)
class CurrentBand:
    """A narrow strong current, like the warm core of a western boundary current.

    The band runs through (``lat``, ``lon``) toward ``set_deg``; its core is
    ``core_kn`` over ``core_width_nm`` and each edge rises over ``edge_width_nm``
    (the edge to the right of the set, looking along it, over ``far_edge_width_nm``
    where given: a jet that rises slowly and falls fast).
    The water in it is ``warm_c`` warmer than outside, with the same profile, so
    its edges show as sea-temperature fronts.
    """

    lat: float
    lon: float
    set_deg: float
    core_kn: float
    core_width_nm: float
    edge_width_nm: float
    warm_c: float = 0.0
    far_edge_width_nm: float | None = None

    def profile(self, lat: float, lon: float) -> float:
        """0 outside the band, 1 in its core."""
        x = cross_track_m(self.lat, self.lon, self.set_deg, lat, lon)
        half = 0.5 * self.core_width_nm * NM_M
        edge = self.edge_width_nm * NM_M
        far = edge if self.far_edge_width_nm is None else self.far_edge_width_nm * NM_M
        return smooth_step(x + half, edge) * (1.0 - smooth_step(x - half, far))

    def velocity(self, t_s: float, lat: float, lon: float) -> tuple[float, float]:
        return to_east_north(self.core_kn * self.profile(lat, lon), self.set_deg)


CurrentPart = SteadyCurrent | TidalStream | CurrentBand


# --------------------------------------------------------------------------- sea temperature


@dataclass(frozen=True)
class Front:
    """A straight sea-temperature front: ``delta_c`` warmer on its right-hand side.

    The line runs through (``lat``, ``lon``) toward ``along_deg``; the change
    happens over ``width_nm`` (10–90 %).
    """

    lat: float
    lon: float
    along_deg: float
    delta_c: float
    width_nm: float

    def signed_distance_m(self, lat: float, lon: float) -> float:
        return cross_track_m(self.lat, self.lon, self.along_deg, lat, lon)

    def temp_offset_c(self, lat: float, lon: float) -> float:
        return self.delta_c * smooth_step(self.signed_distance_m(lat, lon), self.width_nm * NM_M)


@dataclass(frozen=True)
class Patch:
    """A plane wave of temperature: patchiness of a few tenths of a degree."""

    amplitude_c: float
    wavelength_nm: float
    toward_deg: float
    phase_rad: float = 0.0

    def temp_offset_c(self, lat0: float, lon0: float, lat: float, lon: float) -> float:
        east, north = offset_m(lat0, lon0, lat, lon)
        e, n = to_east_north(1.0, self.toward_deg)
        s = (east * e + north * n) / (self.wavelength_nm * NM_M)
        return self.amplitude_c * math.sin(2.0 * math.pi * s + self.phase_rad)


@dataclass(frozen=True)
class SeaTemperatureField:
    """Base temperature + fronts + patchiness (+ the warm water of current bands)."""

    base_c: float
    ref_lat: float
    ref_lon: float
    fronts: tuple[Front, ...] = ()
    patches: tuple[Patch, ...] = ()

    def temp_c(self, lat: float, lon: float) -> float:
        t = self.base_c
        for f in self.fronts:
            t += f.temp_offset_c(lat, lon)
        for p in self.patches:
            t += p.temp_offset_c(self.ref_lat, self.ref_lon, lat, lon)
        return t


# --------------------------------------------------------------------------- air and wind


SEMIDIURNAL_EQUATOR_HPA = 1.2  # solar semidiurnal pressure tide at the equator (textbook, from memory)


def semidiurnal_amplitude_hpa(lat_deg: float) -> float:
    """The climatological amplitude of the solar semidiurnal pressure tide at a latitude, hPa."""
    return SEMIDIURNAL_EQUATOR_HPA * math.cos(math.radians(lat_deg)) ** 3


@dataclass(frozen=True)
class PressureField:
    """MSL pressure: piecewise-linear in time, plus a semidiurnal tide and a spatial gradient.

    ``knots`` are (t_s, hPa). The atmospheric (solar semidiurnal) tide is part
    of what a real barometer reads, so it is on unless a scenario turns it off
    (``semidiurnal_hpa=0``): it peaks near 10 and 22 local solar time with an
    amplitude of about 1.2 hPa · cos³(latitude) by default (a textbook fact,
    from memory: about 1 hPa in the tropics, a few tenths at mid-latitudes);
    a number given is the amplitude everywhere. Deliberately not the
    estimator's model (1.16 hPa, peak 09:44): a real tide does not follow a
    climatology either. ``gradient_hpa_per_nm`` rises toward
    ``gradient_toward_deg`` from (``ref_lat``, ``ref_lon``).
    """

    knots: tuple[tuple[float, float], ...]
    semidiurnal_hpa: float | None = None
    gradient_hpa_per_nm: float = 0.0
    gradient_toward_deg: float = 0.0
    ref_lat: float = 0.0
    ref_lon: float = 0.0

    def msl_hpa(self, t_s: float, lat: float, lon: float) -> float:
        p = interp_knots(self.knots, t_s)
        amplitude = semidiurnal_amplitude_hpa(lat) if self.semidiurnal_hpa is None else self.semidiurnal_hpa
        if amplitude:
            solar_h = (t_s / 3600.0 + lon / 15.0) % 24.0
            p += amplitude * math.cos(2.0 * math.pi * (solar_h - 10.0) / 12.0)
        if self.gradient_hpa_per_nm:
            east, north = offset_m(self.ref_lat, self.ref_lon, lat, lon)
            e, n = to_east_north(1.0, self.gradient_toward_deg)
            p += self.gradient_hpa_per_nm * (east * e + north * n) / NM_M
        return p


@dataclass(frozen=True)
class WindField:
    """Wind over the ground: (t_s, from_deg, speed_kn) knots, interpolated as a vector."""

    knots: tuple[tuple[float, float, float], ...]
    _east: tuple[tuple[float, float], ...] = field(init=False, repr=False, compare=False, default=())
    _north: tuple[tuple[float, float], ...] = field(init=False, repr=False, compare=False, default=())

    def __post_init__(self) -> None:
        # air velocity (toward) components at each knot: u = −s·sin(from), v = −s·cos(from)
        object.__setattr__(self, "_east", tuple((t, -s * math.sin(math.radians(d))) for t, d, s in self.knots))
        object.__setattr__(self, "_north", tuple((t, -s * math.cos(math.radians(d))) for t, d, s in self.knots))

    def wind(self, t_s: float, lat: float, lon: float) -> tuple[float, float]:
        """(from_deg, speed_kn) of the wind over the ground."""
        east = interp_knots(self._east, t_s)
        north = interp_knots(self._north, t_s)
        speed = math.hypot(east, north)
        return (wrap_360(math.degrees(math.atan2(-east, -north))) if speed > 1e-9 else 0.0), speed


@dataclass(frozen=True)
class Ocean:
    """Everything around the boat. ``wind_drift_factor`` adds a surface drift downwind.

    Wind drift: about 3 % of the wind speed, downwind (common practice); it is
    kept exactly downwind here (no Ekman turn) so it is easy to check.
    """

    currents: tuple[CurrentPart, ...]
    sea_temp: SeaTemperatureField
    pressure: PressureField
    wind: WindField
    air_temp_c: float = 15.0
    wind_drift_factor: float = 0.0
    depth_m: float = 40.0
    depth_gradient_m_per_nm: float = 0.0
    depth_toward_deg: float = 0.0
    _bands: tuple[CurrentBand, ...] = field(init=False, repr=False, compare=False, default=())

    def __post_init__(self) -> None:
        object.__setattr__(self, "_bands", tuple(c for c in self.currents if isinstance(c, CurrentBand)))

    def current(self, t_s: float, lat: float, lon: float) -> tuple[float, float]:
        """(east_kn, north_kn) of the water over the ground."""
        e = n = 0.0
        for part in self.currents:
            de, dn = part.velocity(t_s, lat, lon)
            e += de
            n += dn
        if self.wind_drift_factor:
            from_deg, speed = self.wind.wind(t_s, lat, lon)
            de, dn = to_east_north(self.wind_drift_factor * speed, from_deg + 180.0)
            e += de
            n += dn
        return e, n

    def sea_temp_c(self, lat: float, lon: float) -> float:
        t = self.sea_temp.temp_c(lat, lon)
        for band in self._bands:
            t += band.warm_c * band.profile(lat, lon)
        return t

    def msl_hpa(self, t_s: float, lat: float, lon: float) -> float:
        return self.pressure.msl_hpa(t_s, lat, lon)

    def wind_over_ground(self, t_s: float, lat: float, lon: float) -> tuple[float, float]:
        return self.wind.wind(t_s, lat, lon)

    def depth(self, lat: float, lon: float) -> float:
        d = self.depth_m
        if self.depth_gradient_m_per_nm:
            east, north = offset_m(self.sea_temp.ref_lat, self.sea_temp.ref_lon, lat, lon)
            e, n = to_east_north(1.0, self.depth_toward_deg)
            d += self.depth_gradient_m_per_nm * (east * e + north * n) / NM_M
        return max(d, 2.0)
