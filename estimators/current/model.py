"""The current filter's model: state, measurement function, Jacobian, R and Q.

State x = [c_e, c_n, k, d] (kn, kn, dimensionless, rad); see the package's
theory of operation (``estimators.current``). Measurement, one per GNSS
ground-velocity epoch (the current triangle)::

    g = c + k * s * u(psi + d + lambda) + noise,   u(a) = (sin a, cos a)

H = dh/dx = [I, s u(theta), k s du/dtheta], theta = psi + d + lambda.
R = GNSS noise + the log's noise along the water track + the compass's (and
leeway's) noise across it, through the Jacobian of h in s and psi.
Q: every state a random walk (F = I), Q = q dt.
Pure functions of plain numbers: nothing here keeps state.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from estimators.angles import to_east_north
from estimators.samples import Sample

from .params import S_PER_H, CurrentParams, leeway_deg  # leeway_deg: a rule on the parameters alone, no numpy


@dataclass
class WaterInputs:
    """The log and compass over one fix interval, as the fusion step sees them."""

    speed_kn: float       # mean log reading over the window
    heading_deg: float    # circular mean heading reading over the window
    heel_deg: float | None
    slow_speed_kn: float = 0.0     # the same, low-passed: used in the Jacobian (see _slow_inputs)
    spread_deg: float = 0.0        # largest departure of a heading in the window from their mean (a turn)
    slow_heading_deg: float = 0.0
    turn_rate_deg_s: float = 0.0   # rate of the 3-s EMA heading, deg/s (see _slow_inputs)
    speed_rate_kn_s: float = 0.0   # rate of the 3-s EMA log speed, kn/s
    manoeuvring: bool = False      # the readings depart from their low-passed values (see _slow_inputs)
    turning: bool = False          # a manoeuvre or a fast heading change (see _turn_hold)
    interval_s: float = 1.0        # since the previous fix: the span of these means


class FilterState:
    """The filter's state vector ``x`` (4 x 1) and covariance ``P`` (4 x 4), as numpy arrays, and beside them
    the covariance it publishes, ``P_pub``: the error covariance of this filter (its gain) if the water walks
    at the rate read from the data (``walk``), and ``lag``: the filter's mean error behind water whose current
    changes steadily, per unit of that slope (2 x 2, rows the error's axes, columns the slope's; ``walk``),
    which nothing in the filter reads.

    filterpy's ``ExtendedKalmanFilter`` held them once, but importing it loads scipy.stats, about
    45 MB and a second at start, for nothing (the predict and the update are written out here).
    """

    __slots__ = ("x", "P", "P_pub", "lag")

    def __init__(self) -> None:
        self.x = np.zeros((4, 1))
        self.P = np.eye(4)
        self.P_pub = np.eye(4)
        self.lag = ((0.0, 0.0), (0.0, 0.0))  # the current's error per unit of the water's slope, s (``walk``)

    def inflate_current(self, variance_kn2: float) -> None:
        """Add ``variance_kn2`` to each axis of the current in P and P_pub alike (a reset, a sensor found
        lying: news to both covariances). New arrays: a caller holding the old P keeps it as it was."""
        added = (variance_kn2, variance_kn2, 0.0, 0.0)
        self.P = plus_diagonal(self.P, added)
        self.P_pub = plus_diagonal(self.P_pub, added)


def unit(angle_rad: float) -> np.ndarray:
    """(east, north) of a unit vector toward ``angle_rad`` (from north, clockwise)."""
    return np.array([[math.sin(angle_rad)], [math.cos(angle_rad)]])


def d_unit(angle_rad: float) -> np.ndarray:
    """d u / d angle: the unit vector 90 deg to starboard."""
    return np.array([[math.cos(angle_rad)], [-math.sin(angle_rad)]])


def ground_velocity_of(sample: Sample) -> tuple[float, float] | None:
    """(east, north) kn from a Fix's or GroundVelocity's SOG/COG; None when there is none."""
    sog = getattr(sample, "sog_kn", None)
    cog = getattr(sample, "cog_deg", None)
    if sog is None or not math.isfinite(sog) or sog < 0.0 or sog > 100.0:
        return None
    if cog is None or not math.isfinite(cog):
        return (0.0, 0.0) if sog < 0.05 else None  # at rest the course does not matter
    return to_east_north(sog, cog)


def plus_diagonal(M: np.ndarray, diagonal: tuple[float, float, float, float]) -> np.ndarray:
    """M + diag(``diagonal``) for a 4 x 4 M, as a new array (a caller holding M keeps it as it was).

    A copy with its four diagonal elements added to: the same sums as adding the whole of diag(...),
    at half the cost of building that array and adding its twelve zeros (the predict does it twice a fix).
    """
    out = M.copy()
    out[0, 0] += diagonal[0]
    out[1, 1] += diagonal[1]
    out[2, 2] += diagonal[2]
    out[3, 3] += diagonal[3]
    return out


def inflated_rate(p: CurrentParams, water_rate: float, q_inflation: float) -> float:
    """The current's walk (kn^2/s per axis) from the water's (``walk``) and what the change detectors add to the
    configured walk on top of it (a change beyond the model is news to the filter's Q and the published
    covariance alike: ``CurrentEstimator.filter_rate`` and ``published_rate``)."""
    return water_rate + (q_inflation - 1.0) * p.current_walk_kn_per_sqrt_h ** 2 / S_PER_H


def walk_variances(p: CurrentParams, dt: float, current_rate: float) -> tuple[float, float, float, float]:
    """Q for a step of ``dt`` s, its diagonal (c_e, c_n, k, d) as floats (every state a random walk; the
    predict adds it with ``plus_diagonal``, a publication takes the current's part): the current at
    ``current_rate`` (kn^2/s per axis: the filter's own, or the published covariance's; ``inflated_rate``)."""
    qc = current_rate
    qk = p.stw_scale_walk_per_sqrt_h ** 2 / S_PER_H
    qd = math.radians(p.heading_offset_walk_deg_per_sqrt_h) ** 2 / S_PER_H
    return (qc * dt, qc * dt, qk * dt, qd * dt)                                     # random walk: Q = q dt


def measurement_cov(p: CurrentParams, g: tuple[float, float], w: WaterInputs, k: float, theta: float,
                    correlated: bool = True) -> np.ndarray:
    """R: GNSS velocity noise plus the log's and the compass's noise through the Jacobian."""
    return np.array(measurement_rows(p, g, w, k, theta, correlated))


def measurement_rows(p: CurrentParams, g: tuple[float, float], w: WaterInputs, k: float, theta: float,
                     correlated: bool = True) -> list[list[float]]:
    """``measurement_cov`` as two rows of plain floats, for the fusion step that takes them so (``fusion``)."""
    sg = p.gnss_velocity_sigma_kn * (p.low_sog_inflation if math.hypot(*g) < p.low_sog_kn else 1.0)
    s = w.speed_kn
    lam = math.radians(leeway_deg(p, w.heel_deg, k * s))
    # heading noise, the leeway's uncertainty and, in a turn, how far the interval's mean heading
    # can be from the heading at the fix (the spread of the headings in the window)
    # ... and, in a turn fused (longer than the hold), the unknown lag between the GNSS velocity and
    # the compass/log means: rate x lag (not on a steady course: there the rate is the readings' noise)
    lag = p.input_timing_sigma_s if w.turning else 0.0
    # Each input's noise has a part independent from fix to fix (white noise averaged over the interval,
    # wave yaw whose swings of a few seconds average out) and a first-order Gauss-Markov part correlated
    # over tau. Fixes closer than tau are not independent samples of the latter: for the filter, which
    # averages over minutes, n fixes of it hold the information of n dt / (2 tau) independent ones (the
    # effective sample count, Bayley & Hammersley 1946; see calibration), so that part of R is x 2 tau / dt:
    # R then carries the noise's long-run variance (2 tau sigma^2 per second), not its variance per fix.
    # ``correlated=False``: the variance per fix, what one innovation shows (the change detector's).
    c_log = effective_factor(p.noise_correlation_s, w.interval_s) if correlated else 1.0
    c_hdg = effective_factor(p.heading_correlation_s, w.interval_s) if correlated else 1.0
    heading_var = math.radians(p.heading_sigma_deg) ** 2 + c_hdg * math.radians(p.heading_correlated_sigma_deg) ** 2
    cross = (k * s) ** 2 * (heading_var + (p.leeway_sigma_fraction * lam) ** 2
                            + math.radians(w.spread_deg) ** 2 + math.radians(w.turn_rate_deg_s * lag) ** 2)
    along = k ** 2 * (p.log_sigma_kn ** 2 + c_log * p.log_correlated_sigma_kn ** 2 + (w.speed_rate_kn_s * lag) ** 2)
    ue, un = math.sin(theta), math.cos(theta)                               # u = u(theta), n = (un, -ue)
    r2 = sg ** 2
    return [[r2 + along * ue * ue + cross * un * un, (along - cross) * ue * un],   # sg^2 I + along u u'
            [(along - cross) * ue * un, r2 + along * un * un + cross * ue * ue]]  #   + cross n n'


def effective_factor(tau_s: float, dt_s: float) -> float:
    """Variance factor of a Gauss-Markov noise sampled every ``dt_s``: 2 tau / dt, at least 1 (white).

    The long-run variance of a first-order Gauss-Markov process is 2 tau sigma^2 (its autocovariance
    sigma^2 exp(-|lag| / tau) integrated over all lags); per sample of spacing dt that is sigma^2 2 tau / dt.
    """
    return max(1.0, 2.0 * tau_s / max(dt_s, 1e-3))


def jacobian(p: CurrentParams, w: WaterInputs, k: float, d: float) -> np.ndarray:
    """H = [I, s u(theta), k s du/dtheta] from the low-passed inputs (_slow_inputs)."""
    return np.array(jacobian_rows(p, w, k, d))


def jacobian_rows(p: CurrentParams, w: WaterInputs, k: float, d: float) -> list[list[float]]:
    """``jacobian`` as two rows of plain floats, for the fusion step that takes them so (``fusion``)."""
    ss = w.slow_speed_kn
    th = math.radians(w.slow_heading_deg + leeway_deg(p, w.heel_deg, k * ss)) + d
    sn, cs = math.sin(th), math.cos(th)
    return [[1.0, 0.0, ss * sn, k * ss * cs],
            [0.0, 1.0, ss * cs, -k * ss * sn]]
