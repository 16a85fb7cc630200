"""The best current along a recorded passage: a Rauch–Tung–Striebel smoother.

The forward pass is the live filter itself (``CurrentEstimator``, same model,
same gates), run over the samples with its per-epoch records kept: the state
and covariance before (predicted) and after each ground-velocity epoch. The
backward pass is filterpy's ``rts_smoother`` (Rauch, Tung & Striebel 1965):
with F = I (every state a random walk) and the effective process noise between
epochs k and k+1 taken as ``P_prior[k+1] - P_post[k]`` (so an adaptive
inflation or a reset's inflation counts as the process noise it was).
A restart of the filter (after a suspect log) starts a new segment, smoothed
on its own. Each output row uses the data up to the end of the passage, so
the current along the track is better than the live (filtered) one, above
all just before a change the filter only noticed afterwards.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np
from filterpy.kalman import rts_smoother

from estimators.angles import from_east_north
from estimators.current import IE, IK, IN, ID, Calibration, CurrentEstimator, CurrentParams, FilterRecord
from estimators.runner import run
from estimators.samples import Sample


@dataclass(frozen=True, slots=True)
class SmoothedCurrent:
    """The smoothed state at one fix: current (kn, toward), log scale, heading offset, sigmas."""

    t_s: float
    east_kn: float
    north_kn: float
    set_deg: float
    drift_kn: float
    east_sigma_kn: float
    north_sigma_kn: float
    stw_scale: float
    heading_offset_deg: float


def smooth_current(samples: Iterable[Sample], params: CurrentParams | None = None,
                   calibration: Calibration | None = None) -> list[SmoothedCurrent]:
    """Forward filter over ``samples`` (time order), then RTS backward: one row per filter epoch."""
    est = CurrentEstimator(params or CurrentParams(), calibration)
    est.records = []
    for _ in run(est, samples, tick=False):
        pass
    out: list[SmoothedCurrent] = []
    for segment in _segments(est.records):
        out.extend(_smooth_segment(segment))
    return out


def _segments(records: list[FilterRecord]) -> list[list[FilterRecord]]:
    segs: list[list[FilterRecord]] = []
    for r in records:
        if r.restart or not segs:
            segs.append([])
        segs[-1].append(r)
    return [s for s in segs if s]


def _smooth_segment(seg: list[FilterRecord]) -> list[SmoothedCurrent]:
    n = len(seg)
    xs = np.array([r.x_post[:, 0] for r in seg])
    ps = np.array([r.P_post for r in seg])
    fs = np.array([np.eye(4)] * n)
    qs = np.zeros((n, 4, 4))
    for k in range(n - 1):
        q = seg[k + 1].P_prior - seg[k].P_post              # effective process noise between the epochs
        qs[k] = 0.5 * (q + q.T)
    if n > 1:
        xs, ps, _, _ = rts_smoother(xs, ps, fs, qs)
    rows = []
    for r, x, p in zip(seg, xs, ps):
        drift, set_deg = from_east_north(x[IE], x[IN])
        rows.append(SmoothedCurrent(r.t_s, float(x[IE]), float(x[IN]), set_deg, drift,
                                    math.sqrt(max(0.0, p[IE, IE])), math.sqrt(max(0.0, p[IN, IN])),
                                    float(x[IK]), math.degrees(float(x[ID]))))
    return rows
