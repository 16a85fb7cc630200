"""The ground-velocity fusion step: numerical guard, chi-square gate, Joseph-form update. Nothing else.

Whether to fuse at all (turns, a suspect log, resets, when k and d may learn)
is the control's business (``control``); the model's matrices come from
``model``. Written out for the 2 x 4 case in plain floats, numpy arrays only at
the edges: numpy's small-matrix calls cost about a microsecond each, more than
the arithmetic (it runs at 1 Hz on a small computer and over whole passages in
replay). ``fuse`` and ``joseph_with_gain`` take arrays; the filter's own step
(``estimator``) hands its y, H and R over as plain floats (``fuse_rows``,
``joseph_with_gain_rows``, with ``model.measurement_rows`` and ``jacobian_rows``),
so that only the new x, P and P_pub become arrays. Checked against filterpy's
generic ``ExtendedKalmanFilter.update`` in the tests.

    S = H P H' + R                       innovation covariance
    NIS = y' S^-1 y                      ~ chi2(2) when the model fits
    K = P H' S^-1                        gain; rows of "consider" states zeroed (Schmidt)
    x+ = x + K y
    P+ = (I - K H) P (I - K H)' + K R K' Joseph form: right for any gain, the zeroed rows included

The Joseph form is evaluated row by row as A = (I - K H) P = P - K (P H')' (P is
symmetric), then A (I - K H)' + K R K' = A - (A H') K' + (K R) K': the same
product, without the 4 x 4 x 4 multiplications (``joseph_with_gain``).

The gain comes back with the update (``Update.gain``): the published covariance
(``estimator``: the error covariance of this filter if the water walks slower
than its Q says) is carried through the same step with the same gain, the
consider rows' zeros included, by ``joseph_with_gain``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

Rows = list[list[float]]
Gain = list[tuple[float, float]]


# not frozen: made about every second of data (DEVELOPERS.md, estimators/)
@dataclass(slots=True)
class Update:
    """The outcome of one fusion step: the new (or unchanged) x and P, and what happened."""

    x: np.ndarray
    P: np.ndarray
    nis: float
    innovation_var: tuple[float, float]
    fused: bool
    reason: str = ""
    gain: Gain | None = None   # K (four rows of two) of a fused step; None when not fused
    innovation_cov: tuple[float, float, float, float] | None = None  # S = H P H' + R as (S00, S01, S10, S11)


def nis2(y0: float, y1: float, S: tuple[float, float, float, float]) -> float:
    """y' S^-1 y for y = (y0, y1) and S = (S00, S01, S10, S11); NaN when y or S is not finite, or S not
    positive definite."""
    a, b, c, d = S
    det = a * d - b * c
    if not (math.isfinite(a + b + c + d + y0 + y1) and det > 0.0 and a > 0.0):
        return math.nan
    return (y0 * (d * y0 - b * y1) + y1 * (a * y1 - c * y0)) / det


def _times_ht(rows: Rows, h0: list[float], h1: list[float]) -> list[tuple[float, float]]:
    """M H' for a 4 x 4 M (its rows) and H (its rows h0, h1): four rows of two."""
    # written out, row by row (see ``_joseph``): asked for five times a fix
    a0, a1, a2, a3 = h0
    b0, b1, b2, b3 = h1
    (m00, m01, m02, m03), (m10, m11, m12, m13), (m20, m21, m22, m23), (m30, m31, m32, m33) = rows
    return [(m00 * a0 + m01 * a1 + m02 * a2 + m03 * a3, m00 * b0 + m01 * b1 + m02 * b2 + m03 * b3),
            (m10 * a0 + m11 * a1 + m12 * a2 + m13 * a3, m10 * b0 + m11 * b1 + m12 * b2 + m13 * b3),
            (m20 * a0 + m21 * a1 + m22 * a2 + m23 * a3, m20 * b0 + m21 * b1 + m22 * b2 + m23 * b3),
            (m30 * a0 + m31 * a1 + m32 * a2 + m33 * a3, m30 * b0 + m31 * b1 + m32 * b2 + m33 * b3)]


def _h_times(h0: list[float], h1: list[float], PHt: list[tuple[float, float]],
             R: Rows) -> tuple[float, float, float, float]:
    """H (P H') + R as (S00, S01, S10, S11)."""
    (r00, r01), (r10, r11) = R
    return (h0[0] * PHt[0][0] + h0[1] * PHt[1][0] + h0[2] * PHt[2][0] + h0[3] * PHt[3][0] + r00,
            h0[0] * PHt[0][1] + h0[1] * PHt[1][1] + h0[2] * PHt[2][1] + h0[3] * PHt[3][1] + r01,
            h1[0] * PHt[0][0] + h1[1] * PHt[1][0] + h1[2] * PHt[2][0] + h1[3] * PHt[3][0] + r10,
            h1[0] * PHt[0][1] + h1[1] * PHt[1][1] + h1[2] * PHt[2][1] + h1[3] * PHt[3][1] + r11)


def innovation_cov_rows(Pl: Rows, h0: list[float], h1: list[float], Rl: Rows) -> tuple[float, float, float, float]:
    """S = H P H' + R as (S00, S01, S10, S11), of P's rows, H's rows h0 and h1 and R's rows."""
    return _h_times(h0, h1, _times_ht(Pl, h0, h1), Rl)


def fuse(x: np.ndarray, P: np.ndarray, y: np.ndarray, H: np.ndarray, R: np.ndarray, gate: float,
         consider_from: int | None = None) -> Update:
    """One gated Joseph-form update of a 4-state with a 2-vector innovation ``y`` = z - h(x).

    ``consider_from``: states from this index on are Schmidt "consider" states:
    their covariance and cross-covariance are carried exactly, their estimates
    not moved. Never changes ``x`` or ``P`` in place (the caller keeps the prior).
    """
    h0, h1 = H.tolist()
    y0, y1 = y.ravel().tolist()
    return fuse_rows(x, P, x.ravel().tolist(), P.tolist(), y0, y1, h0, h1, R.tolist(), gate, consider_from)


def fuse_rows(x: np.ndarray, P: np.ndarray, xl: list[float], Pl: Rows, y0: float, y1: float,
              h0: list[float], h1: list[float], Rl: Rows, gate: float, consider_from: int | None = None) -> Update:
    """``fuse`` given x and P both as arrays (handed back when nothing is fused) and as plain floats (``xl``,
    ``Pl``: the same numbers), y as y0, y1, H as its rows h0, h1 and R as its rows: the filter's own step
    (``estimator``) has them so, and making arrays only to take them apart again cost more than the
    arithmetic."""
    PHt = _times_ht(Pl, h0, h1)
    S = _h_times(h0, h1, PHt, Rl)                                           # S = H P H' + R
    nis = nis2(y0, y1, S)                                                   # y' S^-1 y, NaN if S is not usable
    a, b, c, d = S
    svar = (a, d)
    if not math.isfinite(nis):
        return Update(x, P, math.nan, svar, False, "numerical guard", innovation_cov=S)
    if nis > gate:
        return Update(x, P, nis, svar, False, "gate", innovation_cov=S)
    det = a * d - b * c
    i00, i01, i10, i11 = d / det, -b / det, -c / det, a / det               # S^-1, closed form
    (q00, q01), (q10, q11), (q20, q21), (q30, q31) = PHt
    K = [(q00 * i00 + q01 * i10, q00 * i01 + q01 * i11), (q10 * i00 + q11 * i10, q10 * i01 + q11 * i11),  # K = P H' S^-1
         (q20 * i00 + q21 * i10, q20 * i01 + q21 * i11), (q30 * i00 + q31 * i10, q30 * i01 + q31 * i11)]
    if consider_from is not None:
        K[consider_from:] = [(0.0, 0.0)] * (4 - consider_from)
    x_new = [xi + (k0 * y0 + k1 * y1) for xi, (k0, k1) in zip(xl, K)]                  # x+ = x + K y
    P_new = _joseph(Pl, PHt, K, h0, h1, Rl)
    if not (math.isfinite(sum(x_new)) and math.isfinite(sum(map(sum, P_new)))
            and min(P_new[0][0], P_new[1][1], P_new[2][2], P_new[3][3]) > 0.0):
        return Update(x, P, nis, svar, False, "numerical guard after update", innovation_cov=S)
    return Update(np.array(x_new).reshape(4, 1), np.array(P_new), nis, svar, True, gain=K, innovation_cov=S)


def joseph_with_gain(P: np.ndarray, K: Gain, H: np.ndarray, R: np.ndarray) -> np.ndarray:
    """(I - K H) P (I - K H)' + K R K' for a gain chosen elsewhere (``Update.gain``), symmetric.

    The error covariance of a filter that applies the gain K when its error before the step has
    covariance P: right for any K (Joseph form), so a covariance other than the one K was made from
    (the published one, ``estimator``) goes through the filter's own step with it.
    """
    h0, h1 = H.tolist()
    return joseph_with_gain_rows(P.tolist(), K, h0, h1, R.tolist())


def joseph_with_gain_rows(Pl: Rows, K: Gain, h0: list[float], h1: list[float], Rl: Rows) -> np.ndarray:
    """``joseph_with_gain`` of P's rows, H's rows h0 and h1 and R's rows; the new covariance as an array."""
    return np.array(_joseph(Pl, _times_ht(Pl, h0, h1), K, h0, h1, Rl))


def _joseph(Pl: Rows, PHt: list[tuple[float, float]], K: Gain, h0: list[float], h1: list[float],
            Rl: Rows) -> Rows:
    """The Joseph form in rows (see the module doc), P H' given, symmetrised.

    Each row's four elements written out, not a comprehension within a comprehension: an inner one is a
    function called for each row (Python 3.11), and those calls cost several times the arithmetic. The same
    products and sums in the same order: element j of a row takes row j of P H' and of K.
    """
    (q00, q01), (q10, q11), (q20, q21), (q30, q31) = PHt
    (g00, g01), (g10, g11), (g20, g21), (g30, g31) = K
    A = [[p0 - (k0 * q00 + k1 * q01), p1 - (k0 * q10 + k1 * q11),          # A = (I - K H) P
          p2 - (k0 * q20 + k1 * q21), p3 - (k0 * q30 + k1 * q31)]
         for (p0, p1, p2, p3), (k0, k1) in zip(Pl, K)]
    (r00, r01), (r10, r11) = Rl
    KR = [(g00 * r00 + g01 * r10, g00 * r01 + g01 * r11), (g10 * r00 + g11 * r10, g10 * r01 + g11 * r11),
          (g20 * r00 + g21 * r10, g20 * r01 + g21 * r11), (g30 * r00 + g31 * r10, g30 * r01 + g31 * r11)]
    P_new = [[a0 - (m0 * g00 + m1 * g01) + (s0 * g00 + s1 * g01),        # Joseph form: A - (A H') K' + (K R) K'
              a1 - (m0 * g10 + m1 * g11) + (s0 * g10 + s1 * g11),
              a2 - (m0 * g20 + m1 * g21) + (s0 * g20 + s1 * g21),
              a3 - (m0 * g30 + m1 * g31) + (s0 * g30 + s1 * g31)]
             for (a0, a1, a2, a3), (m0, m1), (s0, s1) in zip(A, _times_ht(A, h0, h1), KR)]
    return _symmetrised(P_new)


def _symmetrised(M: Rows) -> Rows:
    """0.5 (M + M') of a 4 x 4 M's rows, each pair's mean worked out once (a + b is b + a, exactly)."""
    (m00, m01, m02, m03), (m10, m11, m12, m13), (m20, m21, m22, m23), (m30, m31, m32, m33) = M
    s01, s02, s03 = 0.5 * (m01 + m10), 0.5 * (m02 + m20), 0.5 * (m03 + m30)
    s12, s13, s23 = 0.5 * (m12 + m21), 0.5 * (m13 + m31), 0.5 * (m23 + m32)
    return [[0.5 * (m00 + m00), s01, s02, s03], [s01, 0.5 * (m11 + m11), s12, s13],
            [s02, s12, 0.5 * (m22 + m22), s23], [s03, s13, s23, 0.5 * (m33 + m33)]]
