"""The ground-velocity fusion step: numerical guard, chi-square gate, Joseph-form update. Nothing else.

Whether to fuse at all (turns, a suspect log, resets, when k and d may learn)
is the control's business (``control``); the model's matrices come from
``model``. Written out for the 2 x 4 case with plain floats for the 2 x 2
parts, where numpy's small-matrix calls cost more than the arithmetic (it runs
at 1 Hz on a small computer and over whole passages in replay); checked
against filterpy's generic ``ExtendedKalmanFilter.update`` in the tests.

    S = H P H' + R                       innovation covariance
    NIS = y' S^-1 y                      ~ chi2(2) when the model fits
    K = P H' S^-1                        gain; rows of "consider" states zeroed (Schmidt)
    x+ = x + K y
    P+ = (I - K H) P (I - K H)' + K R K' Joseph form: right for any gain, the zeroed rows included
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

_I4 = np.eye(4)


@dataclass(frozen=True, slots=True)
class Update:
    """The outcome of one fusion step: the new (or unchanged) x and P, and what happened."""

    x: np.ndarray
    P: np.ndarray
    nis: float
    innovation_var: tuple[float, float]
    fused: bool
    reason: str = ""


def inv2(S: np.ndarray) -> np.ndarray:
    """Inverse of a 2 x 2 matrix (closed form)."""
    a, b, c, d = S.ravel().tolist()
    det = a * d - b * c
    return np.array([[d, -b], [-c, a]]) / det


def nis2(y: np.ndarray, S: np.ndarray) -> float:
    """y' S^-1 y for a 2-vector; NaN when y or S is not finite, or S not positive definite."""
    a, b, c, d = S.ravel().tolist()
    y0, y1 = y[0, 0].item(), y[1, 0].item()
    det = a * d - b * c
    if not (math.isfinite(a + b + c + d + y0 + y1) and det > 0.0 and a > 0.0):
        return math.nan
    return (y0 * (d * y0 - b * y1) + y1 * (a * y1 - c * y0)) / det


def fuse(x: np.ndarray, P: np.ndarray, y: np.ndarray, H: np.ndarray, R: np.ndarray, gate: float,
         consider_from: int | None = None) -> Update:
    """One gated Joseph-form update of a 4-state with a 2-vector innovation ``y`` = z - h(x).

    ``consider_from``: states from this index on are Schmidt "consider" states:
    their covariance and cross-covariance are carried exactly, their estimates
    not moved. Never changes ``x`` or ``P`` in place (the caller keeps the prior).
    """
    PHt = P @ H.T
    S = H @ PHt + R                                                         # S = H P H' + R
    nis = nis2(y, S)                                                        # y' S^-1 y, NaN if S is not usable
    svar = (float(S[0, 0]), float(S[1, 1]))
    if not math.isfinite(nis):
        return Update(x, P, math.nan, svar, False, "numerical guard")
    if nis > gate:
        return Update(x, P, nis, svar, False, "gate")
    K = PHt @ inv2(S)                                                       # K = P H' S^-1
    if consider_from is not None:
        K[consider_from:, :] = 0.0
    x_new = x + K @ y                                                       # x+ = x + K y
    I_KH = _I4 - K @ H
    P_new = I_KH @ P @ I_KH.T + K @ R @ K.T                                 # Joseph form
    P_new = 0.5 * (P_new + P_new.T)
    if not (math.isfinite(float(x_new.sum())) and math.isfinite(float(P_new.sum()))
            and float(P_new.diagonal().min()) > 0.0):
        return Update(x, P, nis, svar, False, "numerical guard after update")
    return Update(x_new, P_new, nis, svar, True)
