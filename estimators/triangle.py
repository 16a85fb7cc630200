"""The plain current triangle: the baseline a typical instrument display shows.

    current = ground velocity - water velocity
            = SOG * u(COG) - STW * u(heading),        u(a) = (sin a, cos a) (east, north)

with the log and the compass taken at face value (no calibration), or, for a
benchmark's bound, with a given (true) calibration: STW = scale * log,
heading = reading + offset. The raw triangle is as noisy as its inputs, so it
is smoothed by an exponential moving average of the east and north components
(a vector average: averaging set and drift separately would bias the set
across north and the drift upward) with time constant ``smoothing_s``
(60 s by default: about what displays use to steady the figure). The EMA is
first order, so after a step it reaches 63 % in one time constant.

Pure: samples in, numbers out; the newest heading and log reading before each
fix are used, as a display would.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

from estimators.angles import from_east_north, to_east_north
from estimators.base import EstimatorBase, Output
from estimators.samples import Fix, GroundVelocity, Heading, Sample, WaterSpeed


def triangle(sog_kn: float, cog_deg: float, stw_kn: float, heading_deg: float) -> tuple[float, float]:
    """(east, north) kn of the current from one ground and one water velocity."""
    ge, gn = to_east_north(sog_kn, cog_deg)
    we, wn = to_east_north(stw_kn, heading_deg)
    return ge - we, gn - wn                     # c = g - w


class PlainTriangle(EstimatorBase):
    """Smoothed plain triangle; ``stw_scale``/``heading_offset_deg`` default to "no calibration"."""

    name = "triangle"
    accepts = (Fix, GroundVelocity, Heading, WaterSpeed)

    def __init__(self, smoothing_s: float = 60.0, stw_scale: float = 1.0, heading_offset_deg: float = 0.0,
                 stale_s: float = 5.0) -> None:
        if not smoothing_s >= 0.0:
            raise ValueError(f"smoothing_s = {smoothing_s!r}: expected 0 or more seconds")
        self.smoothing_s = smoothing_s
        self.stw_scale = stw_scale
        self.heading_offset_deg = heading_offset_deg
        self.stale_s = stale_s
        self.east_kn: float | None = None
        self.north_kn: float | None = None
        self._t: float | None = None
        self._heading: Heading | None = None
        self._log: WaterSpeed | None = None

    def step(self, sample: Sample, ctx: Any = None) -> Sequence[Output]:
        if isinstance(sample, Heading):
            self._heading = sample
        elif isinstance(sample, WaterSpeed):
            self._log = sample
        elif isinstance(sample, (Fix, GroundVelocity)):
            self.update(sample)
        return ()

    def update(self, sample: Fix | GroundVelocity) -> tuple[float, float] | None:
        """Fold in one ground velocity; the smoothed (east, north), or None while inputs are missing."""
        t = sample.t_s
        h, w = self._heading, self._log
        if (sample.sog_kn is None or sample.cog_deg is None or h is None or w is None
                or t - h.t_s > self.stale_s or t - w.t_s > self.stale_s):
            return self.value()
        ce, cn = triangle(sample.sog_kn, sample.cog_deg, self.stw_scale * w.speed_kn,
                          h.true_deg + self.heading_offset_deg)
        if self.east_kn is None or self._t is None or self.smoothing_s == 0.0:
            self.east_kn, self.north_kn = ce, cn
        else:
            a = 1.0 - math.exp(-max(0.0, t - self._t) / self.smoothing_s)   # EMA weight for this interval
            self.east_kn += a * (ce - self.east_kn)
            self.north_kn += a * (cn - self.north_kn)
        self._t = t
        return self.value()

    def value(self) -> tuple[float, float] | None:
        return None if self.east_kn is None else (self.east_kn, self.north_kn)

    def set_drift(self) -> tuple[float, float] | None:
        """(set_deg, drift_kn) of the smoothed current, or None."""
        v = self.value()
        if v is None:
            return None
        drift, set_deg = from_east_north(*v)
        return set_deg, drift
