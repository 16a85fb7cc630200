"""Waves on a current and the wind sea, against outside sources named beside each check."""

from __future__ import annotations

import math
import random

import pytest
from scipy.integrate import quad
from scipy.optimize import brentq, minimize_scalar

from estimators import waves
from estimators.angles import KN_TO_MPS
from estimators.waves import (
    BREAKING_STEEPNESS, G, HALF_POWER_HI, HALF_POWER_LO, blocking_period_s, group_speed, intrinsic_frequency,
    pm_peak_period_s, pm_significant_height_m, pm_spectrum, rising_root, still_water_wavenumber, wave_on_current,
    wavelength_m, wind_at_10m, wind_sea,
)

FT = 0.3048  # international foot, m


@pytest.mark.parametrize("period_s", [4.0, 7.0, 10.0, 14.0])
def test_deep_water_wavelength(period_s):
    # Airy theory, deep water: L = g T^2 / 2 pi = 1.561 T^2 m (any coastal engineering text, e.g.
    # Dean & Dalrymple, "Water Wave Mechanics for Engineers and Scientists", 1991, ch. 3)
    L = wavelength_m(period_s)
    assert L == pytest.approx(G * period_s**2 / (2 * math.pi), rel=1e-9)
    assert L == pytest.approx(1.56 * period_s**2, rel=0.005)
    # fact of the trade (common practice): about 5.12 T^2 feet
    assert L / FT == pytest.approx(5.12 * period_s**2, rel=0.005)


def test_phase_and_group_speed_deep_water():
    # Airy theory: deep water phase speed c = g T / 2 pi, group speed half of it
    T = 8.0
    k = still_water_wavenumber(T, None)
    c = intrinsic_frequency(k, None) / k
    assert c == pytest.approx(G * T / (2 * math.pi), rel=1e-9)
    assert group_speed(k, None) == pytest.approx(c / 2, rel=1e-9)


def test_shallow_water_speed_is_sqrt_gh():
    # Airy theory, shallow water (h / L < 1/20): c = c_g = sqrt(g h)
    h, T = 2.0, 120.0
    k = still_water_wavenumber(T, h)
    assert k * h < 0.05
    assert intrinsic_frequency(k, h) / k == pytest.approx(math.sqrt(G * h), rel=0.002)
    assert group_speed(k, h) == pytest.approx(math.sqrt(G * h), rel=0.002)


@pytest.mark.parametrize("period_s,depth_m", [(8.0, 5.0), (10.0, 20.0), (6.0, 40.0)])
def test_intermediate_depth_against_fenton_mckee(period_s, depth_m):
    # An independent explicit approximation: L = L0 [tanh((2 pi sqrt(h/g) / T)^(3/2))]^(2/3)
    # (Fenton & McKee 1990, Coastal Engineering 14; within about 1.7 %, from memory)
    L0 = G * period_s**2 / (2 * math.pi)
    approx = L0 * math.tanh((2 * math.pi * math.sqrt(depth_m / G) / period_s) ** 1.5) ** (2.0 / 3.0)
    assert wavelength_m(period_s, depth_m) == pytest.approx(approx, rel=0.017)
    # and the root satisfies omega^2 = g k tanh kh itself
    k = still_water_wavenumber(period_s, depth_m)
    assert G * k * math.tanh(k * depth_m) == pytest.approx((2 * math.pi / period_s) ** 2, rel=1e-9)


def test_zero_current_returns_the_input():
    w = wave_on_current(9.0, 0.0, 30.0)
    assert not w.blocked
    assert (w.length_factor, w.height_factor, w.steepness_factor) == (1.0, 1.0, 1.0)
    assert w.wavenumber_rad_m == pytest.approx(still_water_wavenumber(9.0, 30.0))


def test_worked_case_ten_seconds_against_five_knots():
    # GIVEN T = 10 s in deep water against 5 kn (2.572 m/s).
    # By hand (deep water, x = sqrt(k)): sqrt(g) x = omega + V x^2, so
    #   x = (sqrt(g) - sqrt(g - 4 V omega)) / (2 V) = (3.1316 - sqrt(9.8067 - 6.4645)) / 5.1444 = 0.25336,
    #   k = 0.064192; k0 = omega^2 / g = 0.040256; L / L0 = k0 / k = 0.627 (the issue: about 0.63);
    #   sigma = omega + k V = 0.79345; c_g = sigma / 2k = 6.180; c_g + U = 3.608 m/s; c_g0 = g / 2 omega = 7.804;
    #   H / H0 = sqrt((c_g0 / omega) / ((c_g + U) / sigma)) = sqrt(12.421 / 4.5475) = 1.653 (about 1.65):
    #   linear theory, wave action conserved (Longuet-Higgins & Stewart 1961).
    w = wave_on_current(10.0, -5.0 * KN_TO_MPS)
    assert w.wavenumber_rad_m == pytest.approx(0.064192, rel=1e-4)
    assert w.length_factor == pytest.approx(0.627, abs=0.001)
    assert w.height_factor == pytest.approx(1.653, abs=0.001)
    assert w.steepness_factor == pytest.approx(1.653 / 0.627, abs=0.005)


def test_following_current_against_closed_form():
    # deep water with a following current U: sqrt(g) x = omega - U x^2; the root joined to still water
    # x = (-sqrt(g) + sqrt(g + 4 U omega)) / (2 U); waves longer and lower (Longuet-Higgins & Stewart 1961)
    T, U = 7.0, 1.5
    omega = 2 * math.pi / T
    x = (-math.sqrt(G) + math.sqrt(G + 4 * U * omega)) / (2 * U)
    w = wave_on_current(T, U)
    assert w.wavenumber_rad_m == pytest.approx(x * x, rel=1e-8)
    assert w.length_factor > 1.0 and w.height_factor < 1.0


@pytest.mark.parametrize("kn", [1.0, 3.0, 5.0])
def test_blocking_deep_water(kn):
    # Deep water: waves are stopped where the opposing current reaches a quarter of the still-water phase
    # speed, V = c0 / 4 = g T / 8 pi (Phillips 1977, ch. 3.6; the definition)
    V = kn * KN_TO_MPS
    Tb = blocking_period_s(V)
    assert Tb == pytest.approx(8 * math.pi * V / G, rel=1e-9)
    assert wave_on_current(Tb * 0.98, -V).blocked
    near = wave_on_current(Tb * 1.02, -V)
    assert not near.blocked
    assert near.height_factor > 2.0  # action piles up as the group speed over ground falls toward zero


def test_blocking_in_shallow_water():
    # No wave travels faster than sqrt(g h) relative to the water: a current that fast stops every period
    h = 3.0
    assert math.isinf(blocking_period_s(math.sqrt(G * h) * 1.01, h))
    assert wave_on_current(30.0, -math.sqrt(G * h) * 1.01, h).blocked
    # a slower current: the finite-depth limit is still where c_g = V
    V = 2.0
    Tb = blocking_period_s(V, 10.0)
    assert not wave_on_current(Tb * 1.01, -V, 10.0).blocked and wave_on_current(Tb * 0.99, -V, 10.0).blocked


def test_pierson_moskowitz_peak_and_height_from_the_spectrum():
    # Independent: maximise and integrate the PM spectrum numerically (Pierson & Moskowitz 1964);
    # Hs = 4 sqrt(m0). Compare with the closed forms 0.877 g / U19.5 and 0.209 U19.5^2 / g.
    u10 = 12.0
    peak = minimize_scalar(lambda w: -pm_spectrum(w, u10), bounds=(0.2, 3.0), method="bounded", options={"xatol": 1e-9})
    assert 2 * math.pi / peak.x == pytest.approx(pm_peak_period_s(u10), rel=1e-4)
    m0, _ = quad(lambda w: pm_spectrum(w, u10), 0.05, 20.0, limit=200)
    assert 4 * math.sqrt(m0) == pytest.approx(pm_significant_height_m(u10), rel=1e-4)
    u195 = 1.026 * u10
    assert pm_significant_height_m(u10) == pytest.approx(0.209 * u195**2 / G, rel=0.005)
    assert 2 * math.pi / pm_peak_period_s(u10) == pytest.approx(0.877 * G / u195, rel=0.001)


def test_half_power_band_edges():
    u10 = 10.0
    wp = 2 * math.pi / pm_peak_period_s(u10)
    top = pm_spectrum(wp, u10)
    for x in (HALF_POWER_LO, HALF_POWER_HI):
        assert pm_spectrum(x * wp, u10) == pytest.approx(top / 2, rel=1e-6)
    sea = wind_sea(u10)
    assert min(sea.periods_s) == pytest.approx(sea.peak_period_s / HALF_POWER_HI, abs=0.01)
    assert max(sea.periods_s) == pytest.approx(sea.peak_period_s / HALF_POWER_LO, abs=0.01)
    assert round(sea.peak_period_s, 2) in sea.periods_s


def test_fetch_limits_the_sea():
    # JONSWAP growth (Hasselmann et al. 1973, SPM 1984): g Hs / U^2 = 1.6e-3 chi^0.5 below full development
    u10 = 10.0
    short = wind_sea(u10, fetch_m=10_000.0)
    chi = G * 10_000.0 / u10**2
    assert short.fetch_limited
    assert short.significant_height_m == pytest.approx(1.6e-3 * math.sqrt(chi) * u10**2 / G, rel=1e-9)
    assert short.peak_period_s == pytest.approx(0.286 * chi ** (1 / 3) * u10 / G, rel=1e-9)
    ocean = wind_sea(u10, fetch_m=5_000_000.0)  # never more than fully developed
    assert not ocean.fetch_limited
    assert ocean.significant_height_m == pytest.approx(pm_significant_height_m(u10))


def test_wind_height_correction_is_neutral_log_profile():
    # U(z) proportional to ln(z / z0), z0 = 0.2 mm: 10 m unchanged; a 20-m masthead reads about 6 % more
    assert wind_at_10m(10.0, 10.0) == pytest.approx(10.0)
    assert wind_at_10m(10.0, 20.0) == pytest.approx(10.0 * math.log(10 / 2e-4) / math.log(20 / 2e-4))
    assert 0.93 < wind_at_10m(10.0, 20.0) / 10.0 < 0.95


def test_michell_limit():
    # Michell (1893): a deep-water wave breaks at H/L = 0.142, about 1/7
    assert BREAKING_STEEPNESS == pytest.approx(0.142, abs=0.001)


def _dispersion_root(period_s, u, h):
    """The wavenumber on a current by scipy.optimize.brentq (reference library), bracketed as the theory says:
    following, below k0; against, between k0 and the blocking wavenumber where c_g = -U."""
    omega = 2 * math.pi / period_s
    sigma = lambda k: math.sqrt(G * k * (1.0 if h is None else math.tanh(min(k * h, 50.0))))  # noqa: E731
    f = lambda k: sigma(k) - omega + k * u  # noqa: E731
    k0 = brentq(lambda k: sigma(k) - omega, 1e-9, 100.0, xtol=1e-300, rtol=1e-15)
    if u > 0:
        return brentq(f, k0 * 1e-6, k0, xtol=1e-300, rtol=1e-15)
    kb = brentq(lambda k: group_speed(k, h) + u, k0, 1e12, xtol=1e-300, rtol=1e-15)
    return brentq(f, k0, kb, xtol=1e-300, rtol=1e-15)


@pytest.mark.parametrize("period_s,u,h", [
    (7.0, 1.5, None), (5.2, 0.26, 80.0), (10.0, -5.0 * KN_TO_MPS, None), (4.1, -0.3, 80.0), (12.0, -1.0, 15.0),
    # currents of a hundredth of a knot and less against the waves (a current nearly across the wind): the
    # blocking wavenumber is then a million times the wave's, and a tolerance scaled to it would not do
    (6.0, -0.005, None), (10.8, -7.9e-6, 200.0), (5.5, -1e-4, 80.0), (9.0, 0.8, 6.0), (14.0, -0.9, 8.0),
])
def test_the_wavenumber_on_a_current_is_the_dispersion_root(period_s, u, h):
    # reference library: scipy.optimize.brentq on (omega - k U)^2 = g k tanh kh (linear theory, as above), to
    # a few units in the last place; the Newton steps of estimators.waves must land on the same root
    k = wave_on_current(period_s, u, h).wavenumber_rad_m
    assert k == pytest.approx(_dispersion_root(period_s, u, h), rel=1e-12)


@pytest.mark.parametrize("period_s,h", [(19.7, 2.0), (8.0, 5.0), (6.0, 40.0), (4.0, 80.0), (120.0, 2.0)])
def test_the_still_water_wavenumber_is_the_dispersion_root(period_s, h):
    # reference library: scipy.optimize.brentq on omega^2 = g k tanh kh
    omega = 2 * math.pi / period_s
    ref = brentq(lambda k: G * k * math.tanh(k * h) - omega**2, 1e-9, 100.0, xtol=1e-300, rtol=1e-15)
    assert still_water_wavenumber(period_s, h) == pytest.approx(ref, rel=1e-12)


def _random_waves(n: int, seed: int):
    """Seeded periods (2-20 s), depths (deep, or 1-300 m evenly in log) and currents (3 m/s either way)."""
    rng = random.Random(seed)
    for _ in range(n):
        depth = None if rng.random() < 0.3 else math.exp(rng.uniform(0.0, math.log(300.0)))
        yield rng.uniform(2.0, 20.0), rng.uniform(-3.0, 3.0), depth


def test_random_wavenumbers_on_a_current_are_the_dispersion_roots():
    # reference library: scipy.optimize.brentq (as above) on random periods, depths and currents, so every
    # start of the search is met (deep water's root inside the bracket, or still water's k0) and every way
    # a Newton step ends; a period the current blocks has no root between k0 and the blocking wavenumber
    blocked = solved = 0
    for period_s, u, h in _random_waves(400, seed=9):
        wave = wave_on_current(period_s, u, h)
        try:
            ref = _dispersion_root(period_s, u, h)
        except ValueError:  # brentq: no sign change, the wave is blocked
            assert wave.blocked, (period_s, u, h)
            blocked += 1
            continue
        assert not wave.blocked, (period_s, u, h)
        assert wave.wavenumber_rad_m == pytest.approx(ref, rel=1e-12), (period_s, u, h)
        solved += 1
    assert blocked > 20 and solved > 300  # both kinds were met


def test_the_wavenumber_search_takes_newton_steps_not_bisections(monkeypatch):
    # Newton's steps converge quadratically (Press et al. 1992, ch. 9.4): a handful of evaluations to
    # rounding where halving the bracket to 1e-14 would take some fifty. A final step under half an ulp
    # leaves x on the bracket's end, which must end the search, not start bisections.
    evaluations = []

    def counted(f_and_slope, lo, hi, start, xtol=0.0):
        n = [0]

        def f(x):
            n[0] += 1
            return f_and_slope(x)
        root = rising_root(f, lo, hi, start, xtol)
        evaluations.append(n[0])
        return root

    monkeypatch.setattr(waves, "rising_root", counted)
    for period_s, u, h in _random_waves(400, seed=10):
        waves.wave_on_current(period_s, u, h)
    assert len(evaluations) > 400  # the wave's own search and, in shallow water, still water's k0
    assert max(evaluations) <= 12
    assert sum(evaluations) / len(evaluations) < 5.0
