"""The log scale and the heading offset, learnt only where the data earns it: a batch fit over steady legs.

Theory of operation
-------------------
k (true STW = k x log) and d (true heading = compass + d) are separable from
the current only across changes of the water track's direction. A filter that
updates them at every fix reads correlated log and compass noise, and a small
course change, as evidence it is not; so in the 1-Hz filter k and d are
Schmidt "consider" states (their uncertainty is carried into the current's,
their estimates never moved by a fix), and they are learnt here instead.

Blocks. Each ``calibration_block_s`` of steady sailing (every fix of it fused:
no turn, no suspect log) becomes one block: the mean ground velocity g_b and
the mean water-velocity reading m_b = mean(s_i u(psi_i + lambda_i)) (log s,
compass psi, leeway lambda). A block with a turn or too few fixes is dropped.

Effective sample count. The log's and the compass's errors are correlated over
seconds (a paddle wheel in a seaway, wave yaw), so the n fixes of a block are
not n independent samples. The variance of the mean of a first-order
Gauss-Markov noise over T >> tau is about sigma^2 * 2 tau / T: the block counts
as N_eff = T / (2 tau) samples (Bayley & Hammersley, "The effective number of
independent observations in an autocorrelated time series", J. R. Stat. Soc.
Suppl. 8, 1946; tau = ``noise_correlation_s`` for the log, ``heading_correlation_s``
for the compass; the part of the noise independent from fix to fix counts
n times). The fit's own residuals then
scale this (below), so a sea rougher than assumed widens the sigmas.

The fit. Weighted nonlinear least squares (Gauss-Newton) over the blocks of
the last ``calibration_fit_window_h``::

    g_b = c(t_b) + k R(d) m_b + e_b,   c(t) = c0 + c1 t + c2 t^2 (t in hours from the window's middle)
    R(d) m: m turned clockwise by d

with the prior (saved calibration, or the stated one) on k and d as two more
observations, so a window with no course change returns the prior and its
sigma. The current's slow change is part of the model, so a current that
turns with the tide over the window is not read as a calibration; what the
quadratic cannot follow still leaks into k and d, the same way in every
window of the same stream. So the covariance of (k, d) is not (J' W J)^-1,
which takes each block's share of that error as independent, but the sandwich
of the estimate's sensitivity to the blocks over their covariance with the
walk as one path shared by all of them (``walk_consider_cov``), multiplied by
the reduced chi-square of the block residuals where that is above 1 (the
residuals say the blocks were noisier than assumed).

Model error, read from the window. What the quadratic cannot follow of the
current's walk adds one variance to every block: a random walk of q kn^2/h
leaves about q W / 23 after a quadratic over W hours. q is read from the fit
itself, in both directions: the residuals' excess over the sensors' variance
(Paule & Mandel 1982: the shared variance that brings the weighted sum of
squares to its degrees of freedom), turned into a walk, and weighed against
the params' walk ``current_walk_kn_per_sqrt_h`` as a prior worth
``calibration_walk_prior_dof`` residuals (the conjugate update of a normal
variance). A variance read from few residuals is itself uncertain (relative
sd sqrt(2 / nu)), so a fit of a few blocks stays near the params' walk, one
over hours of steady water earns a small model error and a narrower sigma,
and water walking faster than the params say earns a larger one, with no cap.
The prior on the current's slope and curvature follows the larger of the two
walks: never tighter than the params allow (a tidal stream's smooth turn shows
as curvature, not in the residuals, and a tighter trend would alias it into
k and d), looser when the window walks faster. That walk sets the weights.

The covariance's model error, read from the residuals' order in time. The sum
of squares cannot tell a small walk from none (over three hours of steady water
the shrunk read above stays near 0.04-0.06 kn/sqrt(h), the prior's weight, and
made the sigma about 1.4 times the errors), the residuals' order can: a walk
makes neighbouring blocks alike, the sensors' noise does not. So once the
window holds ``RESIDUAL_WALK_MIN_BLOCKS`` blocks the walk the covariance
counts is the upper end of the likelihood-ratio interval of a local level
model over the residuals (``walk.fit_walk``, the same model and confidence as
the published sigma's, the noise's scale read with it), about 0.01 kn/sqrt(h)
over three hours of steady water. A smooth tidal stream hardly shows in the
residuals (it aliases into k and d, which alternate leg by leg), so the
covariance also counts the cubic and quartic terms a semidiurnal stream with
the fitted slope and curvature would have (``tidal_remainder``). A step (a
current band's edge) reads small in time order and large in the sum of squares:
where the residuals' excess over the sensors is significant (``EXCESS_SIGMAS``)
the larger of the two walks is counted.

The sensors' part, each instrument on its own axis. A block's triangle carries
the GNSS's noise on both axes, the log's along the water track and the
compass's across it (``sensor_covariances``). The weights share the two evenly
between the axes; the covariance keeps each where it lies, because on gentle
course changes k is read from the legs' difference across the water track (the
compass's axis) and d from their difference along it (the log's). Each part is
scaled to what the residuals show on its own axis where that is quieter than
its model, never wider (``_instrument_scales``): the params' compass noise per
fix is mostly wave yaw, a swing of a few seconds that a minute's block averages
out faster than the white noise the model takes it for (on the simulator's
realistic seaway the residuals' reduced chi-square is about 0.57 across the
water track and 0.83 along it), and with the compass's model width k's sigma was
about 1.3 times its errors on the ordinary passage. The whole sensors' part
scaled to the residuals' chi-square over both axes had put a beat's first tacks'
offset 2.5-2.9 sigma off: one scale for both axes narrows the log's part by the
compass's quietness. Each axis once carried the log's and the compass's
variance summed, a margin that hid the pull below (tools/bench/NOTES.md).

The readings' own noise. m is measured, not known: the log's noise lies in it
along the water track and the compass's across it, tr(M) per block. Noise in a
regressor pulls its coefficient toward zero (regression dilution): the sum of
squares grows with k^2 sum w tr(M), so plain least squares trades a little of k
for it. Where only a small course change separates k from the current, that
pull is of the order of k's own sigma (three hours of legs 20 deg apart: 0.003
low at a sigma of 0.003, tests/test_current_calibration_fit.py). The fit takes
the noise's expected share off its objective, k^2 sum w tr(M) with tr(M) the
params' block model scaled down to the residuals where they show the sensors
quieter (corrected least squares: Fuller, "Measurement Error Models", 1987,
sect. 1.1 and 3.1; Nakamura, "Corrected score function for errors-in-variables
models", Biometrika 77, 1990; from memory). Neither d nor the current is
pulled: a rotation keeps |R(d) dm|, and the current does not multiply m.

Feeding the filter. A fit whose (k, d) covariance Sigma is smaller than the
filter's own marginal P_kd is fused as a measurement of (k, d) with
R = (Sigma^-1 - P_kd^-1)^-1: only the information the filter does not hold
yet, so the filter's (k, d) covariance becomes Sigma (no data counted twice
across overlapping windows), and the current moves with it through the
filter's cross-covariance. The fusion step is the same gated Joseph update
(``fusion.fuse``). Until a block leaves the window (``FitResult.whole``) the fit
holds everything the filter learnt its calibration from, so it replaces the
filter's (k, d) and their covariance instead, wider or narrower
(``Control._take_whole_fit``): a longer window in water walking faster than the
first blocks showed is honestly wider, and taking only narrower fits would
keep the first, overconfident one.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass

import numpy as np

from .params import CurrentParams
from .walk import NOISE_SCALES, Series, WalkFit, fit_walk

S_PER_H = 3600.0
CURRENT_TERMS = 3  # c0, c1 t, c2 t^2 per axis
MODEL_ERROR_ITERATIONS = 8  # refits while the model error read from the residuals settles (a few)
TIDAL_RAD_PER_H = 2.0 * math.pi / 12.4206  # M2, the principal lunar semidiurnal constituent (see tidal_remainder)
RESIDUAL_WALK_MIN_BLOCKS = 20  # fewer: the walk as the sum of squares reads it (a window of 13 blocks read 0.08-0.37
                               # kn/sqrt(h) of a 0.25 walk from its residuals' order, the noise traded against it)
RESIDUAL_WALK_CEILING = 400.0  # the covariance's walk is read up to 20 x the params' (in kn/sqrt(h), 5 kn/sqrt(h))
EXCESS_SIGMAS = 3.0  # the residuals' chi-square against the sensors alone this many of its sds above its dof: an excess


@dataclass(frozen=True, slots=True)
class Block:
    """One steady block: its mid time (s), mean ground velocity and mean water-velocity reading (kn), speed, fixes."""

    t_s: float
    g: tuple[float, float]
    m: tuple[float, float]
    speed_kn: float
    fixes: int


@dataclass(frozen=True, slots=True)
class FitResult:
    """(k, d) from the window's blocks with their covariance (d in rad), and how well the model fitted."""

    k: float
    d_rad: float
    cov: np.ndarray           # 2 x 2, [k, d]
    chi2_reduced: float       # of the block residuals
    blocks: int
    heading_spread_deg: float  # largest direction difference between the window's water-velocity readings
    water_walk_kn_per_sqrt_h: float  # per axis: the current's walk over the window as the fit read it (with the params' as prior)
    whole: bool = False       # the window still holds every block since the fit began (none dropped off its start)
    covariance_walk_kn_per_sqrt_h: float = 0.0  # per axis: the walk the covariance counts, as the residuals show it


def spread_deg(blocks: list[Block]) -> float:
    """The largest difference of direction between the blocks' water-velocity readings."""
    dirs = np.degrees(np.arctan2([b.m[0] for b in blocks], [b.m[1] for b in blocks]))
    return float(np.max(np.abs((dirs[:, None] - dirs[None, :] + 180.0) % 360.0 - 180.0))) if len(blocks) else 0.0


class CalibrationFit:
    """Steady blocks over a sliding window, and the batch fit of k and d (see the module doc)."""

    def __init__(self, params: CurrentParams, prior: tuple[float, float, float, float]) -> None:
        self.params = params
        self.prior = prior  # k0, d0 rad, sigma_k0, sigma_d0 rad
        self.blocks: deque[Block] = deque()
        self._reset_block()
        self._last_t: float | None = None
        self.last_fit_t: float | None = None
        self.last: FitResult | None = None
        self.dropped = False  # a block has left the window: the filter has learnt from more than the window holds

    def _reset_block(self, t: float | None = None) -> None:
        self._t0 = t
        self._n = 0
        self._g = [0.0, 0.0]
        self._m = [0.0, 0.0]
        self._s = 0.0

    def interrupt(self) -> None:
        """A turn, a held or rejected fix: the block under way is not steady; start again."""
        self._reset_block()

    def add(self, t: float, g: tuple[float, float], speed_kn: float, water_dir_deg: float) -> None:
        """One fused fix of steady sailing: its ground velocity, log reading and water-track direction reading."""
        p = self.params
        if self._last_t is not None and t - self._last_t > 0.25 * p.calibration_block_s:
            self._reset_block()                                             # a gap (an outage): not one block
        self._last_t = t
        if self._t0 is None:
            self._reset_block(t)
        a = math.radians(water_dir_deg)
        self._n += 1
        self._g[0] += g[0]
        self._g[1] += g[1]
        self._m[0] += speed_kn * math.sin(a)                               # s u(psi + lambda)
        self._m[1] += speed_kn * math.cos(a)
        self._s += speed_kn
        span = t - self._t0
        if span < p.calibration_block_s:
            return
        if self._n >= 5:
            n = self._n
            self.blocks.append(Block(self._t0 + 0.5 * span, (self._g[0] / n, self._g[1] / n),
                                     (self._m[0] / n, self._m[1] / n), self._s / n, n))
        self._reset_block()
        keep_s = p.calibration_fit_window_h * S_PER_H
        while self.blocks and self.blocks[0].t_s < t - keep_s:
            self.blocks.popleft()
            self.dropped = True

    def due(self, t: float) -> bool:
        return self.last_fit_t is None or t - self.last_fit_t >= self.params.calibration_fit_every_s

    def fit(self, t: float, k_start: float, d_start: float) -> FitResult | None:
        """Gauss-Newton over the window's blocks from (k_start, d_start); None with too few blocks.

        The model error (what the window's quadratic cannot follow of the current's walk) is read from
        the fit's residuals and the params' walk together (``shrunk_walk``); the blocks' weights follow
        it, the prior on the current's slope and curvature the larger of it and the params' walk (see
        the module doc), and the fit is repeated until the walk settles (a few times). The covariance
        counts the walk the residuals show in time (``_covariance_walk``) and a tidal stream's remainder.
        """
        self.last_fit_t = t
        blocks = list(self.blocks)
        n_cur = 2 * CURRENT_TERMS
        if len(blocks) < n_cur or spread_deg(blocks) < self.params.calibration_min_spread_deg:
            return None  # on one course k and d are not observable: the fit would only trade them for the current
        span_s = blocks[-1].t_s - blocks[0].t_s
        readings = self.reading_variances(blocks)                           # tr(M) of each block
        sensor = np.tile(self.sensor_variances(blocks, k_start, readings), 2)  # per residual: east, then north
        dof = max(1, len(sensor) - n_cur - 2)
        walk0 = self.params.current_walk_kn_per_sqrt_h ** 2                 # the params' walk, kn^2/h
        settled, k, d, readings_scale = walk0, k_start, d_start, 1.0
        for _ in range(MODEL_ERROR_ITERATIONS):
            walk, scale_was = settled, readings_scale
            v = sensor + quadratic_residual_var(walk, span_s)
            trend_w = self._walk_weights(max(walk, walk0), span_s)            # never tighter than the params'
            w = 1.0 / v[:len(blocks)]
            solved = self._gauss_newton(blocks, w, trend_w, k, d, readings_scale * float(np.sum(w * readings)))
            if solved is None:
                return None
            k, d, A, res, J, c = solved
            read = excess_variance(res, sensor, dof) / quadratic_residual_var(1.0, span_s)
            settled = shrunk_walk(walk0, self.params.calibration_walk_prior_dof, read, dof)
            chi2_red = float(np.sum(res ** 2 / v)) / dof
            readings_scale = min(1.0, chi2_red)                               # the readings as noisy as the residuals show
            if abs(settled - walk) <= 0.01 * walk + 1e-9 and abs(readings_scale - scale_was) <= 0.01:
                break
        walk_shown = self._covariance_walk(blocks, res, sensor, walk, dof)
        # the sensors' part: each instrument on its own axis, quieter where the residuals on that axis show it
        # (see the module doc). A (for the sandwich) is J'WJ without the readings' correction (a small term on
        # k's diagonal)
        scales = self._instrument_scales(blocks, res, k_start, quadratic_residual_var(walk, span_s), dof)
        cov = walk_consider_cov(A, J, v, self.sensor_covariances(blocks, k_start, scales), walk_shown, blocks,
                                tidal_remainder(blocks, c))
        self.last = FitResult(k, d, cov[n_cur:, n_cur:] * max(1.0, chi2_red), chi2_red, len(blocks),
                              spread_deg(blocks), math.sqrt(walk), not self.dropped, math.sqrt(walk_shown))
        return self.last

    def _instrument_scales(self, blocks: list[Block], res: np.ndarray, k: float, model_error: float, dof: int
                           ) -> tuple[float, float]:
        """How noisy the log and the compass were over the window against their model, at most 1: the residuals'
        reduced chi-square along each block's water track (the log's axis) and across it (the compass's), each
        against the GNSS's variance, the model error's and that instrument's. The degrees of freedom are shared
        evenly between the axes. Never above 1: where the residuals are noisier than the model the whole
        covariance is widened by their chi-square (``fit``), and a leg's systematic errors are not in them."""
        nb = len(blocks)
        ue, un = water_track_units(blocks)
        re, rn = res[:nb], res[nb:2 * nb]
        gnss = self.gnss_variances(blocks) + model_error
        along, across = self.reading_parts(blocks)
        half = max(1.0, 0.5 * dof)
        chi_along = float(np.sum((re * ue + rn * un) ** 2 / (gnss + k * k * along))) / half
        chi_across = float(np.sum((re * un - rn * ue) ** 2 / (gnss + k * k * across))) / half
        return min(1.0, chi_along), min(1.0, chi_across)

    def _covariance_walk(self, blocks: list[Block], res: np.ndarray, sensor: np.ndarray, walk: float, dof: int
                         ) -> float:
        """The walk (kn^2/h) the covariance counts (see the module doc).

        With fewer than ``RESIDUAL_WALK_MIN_BLOCKS`` blocks: ``walk``, the sum of squares' read (too few
        residuals to read the walk and the noise apart). Else the residuals' order in time, and where their
        excess over the sensors is significant the larger of that and ``walk``: a step (a current band's
        edge) is no random walk, reads small in time order and large in the sum of squares.
        """
        if len(blocks) < RESIDUAL_WALK_MIN_BLOCKS:
            return walk
        shown = self._residual_walk(blocks, res, sensor)
        walk_shown = shown.upper * S_PER_H
        if float(np.sum(res ** 2 / sensor)) > dof + EXCESS_SIGMAS * math.sqrt(2.0 * dof):
            walk_shown = max(walk_shown, walk)
        return walk_shown

    def _residual_walk(self, blocks: list[Block], res: np.ndarray, sensor: np.ndarray) -> WalkFit:
        """The walk and the sensors' scale the blocks' residuals show in time (``walk.fit_walk``: a local level
        model, each block a flow), the walk the upper end of its interval at ``water_walk_confidence``.

        What the fit's current cannot follow of the water's walk makes neighbouring residuals alike and far ones
        apart; the sensors' noise is independent from block to block. The residuals' sum of squares alone cannot
        tell the two apart (``excess_variance`` reads the walk only beside noise as modelled), their order in time
        can: over three hours of steady water the interval's upper end lies near 0.01 kn/sqrt(h) where the excess
        reads about 0.06 (tests/test_current_calibration_fit.py).
        """
        nb, half = len(blocks), 0.5 * self.params.calibration_block_s
        t = np.array([b.t_s for b in blocks])
        series = Series(t - half, t + half, res.reshape(2, nb), sensor.reshape(2, nb))
        ceiling = RESIDUAL_WALK_CEILING * self.params.current_walk_kn_per_sqrt_h ** 2 / S_PER_H
        return fit_walk(series, ceiling, self.params.water_walk_confidence, NOISE_SCALES)

    def _gauss_newton(self, blocks: list[Block], w: np.ndarray, walk_w: np.ndarray, k: float, d: float,
                      dilution: float) -> tuple[float, float, np.ndarray, np.ndarray, np.ndarray] | None:
        """(k, d, the normal matrix J'WJ, the blocks' residuals east then north, the blocks' rows of J) at the
        solution; None if singular. ``dilution``: sum w tr(M) over both axes of every block, the readings' noise
        in the sum of squares per unit k^2 (the module doc, "The readings' own noise"); 0: plain least squares."""
        n_cur = 2 * CURRENT_TERMS
        t_mid = 0.5 * (blocks[0].t_s + blocks[-1].t_s)
        tau = np.array([(b.t_s - t_mid) / S_PER_H for b in blocks])
        G = np.array([b.g for b in blocks])
        M = np.array([b.m for b in blocks])
        k0, d0, sk0, sd0 = self.prior
        nb = len(blocks)
        n_walk = len(walk_w)
        for _ in range(4):
            cd, sd = math.cos(d), math.sin(d)
            Re = M[:, 0] * cd + M[:, 1] * sd                                # R(d) m, east
            Rn = -M[:, 0] * sd + M[:, 1] * cd                               # R(d) m, north
            J = np.zeros((2 * nb + 2 + n_walk, n_cur + 2))
            r = np.zeros(2 * nb + 2 + n_walk)
            for j in range(CURRENT_TERMS):                                  # d g / d c_j = t^j
                J[:nb, 2 * j] = tau ** j
                J[nb:2 * nb, 2 * j + 1] = tau ** j
            J[:nb, n_cur], J[nb:2 * nb, n_cur] = Re, Rn                     # d g / d k = R(d) m
            J[:nb, n_cur + 1], J[nb:2 * nb, n_cur + 1] = k * Rn, -k * Re    # d g / d d = k R'(d) m
            W = np.concatenate([w, w, [1.0 / sk0 ** 2, 1.0 / sd0 ** 2], walk_w])
            # residuals at the current (k, d), with the current's coefficients solved jointly: linear in c
            r[:nb] = G[:, 0] - k * Re
            r[nb:2 * nb] = G[:, 1] - k * Rn
            r[2 * nb], r[2 * nb + 1] = k0 - k, d0 - d
            J[2 * nb, n_cur], J[2 * nb + 1, n_cur + 1] = 1.0, 1.0
            for i, col in enumerate(range(2, n_cur)):                       # c1, c2 ~ 0: the walk's prior
                J[2 * nb + 2 + i, col] = 1.0
            # the current columns enter with the full coefficients (r excludes c): solve for [c, dk, dd]
            A = J.T @ (W[:, None] * J)
            b = J.T @ (W * r)
            # corrected least squares: m carries its own noise, which makes sum w |g - c - k R m|^2 grow with k^2
            # by k^2 sum w tr(M); taking it off the objective takes the pull toward a smaller k off the estimate
            A_corr = A.copy()
            A_corr[n_cur, n_cur] -= dilution
            b[n_cur] += dilution * k
            try:
                sol = np.linalg.solve(A_corr, b)
            except np.linalg.LinAlgError:
                return None
            k, d = k + float(sol[n_cur]), d + float(sol[n_cur + 1])
            if abs(sol[n_cur]) < 1e-7 and abs(sol[n_cur + 1]) < 1e-8:
                break
        # residuals of the blocks at the solution (c from the last solve)
        c = sol[:n_cur]
        cd, sd = math.cos(d), math.sin(d)
        Re, Rn = M[:, 0] * cd + M[:, 1] * sd, -M[:, 0] * sd + M[:, 1] * cd
        ce = sum(c[2 * j] * tau ** j for j in range(CURRENT_TERMS))
        cn = sum(c[2 * j + 1] * tau ** j for j in range(CURRENT_TERMS))
        return k, d, A, np.concatenate([G[:, 0] - ce - k * Re, G[:, 1] - cn - k * Rn]), J[:2 * nb], c

    def _walk_weights(self, walk: float, span_s: float) -> np.ndarray:
        """Weights of the prior c1 = c2 = 0 (per axis), from how far the current may walk over the window.

        A random walk of sigma_w kn/sqrt(h) (``walk`` = sigma_w^2) moves about sigma_w sqrt(W) over a
        window of W h: a slope c1 ~ sigma_w / sqrt(W) and a curvature c2 (W/2)^2 ~ sigma_w sqrt(W),
        c2 ~ 4 sigma_w / W^1.5. A short window (right after the first tack) then holds the current
        nearly constant instead of letting the polynomial mimic any calibration; over hours the terms
        are free.
        """
        sw = max(math.sqrt(walk), 1e-3)
        span_h = max(span_s / S_PER_H, 0.1)
        s1, s2 = sw / math.sqrt(span_h), 4.0 * sw / span_h ** 1.5
        return np.array([1.0 / s1 ** 2, 1.0 / s1 ** 2, 1.0 / s2 ** 2, 1.0 / s2 ** 2])  # c1e, c1n, c2e, c2n

    def sensor_variances(self, blocks: list[Block], k: float, readings: np.ndarray | None = None) -> np.ndarray:
        """The nominal variance per axis of each block's triangle from the sensors alone, with the effective sample count.

        The GNSS's per axis, and half of k^2 tr(M) (``readings``, the blocks' ``reading_variances``): the log's
        error lies along the water track and the compass's across it, so averaged over the two axes each carries
        half of their sum.
        """
        if readings is None:
            readings = self.reading_variances(blocks)
        return self.gnss_variances(blocks) + 0.5 * k * k * readings

    def gnss_variances(self, blocks: list[Block]) -> np.ndarray:
        """The variance per axis of each block's mean ground velocity (kn^2): the GNSS's, independent from fix to fix."""
        return np.array([self.params.gnss_velocity_sigma_kn ** 2 / b.fixes for b in blocks])

    def reading_variances(self, blocks: list[Block]) -> np.ndarray:
        """tr(M) of each block: the variance of its mean water-velocity reading m (kn^2, along plus across),
        the log's along the water track and the compass's across it, with the effective sample count."""
        along, across = self.reading_parts(blocks)
        return along + across

    def sensor_covariances(self, blocks: list[Block], k: float, scales: tuple[float, float] = (1.0, 1.0)
                           ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Each block's 2 x 2 covariance of its triangle from the sensors alone, as (east, north, east-north):
        the GNSS's on both axes, k^2 times the log's along the block's water track and the compass's across it.

        The weights share them out evenly between the axes (``sensor_variances``); the covariance keeps each on
        its own axis, because on small course changes k is read from the legs' difference across the water
        track (the compass's axis) and d from the difference along it (the log's): the even share gave k the
        mean of the two noises and d the same (tools/bench/NOTES.md, "Each instrument on its own axis")."""
        gnss = self.gnss_variances(blocks)
        along, across = self.reading_parts(blocks)
        along, across = scales[0] * k * k * along, scales[1] * k * k * across
        ue, un = water_track_units(blocks)
        return (gnss + along * ue * ue + across * un * un, gnss + along * un * un + across * ue * ue,
                (along - across) * ue * un)

    def reading_parts(self, blocks: list[Block]) -> tuple[np.ndarray, np.ndarray]:
        """Each block's variance of its mean water-velocity reading (kn^2) along the water track (the log's) and
        across it (the compass's, times the speed squared), with the effective sample count."""
        p = self.params
        along, across = np.empty(len(blocks)), np.empty(len(blocks))
        for i, b in enumerate(blocks):
            span = max(p.calibration_block_s, b.fixes * 1e-3)
            # the mean of n fixes: the independent part / n; a Gauss-Markov part sigma^2 2 tau / T (N_eff = T / 2 tau)
            log = (p.log_sigma_kn ** 2 / b.fixes
                   + p.log_correlated_sigma_kn ** 2 * min(1.0, 2.0 * p.noise_correlation_s / span))
            compass = (math.radians(p.heading_sigma_deg) ** 2 / b.fixes
                       + math.radians(p.heading_correlated_sigma_deg) ** 2 * min(1.0, 2.0 * p.heading_correlation_s / span))
            along[i], across[i] = log, b.speed_kn ** 2 * compass
        return along, across


def water_track_units(blocks: list[Block]) -> tuple[np.ndarray, np.ndarray]:
    """Each block's unit vector (east, north) along its mean water-velocity reading."""
    m = np.array([b.m for b in blocks])
    norm = np.maximum(np.hypot(m[:, 0], m[:, 1]), 1e-9)
    return m[:, 0] / norm, m[:, 1] / norm


def quadratic_residual_var(walk: float, span_s: float) -> float:
    """The mean square (kn^2, per axis) a random walk of ``walk`` kn^2/h leaves after a least-squares quadratic over the window.

    For a random walk of sigma_w kn/sqrt(h) over W hours it is about sigma_w^2 W / 23 (Monte Carlo over
    Brownian paths, this project's own computation). Each block's variance carries it, with the walk
    read from the window (``fit``). The weights treat the wander as independent from block to block,
    which it is not; the covariance counts it as one path (``walk_consider_cov``).
    """
    return walk * (span_s / S_PER_H) / 23.0


def walk_consider_cov(A: np.ndarray, J: np.ndarray, v: np.ndarray,
                      sensor: tuple[np.ndarray, np.ndarray, np.ndarray], walk: float,
                      blocks: list[Block], unmodelled: np.ndarray | None = None) -> np.ndarray:
    """The fit's covariance with the current's walk counted as what it is: one path shared by all blocks.

    The weights (``v``) count the walk the quadratic cannot follow as a variance of its own in each block,
    independent from block to block. It is not: a walk's later blocks share every earlier step, and a
    stream turning over the window leaves a smooth error that the offset's column, alternating leg by leg,
    picks up (the tidal box: the offset 0.1-0.16 deg off at 0.05 deg, the same sign in every seed). The
    estimate stays the weighted one; its covariance is the sandwich H Omega H' of the estimate's
    sensitivity to the blocks, H = A^-1 J' W, over the blocks' true covariance Omega: the sensors'
    (independent) plus a random walk of ``walk`` kn^2/h per axis, q min(s, t) (consider covariance:
    the error an unestimated, modelled term leaves in a weighted fit, Bierman, "Factorization Methods
    for Discrete Sequential Estimation", 1977, ch. VI; from memory), and the prior on k and d's part
    A^-1 A_prior A^-1 (the prior on the current's slope and curvature only regularises: their spread is
    the walk's, already counted). The walk's part is summed over its steps, each moving every later
    block: q sum_j dt_j (sum_{i >= j} h_i)(...)'.
    """
    nb = len(blocks)
    Ai = np.linalg.inv(A)
    WJ = J / v[:, None]
    H = Ai @ WJ.T                                                           # p x 2nb: d estimate / d residual
    prior_info = np.zeros_like(A)                                           # the prior on k and d: its own error;
    prior_info[-2:, -2:] = (A - J.T @ WJ)[-2:, -2:]                         # the slope's and curvature's is the walk's
    He, Hn = H[:, :nb], H[:, nb:]                                           # the east residuals', the north's
    ee, nn, en = sensor                                                     # each block's 2 x 2 (sensor_covariances)
    cov = (Ai @ prior_info @ Ai                                             # the prior's part, the sensors'
           + (He * ee) @ He.T + (Hn * nn) @ Hn.T + (He * en) @ Hn.T + (Hn * en) @ He.T)
    t_h = np.array([b.t_s for b in blocks]) / S_PER_H
    steps = np.diff(t_h, prepend=t_h[0])                                    # the walk's step before each block
    for axis in (slice(0, nb), slice(nb, 2 * nb)):
        later = np.cumsum(H[:, axis][:, ::-1], axis=1)[:, ::-1]             # sum_{i >= j} h_i
        cov += walk * (later * steps) @ later.T
    if unmodelled is not None:                                              # terms the model leaves out, at 1 sigma
        moved = H @ unmodelled
        cov += moved @ moved.T
    return cov


def tidal_remainder(blocks: list[Block], c: np.ndarray) -> np.ndarray:
    """The fitted current's cubic and quartic terms had it been a semidiurnal tidal stream: columns (2 nb x 4) of
    the data those terms would add, each at one sigma (east cubic, north cubic, east quartic, north quartic).

    A stream c(t) = A cos(omega t + phi) about the window's middle has slope c1 = -A omega sin(phi) and
    curvature c2 = -A omega^2 cos(phi) / 2, and so a cubic term c3 = -omega^2 c1 / 6 and a quartic
    c4 = -omega^2 c2 / 12 (its Taylor series). The quadratic cannot follow them, the residuals hardly show
    them (they alias into k and d, which alternate leg by leg), so the covariance counts them as unmodelled
    terms of that size, at the principal lunar semidiurnal period (M2, 12.42 h, NOAA's tidal constituent
    tables; from memory), the fastest common one. A steady current's fitted slope and curvature are noise,
    and so are these.
    """
    t_mid = 0.5 * (blocks[0].t_s + blocks[-1].t_s)
    tau = np.array([(b.t_s - t_mid) / S_PER_H for b in blocks])
    nb, w2 = len(blocks), TIDAL_RAD_PER_H ** 2
    out = np.zeros((2 * nb, 4))
    for axis in (0, 1):
        rows = slice(axis * nb, (axis + 1) * nb)
        out[rows, axis] = w2 * abs(c[2 + axis]) / 6.0 * tau ** 3
        out[rows, 2 + axis] = w2 * abs(c[4 + axis]) / 12.0 * tau ** 4
    return out


def excess_variance(res: np.ndarray, v: np.ndarray, dof: int) -> float:
    """The variance shared by all residuals beyond their own ``v``: Paule-Mandel, chi-square = dof, never below 0.

    Paule and Mandel ("Consensus values and weighting factors", J. Res. Natl. Bur. Stand. 87, 1982)
    choose s so that sum r^2 / (v + s) equals the degrees of freedom. F(s) = sum r^2 / (v + s) - dof is
    convex and decreasing, so Newton's steps from 0 climb to the root without overshooting; where F(0)
    <= 0 the sensors explain the residuals and the excess is 0.
    """
    s = 0.0
    for _ in range(50):
        weighted = res ** 2 / (v + s)
        excess = float(np.sum(weighted)) - dof
        if excess <= 1e-9 * dof:
            break
        s += excess / float(np.sum(weighted / (v + s)))
    return s


def shrunk_walk(walk0: float, prior_dof: float, read: float, dof: int) -> float:
    """The walk (kn^2/h) from the params' value and the one the residuals read, weighted by their degrees of freedom.

    A variance estimated from nu degrees of freedom is itself uncertain (relative sd sqrt(2 / nu)): the
    conjugate update of a normal variance with a scaled inverse chi-square prior (nu0, s0^2) gives
    (nu0 s0^2 + nu s^2) / (nu0 + nu) (Gelman et al., "Bayesian Data Analysis", 3rd ed., sect. 3.3;
    from memory). The params' walk counts as ``calibration_walk_prior_dof`` residuals: a fit of a few
    blocks stays near it, one over hours of steady water or of a fast-walking stream reads its own.
    """
    return (prior_dof * walk0 + dof * read) / (prior_dof + dof)
