"""What a fusion step reports, and the health every fusing estimator keeps.

Every estimator that fuses a measurement into a Kalman filter (the current's
ground velocity, the barometer's level, the GNSS fix) follows the same steps
(design: one fusion step per measurement kind): innovation and its variance,
a numerical guard, a chi-square gate on the normalised innovation squared
(NIS), a Joseph-form update, and a report. This module holds the pieces they
share, so a display sees every filter's health in the same words:

- ``FusionReport``: what one step did (innovation, its variance, NIS, gate,
  fused or not and why);
- ``FusionHealth``: the counters of one fusion step (fused, rejected, faults,
  resets), the last NIS and a windowed NIS consistency test;
- ``WindowedNis``: the sum of the last N NIS values of an m-dimensional
  innovation is chi-square with N*m degrees of freedom when the filter's model
  fits (Bar-Shalom, Li & Kirubarajan, "Estimation with Applications to
  Tracking and Navigation", 2001, section 5.4.2, the time-average NIS test);
  outside its two-sided bounds the model does not fit the data;
- ``WindowedMeanShift``: the innovations of the last seconds summed against
  their summed covariances, the generalized likelihood ratio for a constant
  bias (Willsky & Jones 1976): a state moving away from the filter faster than
  its Q lets it follow (a slow ramp), which the NIS hardly shows.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass
from typing import Any

from statistics import NormalDist


# not frozen: made about every second of data (DEVELOPERS.md, estimators/)
@dataclass(slots=True)
class FusionReport:
    """What one fusion step did. Units are the measurement's (kn, hPa, m)."""

    t_s: float
    innovation: tuple[float, ...]      # y = z - h(x)
    innovation_var: tuple[float, ...]  # diagonal of S = H P H' + R
    nis: float                         # y' S^-1 y (NaN when the guard stopped the step)
    gate: float                        # chi-square gate on the NIS
    fused: bool
    reason: str = ""                   # why not fused: "gate", "numerical guard", ...


def chi2_quantile(p: float, dof: int) -> float:
    """Chi-square quantile: exact for 1 and 2 degrees of freedom, else by the Wilson-Hilferty cube-root
    normal approximation (Wilson & Hilferty, "The distribution of chi-square", PNAS 17, 1931):
    dof (1 - 2/(9 dof) + z_p sqrt(2/(9 dof)))^3.

    With 1 degree of freedom chi-square is a standard normal squared: the square of the normal's
    (1 + p) / 2 quantile. With 2 it is exponential with mean 2 (Abramowitz & Stegun 26.4.20; from
    memory): -2 ln(1 - p), p = 0.9973 gives 11.83. The approximation is within 0.1 % of the exact
    quantile from 60 degrees of freedom on. All checked against scipy in the tests; scipy.stats itself
    costs the service 45 MB and a second at start.
    """
    if dof == 1:
        return NormalDist().inv_cdf(0.5 * (1.0 + p)) ** 2
    if dof == 2:
        return -2.0 * math.log1p(-p)
    a = 2.0 / (9.0 * dof)
    return dof * (1.0 - a + NormalDist().inv_cdf(p) * math.sqrt(a)) ** 3


class WindowedNis:
    """Time-average NIS over the last ``window`` steps, with its chi-square bounds.

    Under a consistent filter, sum(NIS) over N steps ~ chi2(N * dof). The
    bounds are the two-sided ``probability`` interval of that sum (Bar-Shalom et
    al. 2001, 5.4.2). Correlated innovations (coloured noise the filter does not
    model) push the sum out of the upper bound as surely as a wrong Q does.
    """

    def __init__(self, window: int, dof: int, probability: float = 0.99) -> None:
        self.window, self.dof = int(window), int(dof)
        tail = 0.5 * (1.0 - probability)
        n = self.window * self.dof
        self.low = chi2_quantile(tail, n) / self.window       # bounds on the mean NIS
        self.high = chi2_quantile(1.0 - tail, n) / self.window
        self._values: deque[float] = deque(maxlen=self.window)
        self._sum = 0.0

    def add(self, nis: float) -> None:
        if not math.isfinite(nis):
            return
        if len(self._values) == self.window:
            self._sum -= self._values[0]
        self._values.append(nis)
        self._sum += nis

    def reset(self) -> None:
        self._values.clear()
        self._sum = 0.0

    @property
    def full(self) -> bool:
        return len(self._values) == self.window

    @property
    def mean(self) -> float | None:
        return self._sum / len(self._values) if self._values else None

    def verdict(self) -> str:
        """"high" (innovations larger than the filter expects), "low", "ok", or "" before the window is full."""
        if not self.full:
            return ""
        m = self._sum / self.window
        return "high" if m > self.high else "low" if m < self.low else "ok"


class WindowedMeanShift:
    """A bias of a 2-vector innovation over the last ``window_s`` seconds: the mean-shift test.

    Under a fitting model the innovations have mean zero; a consistent bias means the state is moving away
    from the filter faster than its Q lets it follow (a slow ramp the NIS hardly shows: a bias of a third of
    one innovation's sigma adds a tenth to its NIS, and is three sigmas of a minute's mean). The generalized
    likelihood ratio for a constant bias over the window, with the innovations taken as independent with
    the covariances S_i the filter gives them (Willsky & Jones, "A generalized likelihood ratio approach to
    the detection and estimation of jumps in linear systems", IEEE Trans. Automatic Control 21, 1976)::

        T = (sum y_i)' (sum S_i)^-1 (sum y_i)  ~  chi2(2) with no bias,   alarm while T > chi2_2(probability)

    Running sums over the window (each step added once and taken away once), no second filter.
    """

    def __init__(self, window_s: float, probability: float) -> None:
        self.window_s = float(window_s)
        self.threshold = chi2_quantile(probability, 2)
        self._steps: deque[tuple[float, float, float, float, float, float]] = deque()
        self._sums = [0.0] * 5                                     # y0, y1, S00, S01, S11
        self.statistic = 0.0

    def add(self, t: float, y0: float, y1: float, s00: float, s01: float, s11: float) -> bool:
        """One step's innovation and its covariance; whether the window's mean is beyond the threshold."""
        steps, sums = self._steps, self._sums
        while steps and steps[0][0] <= t - self.window_s:
            _, a, b, c, d, e = steps.popleft()
            sums[0] -= a
            sums[1] -= b
            sums[2] -= c
            sums[3] -= d
            sums[4] -= e
        steps.append((t, y0, y1, s00, s01, s11))
        sums[0] += y0
        sums[1] += y1
        sums[2] += s00
        sums[3] += s01
        sums[4] += s11
        Y0, Y1, a, b, d = sums
        det = a * d - b * b
        self.statistic = (Y0 * (d * Y0 - b * Y1) + Y1 * (a * Y1 - b * Y0)) / det if det > 0.0 else 0.0
        return self.alarm

    @property
    def alarm(self) -> bool:
        """Whether the last window's mean was beyond the threshold."""
        return self.statistic > self.threshold

    def reset(self) -> None:
        self._steps.clear()
        self._sums = [0.0] * 5
        self.statistic = 0.0


@dataclass
class FusionHealth:
    """The counters of one fusion step, and its last NIS."""

    fused: int = 0
    rejected: int = 0
    faults: int = 0
    resets: int = 0
    last_nis: float | None = None
    last_t_s: float | None = None

    def count(self, report: FusionReport) -> None:
        """Count one step by its report (a rejection by the gate or a fault by the guard)."""
        self.last_t_s = report.t_s
        if math.isfinite(report.nis):
            self.last_nis = report.nis
        if report.fused:
            self.fused += 1
        elif report.reason.startswith("numerical guard"):
            self.faults += 1
        else:
            self.rejected += 1

    def as_dict(self) -> dict[str, Any]:
        nis = None if self.last_nis is None else round(self.last_nis, 2)
        return {"fused": self.fused, "rejected": self.rejected, "faults": self.faults, "resets": self.resets,
                "last_nis": nis}
