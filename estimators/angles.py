"""Angles and speeds: degrees at the edges, radians inside the maths."""

from __future__ import annotations

import math
from collections.abc import Iterable

KN_TO_MPS = 1852.0 / 3600.0  # 1 kn = 1852 m per hour, exactly (interface)
MPS_TO_KN = 3600.0 / 1852.0
NM_M = 1852.0


def wrap_360(deg: float) -> float:
    """Direction into [0, 360)."""
    d = math.fmod(deg, 360.0)
    if d < 0.0:
        d += 360.0
    return 0.0 if d >= 360.0 else d


def wrap_180(deg: float) -> float:
    """Signed angle difference into [-180, 180): wrap_360(deg + 180) - 180, written out (a hot path)."""
    d = math.fmod(deg + 180.0, 360.0)
    if d < 0.0:
        d += 360.0
    return (0.0 if d >= 360.0 else d) - 180.0


def circular_mean_deg(degs: Iterable[float]) -> float | None:
    """Mean direction of unit vectors; None for no samples or a resultant of ~0."""
    s = c = 0.0
    n = 0
    for d in degs:
        r = math.radians(d)
        s += math.sin(r)
        c += math.cos(r)
        n += 1
    if n == 0 or math.hypot(s, c) < 1e-9 * n:
        return None
    return wrap_360(math.degrees(math.atan2(s, c)))


def to_east_north(speed: float, toward_deg: float) -> tuple[float, float]:
    """Vector (east, north) of a speed along a direction it goes *toward*."""
    r = math.radians(toward_deg)
    return speed * math.sin(r), speed * math.cos(r)


def from_east_north(east: float, north: float) -> tuple[float, float]:
    """(speed, toward_deg) of an (east, north) vector."""
    return math.hypot(east, north), wrap_360(math.degrees(math.atan2(east, north)))


def turned(m: tuple[float, float], d_rad: float) -> tuple[float, float]:
    """The vector m (east, north) turned clockwise by d: u(psi + d) = R(d) u(psi)."""
    e, n = m
    cd, sd = math.cos(d_rad), math.sin(d_rad)
    return e * cd + n * sd, -e * sd + n * cd
