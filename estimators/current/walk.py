"""How fast the water really walks, and how steadily it changes: the walk and the lag behind the published sigma,
read from the measured current.

Theory of operation
-------------------
The filter lets the current walk at ``current_walk_kn_per_sqrt_h`` per axis (its
Q): a strong tidal stream turning. Where the water walks slower, a filter that
allows a change that does not happen carries about twice the error variance it
makes (steady-state random walk: error variance sqrt(qR)/2 against a covariance
sqrt(qR)), so two published sigmas covered the truth at 0.99-1.00 of fixes where
0.95 is meant. A smaller Q changes the estimate, and did harm (the README's
trials), so the filter keeps its Q, its P and its gain; beside P the estimator
carries the covariance it publishes, P_pub: the error covariance of the same
filter, with the same gain, if the water walks at the rate q_pub read here
(``estimator``). This module reads q_pub, kn^2/s per axis.

Data. Each fused fix of steady sailing (no turn) measures the current,
c = g - k R(d) m: the ground velocity g less the calibrated water velocity (m = s
u(psi + lambda), the log reading along the compass's water track; R(d) m turned
by the offset). Per block of ``water_walk_block_s`` the fixes' g and m are
averaged, and each block's noise variance per axis is the mean of its fixes' R
over their number: R carries each noise's long-run variance (its correlated part
counted by the effective sample count, ``model.measurement_cov``), so R / n is
the variance of the block's mean. A gap (a turn, a held or rejected fix, an
outage) closes the block under way. The current is made from the raw means with
the filter's latest k and d whenever the walk is read, so a calibration fit moves
the whole window together and puts no step into it.

Model. Per axis a local level model (Harvey, "Forecasting, structural time
series models and the Kalman filter", 1989, ch. 3 and 4, from memory): the
current a random walk of q kn^2/s, each block's mean its time average plus noise
of known variance h_b. A mean over a block of T s is a "flow" (temporal
aggregation, Harvey 1989 ch. 6, from memory), carried exactly: with the level m
at the block's start (mean mu, variance P), the block's mean y = m + a + e and the
level at its end m + b, where over the block a (the walk's mean) and b (its
increment) have var a = q T / 3, var b = q T, cov(a, b) = q T / 2::

    F = P + q T / 3 + h              innovation variance, v = y - mu
    mu <- mu + (P + q T / 2) / F v   the level at the block's end
    P  <- P + q T - (P + q T / 2)^2 / F
    P  <- P + q gap                  to the next block's start

The first block starts the level (diffuse: mu = y, P = q T / 3 + h at its end)
and adds nothing to the likelihood. The log-likelihood is the prediction error
decomposition, -1/2 sum(ln 2 pi F + v^2 / F) (Harvey 1989 ch. 3, from memory);
both axes share q (the filter's Q is the same on both), so their
log-likelihoods add. It is maximised over q in [0, the configured walk] (every rate of a
grid in ln q at once; numpy's cost is per step, hardly per rate).

The noise. R is a model of the instruments' noise, set for a seaway; in
calmer water (or with better instruments) the means scatter less than R says,
and a covariance built on R stays wider than the errors (the simulator's
realistic beat: 0.75 of R's). So the means' variance is read as well, as h_b
times a scale s in [1/4, 1] (``NOISE_SCALES``), by maximum likelihood jointly
with q: a walk makes neighbouring means alike and far ones apart, noise does
not, so the two are told apart by the means' order. q's interval is then the
profile likelihood's (maximised over s at each q; Wilks's theorem holds for it
too), and P_pub's update takes R s. Never above 1: in a rougher sea than R
says the windowed NIS test says so (``degraded``), and P_pub stays within P.

Trend. A tidal stream that turns smoothly, or a current rising steadily into a
jet, is no random walk: read by the local level its hour of means shows a large
walk (the published sigma too wide), while the filter, whose walk model has no
slope, lags a steady change by about its time constant times the slope (an error
no walk describes: too narrow). So the same means are also read as a local linear
trend (Harvey 1989 ch. 2 and 4, from memory): per axis a level that walks at q
and moves with a slope b, the slope itself walking at q_b (kn^2/s^3). Over a
block of T s from the state (m, b), with W and V the level's and the slope's
Brownian motions, the mean is y = m + b T / 2 + (the average of W and of the
integral of V) + e, the end (m + b T + W(T) + int V, b + V(T)), and the noise
moments, integrated from their covariance functions (min(s, t) for W, and for
the integral of V s^2 t / 2 - s^3 / 6 at s <= t), are::

    var(mean) = q T / 3 + q_b T^3 / 20
    cov(level_T, mean) = q T / 2 + q_b T^3 / 8      cov(slope_T, mean) = q_b T^2 / 6
    var(level_T) = q T + q_b T^3 / 3   cov(level_T, slope_T) = q_b T^2 / 2   var(slope_T) = q_b T

(a gap is the ordinary trend step). Both states start diffuse (variances
``DIFFUSE_VAR``, far beyond any water) and the first two blocks' terms, which only
place them, are left out (de Jong, "The diffuse Kalman filter", Ann. Stat. 19,
1991, from memory; the tests hold the differences against the
restricted likelihood of the stacked means). q by maximum likelihood over a
grid in ln q (1/8 decade), profiled over q_b (``SLOPE_WALKS``: 0, or a slope that
changes over a quarter of an hour to nine hours) and the noise's scale, its
interval as below. Its slope at the window's end is the maximum's.

The trend has two more states to place, so over steady water its walk's
interval is wider than the level's (the beat's blocks, seed 1: an upper end of
0.045-0.095 kn/sqrt(h) where the local level reads 0.024-0.074). So the walk
published is the trend's only where its slope is evident (Wald's test,
b' V^-1 b over both axes above chi2_2 at ``water_walk_confidence``), else the
local level's as before.

Lag. The filter's mean error behind a current that changes at b is L b, L the
"lag per unit slope" (2 x 2, seconds), carried beside P_pub from zero at each
start: a prediction over dt moves the water on, L <- L - dt I; a fused fix moves
the estimate by its gain, L <- (I - K_c) L (K_c the gain's current rows; H's
current columns are I, and the calibration rows of L stay 0, the consider
states' gain being 0). About minus the filter's time constant in steady
sailing (75 s with the realistic sensor model's R), more while fixes are held
(a turn, an outage). The slope is read with an error, so the published
covariance of the current is P_pub's plus L E[b b'] L', E[b b'] = b_hat b_hat'
+ V (the slope's second moment at the window's end): the lag as a mean error
counted in the mean square (Bar-Shalom et al. 2001 sect. 5.4 measure
consistency by that mean square, from memory). It is 0 until the walk is read.

Published: the upper end of the likelihood-ratio interval {q : 2 (l(q_hat) -
l(q)) <= chi2_1(c)} at c = ``published_walk_confidence`` (Wilks, "The large-sample
distribution of the likelihood ratio for testing composite hypotheses", Ann.
Math. Stat. 9, 1938), never more than the configured walk (the filter's own
model), and the configured walk itself while the window holds fewer than
``water_walk_min_blocks`` blocks. At c = 0.5 the end lies a quarter of a unit of
log-likelihood below the maximum: a little above the likeliest walk, which keeps
a window that reads no walk at all (q_hat = 0, a boundary) from publishing none.
The sigma is a plug-in for an error covariance, so its rate is the one whose
published sigmas cover the truth as often as they say over Monte-Carlo runs of
the realistic sensor model (the README's table: at 0.95 the current's own
errors' variance was 0.81-0.96 of what it published, the tidal box's drift
within 2 sigma at 0.974); the calibration fit's walk (``water_walk_confidence``,
0.95) keeps its margin, because the fit's sigma is what 'calibrated' is held to.

Read again as each block closes (once a minute), not at every fix: one pass
over the window's blocks for every rate of the grid at once, the trend's (50
level walks x 5 slope walks x 7 scales) and, where its slope is not evident,
the local level's: about 6 and 3 ms a minute
over an hour's blocks (CPU, the build machine at a load of 4 to 6; 7 and 6 ms
before their arrays were all made contiguous, tools/bench/NOTES.md).
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass

import numpy as np

from estimators.angles import turned
from estimators.fusion import chi2_quantile

from .params import S_PER_H, CurrentParams

Lag = tuple[tuple[float, float], tuple[float, float]]

MIN_BLOCK_FIXES = 5        # a block with fewer fixes (a short stretch between turns) is dropped
GRID_DECADES = 6.0         # the grid in ln q spans the configured walk's rate down to 1e-6 of it (and 0)
GRID_POINTS = 97           # 1/16 decade (15 %) apart: the interval's ends interpolated to about 1 %
GAP_TOLERANCE_S = 1e-3     # a fix whose interval starts later than the last one added follows a gap
NOISE_SCALES = np.logspace(math.log10(0.25), 0.0, 13)  # the means' noise over R's: 1/4 to 1, 12 % apart
TREND_LEVEL_POINTS = 49    # the trend's level walks: 1/8 decade apart (the interval's end interpolated, as above)
SLOPE_WALKS = np.concatenate([[0.0], np.logspace(-9.0, -6.0, 4)])  # the slope's walk over the level's ceiling, s^-2
TREND_NOISE_SCALES = np.logspace(math.log10(0.25), 0.0, 7)          # 1/4 to 1, 26 % apart
NO_SLOPE = ((0.0, 0.0), (0.0, 0.0))
DIFFUSE_VAR = (1e2, 1.0)   # a diffuse start: level kn^2, slope (kn/s)^2 (far beyond any water; see trend_pass)


@dataclass(frozen=True, slots=True)
class WalkBlock:
    """One block of steady, fused fixes: its span (s), mean ground velocity and mean water reading m (kn,
    east and north), and the variance of those means per axis (kn^2) from the fixes' R."""

    t0_s: float
    t1_s: float
    g: tuple[float, float]
    m: tuple[float, float]
    h: tuple[float, float]


@dataclass(frozen=True, slots=True)
class WalkFit:
    """The walk's maximum-likelihood rate and its likelihood-ratio interval, kn^2/s per axis, within [0, ceiling]."""

    q_hat: float
    lower: float
    upper: float
    blocks: int
    noise_scale: float = 1.0  # the means' noise over what R says, maximum likelihood (1 where not read)


@dataclass(frozen=True, slots=True)
class Series:
    """Block means of the current on one or more axes: spans ``t0``, ``t1`` (s, per block), means ``y`` and
    their noise variances ``h`` (kn, kn^2; axes x blocks)."""

    t0: np.ndarray
    t1: np.ndarray
    y: np.ndarray
    h: np.ndarray


def level_loglik(q: np.ndarray, s: Series, noise_scale: np.ndarray | None = None) -> np.ndarray:
    """Log-likelihood of walks of rates ``q`` (kn^2/s, any number at once) given the block means ``s``, its axes'
    summed (see the module doc: each block a flow, the first diffuse); with ``noise_scale`` (as many as ``q``,
    pairwise) the means' noise variances are ``h`` times it."""
    shape = (s.y.shape[0], np.shape(q)[0])
    q = _per_axis(q, shape)                 # the state's and the rates' arrays alike: see trend_pass
    scale = np.ones(shape) if noise_scale is None else _per_axis(noise_scale, shape)
    span = s.t1 - s.t0
    gaps = np.maximum(0.0, s.t0[1:] - s.t1[:-1])
    mu = s.y[:, :1] + 0.0 * q                                       # the level at the first block's end
    P = q * (span[0] / 3.0) + s.h[:, :1] * scale
    log_sum = z_sum = None              # summed block after block, axis after axis: np.sum's order over them
    for b in range(len(span) - 1):
        walk_span = span[b + 1] * q                                 # q T
        P = P + gaps[b] * q                                         # the gap to this block's start
        F = P + (walk_span / 3.0 + s.h[:, b + 1:b + 2] * scale)     # var(y): level + the walk's mean + noise
        v = s.y[:, b + 1:b + 2] - mu
        gain = (P + 0.5 * walk_span) / F                            # cov(level at the end, y) / F
        log_sum = _rows_added(log_sum, np.log(2.0 * math.pi * F))
        z_sum = _rows_added(z_sum, v * v / F)
        mu = mu + gain * v
        P = P + walk_span - gain * gain * F
    if log_sum is None:
        return np.zeros(shape[1])
    return -0.5 * (log_sum + z_sum)


def fit_walk(s: Series, ceiling: float, confidence: float, noise_scales: np.ndarray = np.ones(1)) -> WalkFit:
    """The walk's rate (kn^2/s) shared by the axes of ``s``: maximum likelihood within [0, ``ceiling``] and the
    likelihood-ratio interval at ``confidence``, its ends clipped to that range; with the means' noise
    scaled by the best of ``noise_scales`` (the interval then from the profile likelihood over the scale).

    Every rate of a grid in ln q (and 0) and every scale at once; the maximum is the parabola's through the best
    point and its neighbours (in ln q, and in ln scale for the scale), an end of the interval the crossing
    interpolated in ln q between the points either side.
    """
    q = np.concatenate([[0.0], ceiling * np.logspace(-GRID_DECADES, 0.0, GRID_POINTS)])
    scales = np.asarray(noise_scales, dtype=float)
    grid = level_loglik(np.tile(q, len(scales)), s, np.repeat(scales, len(q))).reshape(len(scales), len(q))
    best, q_hat, lower, upper = _interval(q, grid.max(axis=0), ceiling, confidence)   # profiled over the scale
    scale_hat, _ = _vertex(scales, grid[:, best], int(np.argmax(grid[:, best])))
    return WalkFit(q_hat, lower, upper, s.y.shape[1], scale_hat)


def _interval(q: np.ndarray, ll: np.ndarray, ceiling: float, confidence: float) -> tuple[int, float, float, float]:
    """The grid's best point, the maximum (``_vertex``) and the likelihood-ratio interval's ends at ``confidence``
    within [0, ``ceiling``] (``_crossing``) of the (profile) log-likelihood ``ll`` over the rates ``q``."""
    best = int(np.argmax(ll))
    q_hat, l_hat = _vertex(q, ll, best)
    threshold = l_hat - 0.5 * chi2_quantile(confidence, 1)
    out = np.flatnonzero(ll < threshold)
    up, low = out[out > best], out[out < best]
    upper = _crossing(q, ll, threshold, up[0] - 1, up[0]) if up.size else ceiling
    lower = _crossing(q, ll, threshold, low[-1] + 1, low[-1]) if low.size else 0.0
    return best, q_hat, lower, max(upper, q_hat)


def _vertex(q: np.ndarray, ll: np.ndarray, i: int) -> tuple[float, float]:
    """The maximum of the parabola in ln q through points i - 1, i, i + 1 (the point itself at an end or at 0)."""
    if i < 1 or i + 1 >= len(q) or q[i - 1] <= 0.0:
        return float(q[i]), float(ll[i])
    x = np.log(q[i - 1:i + 2])
    a, b, c = np.polyfit(x, ll[i - 1:i + 2], 2)
    if a >= 0.0:
        return float(q[i]), float(ll[i])
    x_top = min(max(-b / (2.0 * a), x[0]), x[2])
    return float(math.exp(x_top)), float(max(ll[i], c - b * b / (4.0 * a)))


def _crossing(q: np.ndarray, ll: np.ndarray, level: float, i_in: int, i_out: int) -> float:
    """Where the log-likelihood crosses ``level`` between points i_in (at or above it) and i_out (below),
    linearly in ln q (0 counts as the grid's smallest rate over ten)."""
    qa, qb = (max(q[i], q[1] * 0.1) for i in (i_in, i_out))
    f = (ll[i_in] - level) / (ll[i_in] - ll[i_out])
    return float(math.exp(math.log(qa) + f * (math.log(qb) - math.log(qa))))


@dataclass(frozen=True, slots=True)
class TrendFit:
    """The local linear trend's reading (``fit_trend``): the level's walk (kn^2/s per axis) by maximum likelihood
    and its likelihood-ratio interval within [0, ceiling], the slope's walk (kn^2/s^3) and the noise's scale at the
    maximum, and the slope at the last block's end there (kn/s per axis, east and north) with its variance."""

    q_hat: float
    lower: float
    upper: float
    blocks: int
    noise_scale: float
    q_slope: float
    slope: tuple[float, float]
    slope_var: tuple[float, float]


@dataclass(frozen=True, slots=True)
class TrendPass:
    """One pass of the local linear trend's filter over a series for many parameter sets at once: the
    log-likelihood per set, and per axis and set the slope's mean (kn/s) and variance at the last block's end."""

    ll: np.ndarray
    slope: np.ndarray
    slope_var: np.ndarray


def trend_pass(q_level: np.ndarray, q_slope: np.ndarray, s: Series, noise_scale: np.ndarray | None = None,
               prior: tuple[np.ndarray, np.ndarray] | None = None) -> TrendPass:
    """The local linear trend's filter over the block means ``s`` for the level walks ``q_level`` (kn^2/s), slope
    walks ``q_slope`` (kn^2/s^3) and noise scales (as many of each, pairwise), the axes' log-likelihoods summed.

    Each block a flow (the module doc's aggregation moments). ``prior``: the state (level kn, slope kn/s) at the
    first block's start, its mean (axes x 2) and covariance (2 x 2), exact; without it the state is diffuse (the
    level at the first mean, both with ``DIFFUSE_VAR``'s variances) and the first two blocks' terms, which only
    place it, are left out of the likelihood (de Jong 1991, from memory).
    """
    shape = (s.y.shape[0], np.shape(q_level)[0])
    # The state's arrays and the parameters' are (axes x sets) and contiguous, a parameter's row repeated on
    # each axis: numpy takes a row broadcast against the state through its buffered iterator, four or five
    # times the instructions of the same operation on contiguous arrays of that shape. A block's column of
    # means and noise variances (axes x 1) is left a broadcast: repeated on every set beforehand (an hour's
    # series 1.6 MB a copy) it took 30 % more CPU time for 2 % fewer instructions. The numbers are the same
    # (each element the same product or sum of the same two floats).
    ql, qs = _per_axis(q_level, shape), _per_axis(q_slope, shape)
    scale = np.ones(shape) if noise_scale is None else _per_axis(noise_scale, shape)
    if prior is None:
        m, b = s.y[:, :1] + np.zeros(shape), np.zeros(shape)
        p00, p01, p11 = np.full(shape, DIFFUSE_VAR[0]), np.zeros(shape), np.full(shape, DIFFUSE_VAR[1])
        skip = 2
    else:
        mean, cov = prior
        m, b = mean[:, :1] + np.zeros(shape), mean[:, 1:2] + np.zeros(shape)
        p00, p01, p11 = (np.full(shape, float(v)) for v in (cov[0, 0], cov[0, 1], cov[1, 1]))
        skip = 0
    ll = np.zeros(shape[1])
    flows: dict[float, tuple[np.ndarray, ...]] = {}                 # a block's walk moments by its span
    for i in range(len(s.t0)):
        g = max(0.0, float(s.t0[i] - s.t1[i - 1])) if i else 0.0
        if g > 0.0:                                                 # the gap: an ordinary trend step
            m = m + g * b
            p00 = p00 + g * (2.0 * p01 + g * p11) + (ql * g + qs * (g ** 3 / 3.0))
            p01 = p01 + g * p11 + qs * (g * g / 2.0)
            p11 = p11 + qs * g
        T = float(s.t1[i] - s.t0[i])
        if T not in flows:   # var(mean), cov(level_T, mean), cov(slope_T, mean), var(level_T), cov(level_T, slope_T)
            flows[T] = (ql * (T / 3.0) + qs * (T ** 3 / 20.0), ql * (T / 2.0) + qs * (T ** 3 / 8.0),
                        qs * (T * T / 6.0), ql * T + qs * (T ** 3 / 3.0), qs * (T * T / 2.0), qs * T)
        w_mean, w_cross0, w_cross1, w00, w01, w11 = flows[T]
        F = p00 + T * p01 + (T * T / 4.0) * p11 + w_mean + s.h[:, i:i + 1] * scale
        c0 = p00 + 1.5 * T * p01 + (T * T / 2.0) * p11 + w_cross0                 # cov(level_T, y)
        c1 = p01 + 0.5 * T * p11 + w_cross1                                        # cov(slope_T, y)
        v = s.y[:, i:i + 1] - (m + 0.5 * T * b)
        if i >= skip:
            ll = ll - 0.5 * _rows_added(None, np.log(2.0 * math.pi * F) + v * v / F)
        k0, k1 = c0 / F, c1 / F
        m = m + T * b + k0 * v
        b = b + k1 * v
        tp11 = T * p11
        v00 = p00 + T * (2.0 * p01 + tp11) + w00                                  # the end's, before the mean
        v01 = p01 + tp11 + w01
        p00, p01, p11 = v00 - k0 * c0, v01 - k0 * c1, p11 + w11 - k1 * c1
    return TrendPass(ll, b, p11)


def _per_axis(row: np.ndarray, shape: tuple[int, int]) -> np.ndarray:
    """A parameter per set (``row``) repeated on each axis: a contiguous array of ``shape`` (axes x sets)."""
    return np.repeat(np.asarray(row, dtype=float)[None, :], shape[0], axis=0)


def _rows_added(total: np.ndarray | None, x: np.ndarray) -> np.ndarray:
    """``total`` plus each row of ``x`` in turn (the rows alone when ``total`` is None): the additions, in the
    same order, of numpy's sum over leading axes, without its buffered iterator; for a (axes x sets) array of
    two axes, two contiguous additions."""
    for row in x:
        total = row if total is None else total + row
    return total


def fit_trend(s: Series, ceiling: float, confidence: float) -> TrendFit:
    """The local linear trend over ``s``: the level's walk by maximum likelihood within [0, ``ceiling``] and the
    upper end of its likelihood-ratio interval at ``confidence`` (the profile likelihood over the slope's walk
    and the noise's scale), and the slope at the end at the maximum.

    Every level walk of a grid in ln q (and 0), every slope walk of ``SLOPE_WALKS`` and every scale of
    ``TREND_NOISE_SCALES`` at once; the maximum and the interval's ends as ``fit_walk``'s.
    """
    ql = np.concatenate([[0.0], ceiling * np.logspace(-GRID_DECADES, 0.0, TREND_LEVEL_POINTS)])
    qs = ceiling * SLOPE_WALKS
    sc = TREND_NOISE_SCALES
    n_l, n_s, n_c = len(ql), len(qs), len(sc)
    # the grid's axes: scale, slope walk, level walk (level fastest)
    res = trend_pass(np.tile(ql, n_s * n_c), np.tile(np.repeat(qs, n_l), n_c), s, np.repeat(sc, n_s * n_l))
    grid = res.ll.reshape(n_c * n_s, n_l)
    best, q_hat, lower, upper = _interval(ql, grid.max(axis=0), ceiling, confidence)  # profiled over q_b, scale
    j = int(np.argmax(grid[:, best])) * n_l + best                  # the maximum's parameter set
    slope, var = res.slope[:, j], res.slope_var[:, j]
    return TrendFit(q_hat, lower, upper, s.y.shape[1], float(sc[j // (n_s * n_l)]),
                    float(qs[(j // n_l) % n_s]), (float(slope[0]), float(slope[1])), (float(var[0]), float(var[1])))


def lag_predicted(lag: Lag, dt: float) -> Lag:
    """The filter's lag per unit slope after a prediction of ``dt`` s: the water moves on, the estimate stays."""
    (a, b), (c, d) = lag
    return (a - dt, b), (c, d - dt)


def lag_updated(lag: Lag, gain: list[tuple[float, float]]) -> Lag:
    """The lag per unit slope after a fusion with the filter's gain (its current rows): (I - K_c) lag."""
    (a, b), (c, d) = lag
    (k00, k01), (k10, k11) = gain[0], gain[1]
    return ((a - (k00 * a + k01 * c), b - (k00 * b + k01 * d)),
            (c - (k10 * a + k11 * c), d - (k10 * b + k11 * d)))


def lag_covariance(lag: Lag, moment: Lag) -> Lag:
    """The lag's part of the current's published covariance, L E[b b'] L' (kn^2)."""
    (a, b), (c, d) = lag
    (s00, s01), (s10, s11) = moment
    r00, r01, r10, r11 = a * s00 + b * s10, a * s01 + b * s11, c * s00 + d * s10, c * s01 + d * s11   # L S
    off = r00 * c + r01 * d
    return (r00 * a + r01 * b, off), (off, r10 * c + r11 * d)


class WaterWalk:
    """Blocks of the measured current over a sliding window, and the walk they show (see the module doc).

    ``rate`` (kn^2/s per axis) is what the published covariance walks at: the configured walk until the
    window holds ``water_walk_min_blocks`` blocks, then the interval's upper end, never above it;
    ``noise_scale`` what its measurement noise is, over the filter's R: 1, then the one read with the walk;
    ``slope_moment`` the water's slope's second moment E[b b'] ((kn/s)^2, east and north) that the filter's lag
    is counted with: 0, then the trend's; ``trending`` whether the walk is the trend's (its slope evident).
    """

    def __init__(self, params: CurrentParams) -> None:
        self.params = params
        self.ceiling = params.current_walk_kn_per_sqrt_h ** 2 / S_PER_H
        self.rate = self.ceiling
        self.noise_scale = 1.0
        self.slope_moment: Lag = NO_SLOPE
        self.trending = False
        self.blocks: deque[WalkBlock] = deque()
        self.last: WalkFit | TrendFit | None = None
        self.trend: TrendFit | None = None
        self._t_last = -math.inf
        self._open()

    def _open(self, t0: float | None = None) -> None:
        self._t0 = t0
        self._n = 0
        self._sums = [0.0] * 6                                      # g_e, g_n, m_e, m_n, R_ee, R_nn

    def add(self, t: float, interval_s: float, g: tuple[float, float], speed_kn: float, water_dir_deg: float,
            r_ee: float, r_nn: float, k: float, d_rad: float) -> None:
        """One fused fix of steady sailing: its ground velocity, log reading, water-track direction reading (compass
        and leeway), R's diagonal; the filter's k and d read the walk when a block closes."""
        start = t - interval_s
        if self._n and start > self._t_last + GAP_TOLERANCE_S:
            self._close(k, d_rad)                                   # a fix in between was not steady: a gap
        if self._t0 is None:
            self._open(start)
        self._t_last = t
        a = math.radians(water_dir_deg)
        for i, v in enumerate((g[0], g[1], speed_kn * math.sin(a), speed_kn * math.cos(a), r_ee, r_nn)):
            self._sums[i] += v
        self._n += 1
        if t - self._t0 >= self.params.water_walk_block_s:
            self._close(k, d_rad)

    def _close(self, k: float, d_rad: float) -> None:
        n = self._n
        if n >= MIN_BLOCK_FIXES:
            ge, gn, me, mn, re, rn = (v / n for v in self._sums)
            self.blocks.append(WalkBlock(self._t0, self._t_last, (ge, gn), (me, mn), (re / n, rn / n)))
            keep_from = self._t_last - self.params.water_walk_window_h * S_PER_H
            while self.blocks and self.blocks[0].t0_s < keep_from:
                self.blocks.popleft()
            self._read(k, d_rad)
        self._open()

    def _read(self, k: float, d_rad: float) -> None:
        """The walk over the window's blocks, the current measured with the filter's k and d now."""
        if len(self.blocks) < self.params.water_walk_min_blocks:
            self.rate, self.noise_scale, self.slope_moment, self.last = self.ceiling, 1.0, NO_SLOPE, None
            self.trend, self.trending = None, False
            return
        blocks = self.blocks
        m = np.array([turned(b.m, d_rad) for b in blocks]).T                  # R(d) m, (east, north) x blocks
        series = Series(np.array([b.t0_s for b in blocks]), np.array([b.t1_s for b in blocks]),
                        np.array([b.g for b in blocks]).T - k * m,            # c = g - k R(d) m
                        np.array([b.h for b in blocks]).T)
        confidence, published = self.params.water_walk_confidence, self.params.published_walk_confidence
        trend = self.trend = fit_trend(series, self.ceiling, published)
        (be, bn), (ve, vn) = trend.slope, trend.slope_var
        self.slope_moment = ((be * be + ve, be * bn), (be * bn, bn * bn + vn))   # E[b b'] = b_hat b_hat' + V
        # the walk from the trend where its slope is evident (Wald's test, both axes), else from the local level
        self.trending = ve > 0.0 and vn > 0.0 and be * be / ve + bn * bn / vn > chi2_quantile(confidence, 2)
        fit = self.last = trend if self.trending else fit_walk(series, self.ceiling, published, NOISE_SCALES)
        self.rate = min(self.ceiling, fit.upper)
        self.noise_scale = fit.noise_scale

    @property
    def walk_kn_per_sqrt_h(self) -> float:
        """The published walk per axis, kn/sqrt(h)."""
        return math.sqrt(self.rate * S_PER_H)

    @property
    def trend_kn_per_h(self) -> tuple[float, float] | None:
        """The water's slope read at the window's end, kn/h east and north, where it is evident (``trending``):
        the steady change the published sigma counts the filter's lag behind; None where it is not."""
        if not self.trending or self.trend is None:
            return None
        be, bn = self.trend.slope
        return be * S_PER_H, bn * S_PER_H
