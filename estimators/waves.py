"""Waves on a current: how a current shortens, heightens and stops waves, and the wind sea itself.

Theory of operation
-------------------
Linear (Airy) wave theory on a current that is uniform with depth, changing
slowly along the waves' path (Longuet-Higgins & Stewart 1961, "The changes in
amplitude of short gravity waves on steady non-uniform currents", J. Fluid
Mech. 10; Phillips, "The Dynamics of the Upper Ocean", 1977, ch. 3.6).

Frames: ``U`` is the current's component along the direction the waves travel
(m/s; negative when the current opposes them). A wave train keeps its
*absolute* angular frequency ``omega = 2 pi / T`` (the period a fixed observer
counts) as it runs from still water into the current; relative to the moving
water it has the *intrinsic* frequency ``sigma``. The Doppler-shifted
dispersion relation ties them to the wavenumber ``k`` in water of depth ``h``::

    (omega - k U)^2 = g k tanh(k h)           sigma = omega - k U = sqrt(g k tanh kh)

Against the current (U < 0) the root ``k`` is larger than in still water: the
waves are shorter. Energy travels at the group speed relative to the ground,
``c_g + U`` with ``c_g = d sigma / d k``; where that falls to zero no wave of
that period can travel on against the current: the waves are *blocked* and
break there. In deep water that happens when the opposing current reaches a
quarter of the still-water phase speed, ``-U = g T / (8 pi)``.

Height: the energy is not conserved on a current (the current does work on the
waves through the radiation stress), but the wave action ``A = E (c_g + U) / sigma``
is (Bretherton & Garrett 1968), with ``E`` proportional to ``H^2``. So::

    H / H0 = sqrt( (c_g0 / omega) / ((c_g + U) / sigma) )

where ``c_g0`` is the still-water group speed at the same period and depth.
The factors are relative to the same waves in still water of the same depth:
``length_factor = k0 / k``, ``height_factor = H / H0``,
``steepness_factor = height_factor / length_factor``.

The wind sea (how high and how long the waves the wind raises are):
- fully developed: the Pierson–Moskowitz spectrum (Pierson & Moskowitz 1964,
  J. Geophys. Res. 69) ``S(omega) = alpha g^2 omega^-5 exp(-beta (g / (U19.5 omega))^4)``,
  alpha = 8.1e-3, beta = 0.74, the wind ``U19.5`` at 19.5 m; its peak
  ``omega_p = (4 beta / 5)^(1/4) g / U19.5 = 0.877 g / U19.5`` and its significant height
  ``Hs = 4 sqrt(m0) = 4 sqrt(alpha / (4 beta)) U19.5^2 / g = 0.209 U19.5^2 / g``;
  ``U19.5 = 1.026 U10`` (the conversion quoted with the spectrum in coastal
  engineering manuals; from memory);
- fetch-limited: the JONSWAP growth relations (Hasselmann et al. 1973, as the
  US Army Shore Protection Manual 1984 gives them, from memory)
  ``g Hs / U10^2 = 1.6e-3 chi^(1/2)``, ``g Tp / U10 = 0.286 chi^(1/3)``, ``chi = g F / U10^2``,
  never more than the fully developed values.
The anemometer's wind is taken to 10 m with the neutral logarithmic profile
over the sea, ``U(z) ∝ ln(z / z0)``, z0 = 0.2 mm (common practice for open water).

The band of periods: the periods where the Pierson–Moskowitz spectrum holds at
least half its peak density (its half-power band, frequencies 0.80 to 1.38 times the
peak's: periods of about 0.73 to 1.25 Tp), not
one representative wave.

Limits (said in the README too): linear theory (real waves near breaking are
not sinusoids); a current uniform with depth and slowly varying; waves and
current in line; the wind sea an estimate from the wind alone.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

G = 9.80665  # standard gravity, m/s² (CGPM 1901)
DEEP_KH = 20.0  # tanh(20) = 1 - 8e-18: deep water for every purpose here
PM_ALPHA, PM_BETA = 8.1e-3, 0.74  # Pierson & Moskowitz (1964)
U195_PER_U10 = 1.026  # U19.5 / U10 (from memory, as quoted with the PM spectrum)
SEA_Z0_M = 0.0002  # roughness length of open water, neutral air (common practice)
BREAKING_STEEPNESS = 1.0 / 7.0  # H/L at which a wave breaks (Michell 1893: 0.142)


# not frozen: about 8 made for each sea-state publication (DEVELOPERS.md, estimators/)
@dataclass(slots=True)
class WaveOnCurrent:
    """One period on one current. Factors are relative to still water of the same depth."""

    period_s: float
    current_along_mps: float  # U: the current's component along the waves' travel (negative: against)
    depth_m: float | None  # None: deep water
    blocked: bool
    wavenumber_rad_m: float | None  # None when blocked
    length_factor: float | None
    height_factor: float | None
    steepness_factor: float | None


def bracketed_root(f, lo: float, hi: float, xtol: float = 0.0) -> float:
    """The root of ``f`` between ``lo`` and ``hi`` (f changes sign there), by bisection.

    Written here rather than taken from scipy.optimize so that the service does not load scipy's
    optimiser at start; every root here is bracketed and smooth, so halving the bracket to a
    relative width of 1e-14 (at most 200 steps) is plenty, and cheap next to a publication.
    """
    f_lo, f_hi = f(lo), f(hi)
    if f_lo == 0.0:
        return lo
    if f_hi == 0.0:
        return hi
    lo_positive = f_lo > 0.0  # the sign of f at lo: the same at every lo that follows
    if lo_positive == (f_hi > 0.0):
        raise ValueError(f"no sign change between {lo!r} and {hi!r}")
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        f_mid = f(mid)
        if f_mid == 0.0:
            return mid
        if (f_mid > 0.0) == lo_positive:
            lo = mid
        else:
            hi = mid
        tol = 1e-14 * abs(hi)  # max(xtol, 1e-14 |hi|), without the call
        if hi - lo <= (tol if tol > xtol else xtol):
            break
    return 0.5 * (lo + hi)


def rising_root(f_and_slope, lo: float, hi: float, start: float, xtol: float = 0.0) -> float:
    """The root of a function that rises through zero between ``lo`` and ``hi``, from ``start``.

    ``f_and_slope(x)`` gives the value and its derivative together (they share the costly terms).
    Newton's steps, each kept inside the bracket that still holds the sign change (a step that
    would leave it, or that does not at least halve the one before, is a bisection instead: the
    safeguard of Numerical Recipes' rtsafe, Press et al. 1992, ch. 9.4). The caller knows the
    signs at the ends (f(lo) <= 0 <= f(hi)), so they are not evaluated again. Done when a step is
    under 1e-14 of the root (or ``xtol``): the root to rounding, in a handful of steps instead of
    some fifty bisections; the dispersion roots are asked for with every sea-state publication.
    """
    x, step_before = start, hi - lo
    for _ in range(200):
        fx, slope = f_and_slope(x)
        if fx == 0.0:
            return x
        if fx > 0.0:
            hi = x
        else:
            lo = x
        tol = 1e-14 * abs(x)  # relative to the root, whatever the bracket's width
        if tol < xtol:
            tol = xtol
        if hi - lo <= tol:
            break
        step = fx / slope if slope > 0.0 else math.inf
        # Converged is asked before the bracket: x is now one end of the bracket, and a last step
        # below half an ulp leaves x where it is, on that end, which the bracket test would take
        # for leaving it and answer with bisections crawling to the root.
        if abs(step) <= tol:
            return x - step
        if not lo < x - step < hi or abs(step) > 0.5 * step_before:
            step = x - 0.5 * (lo + hi)  # bisect: Newton would leave the bracket or is crawling (a flat slope)
        step_before, x = abs(step), x - step
    return 0.5 * (lo + hi)


def intrinsic_frequency(k: float, h: float | None) -> float:
    """sigma = sqrt(g k tanh kh), rad/s (linear dispersion in still water)."""
    tanh_kh = 1.0 if h is None or k * h > DEEP_KH else math.tanh(k * h)  # in line: asked some 40 000 times an hour
    return math.sqrt(G * k * tanh_kh)


def group_speed(k: float, h: float | None) -> float:
    """c_g = d sigma / d k = (sigma / k) (1/2) (1 + 2kh / sinh 2kh), m/s, relative to the water."""
    return _group_speed_of(k, h, intrinsic_frequency(k, h))


def _group_speed_of(k: float, h: float | None, sigma: float) -> float:
    """``group_speed`` given sigma(k) (``intrinsic_frequency``), for a caller that has it already."""
    c = sigma / k
    if h is None or k * h > DEEP_KH:
        return 0.5 * c
    return 0.5 * c * (1.0 + 2.0 * k * h / math.sinh(2.0 * k * h))


# Pure functions of (period or current, depth), each a root search in shallow water: a publication asks
# for the same ones several times (the blocking wavenumber once per period of the band, the peak's k0
# again for its wavelength), so the last few answers are kept. The same numbers, found once.
@lru_cache(maxsize=32, typed=True)
def still_water_wavenumber(period_s: float, h: float | None) -> float:
    """k0 with omega^2 = g k tanh kh, rad/m."""
    omega = 2.0 * math.pi / period_s
    k_deep = omega * omega / G  # deep water: omega^2 = g k
    if h is None or k_deep * h > DEEP_KH:
        return k_deep
    # k tanh(kh) rises with k, so the root lies between k_deep and k_deep / tanh(k_deep h)
    def f_and_slope(k: float) -> tuple[float, float]:  # d/dk (k tanh kh) = tanh kh + kh (1 - tanh^2 kh)
        tanh_kh = math.tanh(k * h)
        return G * k * tanh_kh - omega * omega, G * (tanh_kh + k * h * (1.0 - tanh_kh * tanh_kh))

    if f_and_slope(k_deep)[0] >= 0.0:  # tanh(k_deep h) is 1 to rounding
        return k_deep
    hi = k_deep / math.tanh(k_deep * h) * 1.001
    return rising_root(f_and_slope, k_deep, hi, k_deep, xtol=1e-14 * hi)


@lru_cache(maxsize=32, typed=True)
def _still_water_group_speed(period_s: float, h: float | None) -> float:
    """c_g at still water's k0 (``still_water_wavenumber``): a function of the period and depth alone, asked
    for with every wave on a current (its action in still water), so kept as k0 is."""
    return group_speed(still_water_wavenumber(period_s, h), h)


def wavelength_m(period_s: float, h: float | None = None) -> float:
    """L = 2 pi / k0 in still water; deep water L = g T^2 / 2 pi."""
    return 2.0 * math.pi / still_water_wavenumber(period_s, h)


@lru_cache(maxsize=32, typed=True)
def _blocking_wavenumber(opposing_mps: float, h: float | None) -> float | None:
    """k where the relative group speed equals the opposing current (c_g(k) = V); None if V >= sqrt(gh)."""
    v = opposing_mps
    k_deep = G / (4.0 * v * v)  # deep water: c_g = sqrt(g/k)/2 = V
    if h is None or k_deep * h > DEEP_KH:
        return k_deep
    if v >= math.sqrt(G * h):  # c_g never exceeds sqrt(gh): every wave is stopped
        return None
    lo = 1e-9 / h
    hi = max(k_deep, DEEP_KH / h) * 2.0
    return bracketed_root(lambda k: group_speed(k, h) - v, lo, hi, xtol=1e-12)


def blocking_period_s(opposing_mps: float, h: float | None = None) -> float:
    """The longest period an opposing current of ``opposing_mps`` stops (every shorter one is blocked too).

    The largest absolute frequency that can still travel against V is the maximum of
    sigma(k) - k V, reached where c_g(k) = V; deep water: omega_b = g / (4 V), T_b = 8 pi V / g.
    Returns 0 for no opposing current and inf where the current outruns every wave (V >= sqrt(g h)).
    """
    if opposing_mps <= 0.0:
        return 0.0
    kb = _blocking_wavenumber(opposing_mps, h)
    if kb is None:
        return math.inf
    omega_b = intrinsic_frequency(kb, h) - kb * opposing_mps
    return 2.0 * math.pi / omega_b


def _deep_water_start(omega: float, u: float, lo: float, hi: float, k0: float) -> float:
    """Where the search for the wavenumber on a current starts: deep water's root where it lies inside
    the bracket, else still water's k0 (at one end of the bracket).

    In deep water sqrt(g k) = omega - k U is a quadratic in sqrt(k), whose root joined to still water is
    sqrt(k) = 2 omega / (sqrt(g) + sqrt(g + 4 U omega)) (written so, it does not cancel for a small U).
    That is the root itself in deep water and close to it wherever kh is large: a step or two of Newton's
    from there instead of some five from k0.
    """
    disc = G + 4.0 * u * omega
    if disc <= 0.0:  # against a current that blocks this period in deep water: no deep-water root
        return k0
    s = 2.0 * omega / (math.sqrt(G) + math.sqrt(disc))
    k = s * s
    return k if lo < k < hi else k0


def wave_on_current(period_s: float, current_along_mps: float, depth_m: float | None = None) -> WaveOnCurrent:
    """Solve (omega - k U)^2 = g k tanh(kh) on the branch joined to still water, and the factors."""
    h = depth_m
    omega = 2.0 * math.pi / period_s
    u = current_along_mps
    k0 = still_water_wavenumber(period_s, h)

    def f_and_slope(k: float) -> tuple[float, float]:
        """sigma(k) - (omega - k U), zero at the wave's wavenumber, and its slope c_g(k) + U (the group
        speed over the ground, d sigma / dk = g (tanh kh + kh (1 - tanh^2 kh)) / 2 sigma, plus U)."""
        if h is None or k * h > DEEP_KH:
            sigma = math.sqrt(G * k)
            return sigma - omega + k * u, 0.5 * G / sigma + u
        tanh_kh = math.tanh(k * h)
        sigma = math.sqrt(G * k * tanh_kh)
        return sigma - omega + k * u, 0.5 * G * (tanh_kh + k * h * (1.0 - tanh_kh * tanh_kh)) / sigma + u

    if u == 0.0:  # still water: the input, exactly
        return WaveOnCurrent(period_s, u, h, False, k0, 1.0, 1.0, 1.0)
    if u > 0.0:  # following: f rises monotonically; f(k0) = k0 U > 0, so the root is below k0
        lo, hi = k0 * 1e-6, k0
    else:  # against: f rises up to the blocking wavenumber (c_g + U > 0 below it); f(k0) = k0 U < 0
        kb = _blocking_wavenumber(-u, h)
        if kb is None or f_and_slope(kb)[0] < 0.0:  # the wave's period is below the blocking period
            return WaveOnCurrent(period_s, u, h, True, None, None, None, None)
        lo, hi = k0, kb
    k = rising_root(f_and_slope, lo, hi, _deep_water_start(omega, u, lo, hi, k0))
    sigma = intrinsic_frequency(k, h)
    cg_ground = _group_speed_of(k, h, sigma) + u
    if cg_ground <= 0.0:  # at the blocking point itself (within rounding)
        return WaveOnCurrent(period_s, u, h, True, None, None, None, None)
    length = k0 / k  # L / L0
    # wave action E (c_g + U) / sigma kept
    height = math.sqrt((_still_water_group_speed(period_s, h) / omega) / (cg_ground / sigma))
    return WaveOnCurrent(period_s, u, h, False, k, length, height, height / length)


# -- the wind sea ------------------------------------------------------------------------------


def wind_at_10m(speed: float, height_m: float) -> float:
    """A wind measured ``height_m`` above the sea taken to 10 m: neutral log profile, z0 = 0.2 mm."""
    return speed * math.log(10.0 / SEA_Z0_M) / math.log(max(height_m, 0.5) / SEA_Z0_M)


def pm_peak_period_s(u10_mps: float) -> float:
    """Pierson–Moskowitz peak period: omega_p = (4 beta / 5)^(1/4) g / U19.5."""
    omega_p = (0.8 * PM_BETA) ** 0.25 * G / (U195_PER_U10 * u10_mps)
    return 2.0 * math.pi / omega_p


def pm_significant_height_m(u10_mps: float) -> float:
    """Pierson–Moskowitz Hs = 4 sqrt(m0), m0 = alpha U19.5^4 / (4 beta g^2)."""
    u195 = U195_PER_U10 * u10_mps
    return 4.0 * math.sqrt(PM_ALPHA / (4.0 * PM_BETA)) * u195 * u195 / G


def pm_spectrum(omega: float, u10_mps: float) -> float:
    """S(omega) = alpha g^2 omega^-5 exp(-beta (g / (U19.5 omega))^4), m² s."""
    w0 = G / (U195_PER_U10 * u10_mps)
    return PM_ALPHA * G * G * omega ** -5 * math.exp(-PM_BETA * (w0 / omega) ** 4)


def _half_power_band() -> tuple[float, float]:
    """omega / omega_p at the PM spectrum's half-power points (S(x)/S(1) = x^-5 exp(5/4 (1 - x^-4)))."""
    rel = lambda x: x ** -5 * math.exp(1.25 * (1.0 - x ** -4)) - 0.5  # noqa: E731
    return bracketed_root(rel, 0.5, 1.0), bracketed_root(rel, 1.0, 3.0)


HALF_POWER_LO, HALF_POWER_HI = _half_power_band()


# not frozen: made for each sea-state publication (DEVELOPERS.md, estimators/)
@dataclass(slots=True)
class WindSea:
    """The wind sea a wind raises: significant height, peak period and the band of periods used."""

    u10_mps: float
    significant_height_m: float
    peak_period_s: float
    periods_s: tuple[float, ...]
    fetch_limited: bool


def wind_sea(u10_mps: float, fetch_m: float = 0.0, n_periods: int = 7) -> WindSea:
    """Height, peak period and band of the wind sea; fully developed where ``fetch_m`` is 0."""
    u = max(u10_mps, 0.5)
    hs, tp = pm_significant_height_m(u), pm_peak_period_s(u)
    limited = False
    if fetch_m > 0.0:
        chi = G * fetch_m / (u * u)  # dimensionless fetch
        hs_f = 1.6e-3 * math.sqrt(chi) * u * u / G  # JONSWAP growth (SPM 1984)
        tp_f = 0.286 * chi ** (1.0 / 3.0) * u / G
        if hs_f < hs:
            hs, tp, limited = hs_f, min(tp, tp_f), True
    # periods evenly spaced in frequency across each side of the half-power band, the peak among them
    lo, hi = HALF_POWER_LO, HALF_POWER_HI
    side = max(1, n_periods // 2)
    xs = [lo + (1.0 - lo) * i / side for i in range(side)] + [1.0] + [1.0 + (hi - 1.0) * i / side for i in range(1, side + 1)]
    periods = tuple(sorted(round(tp / x, 2) for x in xs))
    return WindSea(u, hs, tp, periods, limited)
