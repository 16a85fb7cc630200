"""The current (set and drift), learnt together with the speed log's scale and
the compass's offset, with the uncertainty it honestly has.

Theory of operation
-------------------
State (extended Kalman filter; x and P live in a small ``FilterState``, the predict and the 2 x 4
update are written out here, cheaper than the generic ones; filterpy's ``ExtendedKalmanFilter`` held
them once, but importing it loads scipy.stats, about 45 MB and a second at start, for nothing)::

    x = [c_e, c_n, k, d]
        c_e, c_n  the current toward east / north, kn (ground frame)
        k         speed-log scale factor: true STW = k * log reading (dimensionless)
        d         heading offset, rad: true heading = heading reading + d

Process model: every state is a random walk (F = I). The current walks at
``current_walk_kn_per_sqrt_h`` per axis (tidal streams turn over hours); the
windowed normalised innovation squared (NIS) inflates that rate when the
innovations say the current changes faster (a current's edge crossed within
minutes), and decays it back when they agree again. k and d walk very slowly
(fouling, a compass swung again).

Measurement (one fusion step per ground-velocity epoch, from ``Fix`` SOG/COG or
``GroundVelocity``)::

    g = c + k * s * u(psi + d + lambda) + noise          (the current triangle)
    u(a) = (sin a, cos a)                                 (east, north of a unit vector toward a)

where ``s`` is the log reading and ``psi`` the heading reading, both averaged
over the fix interval (the heading as a circular mean), and ``lambda`` the
leeway angle. The speed log and the compass are inputs, not states measured
on their own: their noise enters the measurement covariance through the
Jacobian (along the track k^2 sigma_s^2, across it (k s sigma_psi)^2).
Leeway, where a heel reading exists, follows the common rule of thumb
``lambda = K * heel / STW^2`` (degrees, heel in degrees, STW in kn; K is the
config value ``leeway_coefficient``, 0 switches it off; positive heel is to
starboard, so leeway turns the water track clockwise). It is a rule of thumb
from sailing practice, quoted here from memory, not a published fit.

At low SOG a receiver's course is noisy; this filter does not difference
positions but inflates the GNSS velocity variance below ``low_sog_kn``.

Observability: the current, k and d are only separable when the water velocity
changes direction (a tack, a 90 degree or reciprocal leg; a change of speed
helps a little). On a steady course the filter keeps the cross-correlation
that ties k and d to the current and adds no pseudo-measurements, so their
variances stay near the prior: the filter reports stw_scale and
heading_offset_deg as the prior values until it knows them better than the
prior, and the status "calibrated" only once their sigmas fall below the
``calibrated_*`` thresholds (2 sigma: 2 % of STW, 1.5 deg); until then it says
what would calibrate them.

Turns: in a turn the fix's ground velocity and the fix interval's mean
heading and log speed belong to instants up to a second apart (sample times,
the instruments' own lags) while the boat sheds speed: an error of rate x lag
with the same sign at every fix of the turn, which no white R describes.
Fused, those fixes teach k and d the lag and claim sigmas not earned (the
demo passage's one course change gave a log scale 5 sigma off). So the filter
predicts through a turn (the 3-s EMA heading turning faster than
``turn_rate_hold_deg_s``, or a manoeuvre, for at most ``turn_hold_max_s``;
counted as ``turning``) and learns k and d from the steady legs on either
side, the current carried across on its random walk; a longer turn
(circling) is fused with rate x ``input_timing_sigma_s`` in R.

Each fusion step: observation and its covariance; innovation and its
covariance; a numerical guard; a chi-square gate on the NIS (probability
``gate_probability``, 2 degrees of freedom); the Joseph-form update and a
symmetric covariance; a health counter. A run
of ``rejections_before_reset`` rejections is not a lock-out: the current's
covariance is inflated and the measurement accepted.

The speed log is distrusted (``log_suspect``) when it reads near zero while the
boat moves over ground faster than any current it expects (a dead or fouled
log), or when its reading steps while the ground speed along the heading does
not. While suspect the filter holds k and the current (prediction only, the
covariance grows); once the log agrees again it restarts the current from the
next fix with k's uncertainty re-inflated, so the log is re-learnt.

Consistency is checked with NEES/NIS over Monte-Carlo runs (Bar-Shalom, Li &
Kirubarajan, "Estimation with Applications to Tracking and Navigation",
2001, ch. 5.4) in tests/test_current_consistency.py (tacking) and, for the
calibration states after one course change, tests/test_current_calibration_nees.py.
"""

from __future__ import annotations

import math
from collections import deque
from collections.abc import Sequence
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np

from estimators.limits import ATTITUDE_MAX_DEG, DIRECTION_DEG, STW_MAX_KN
from estimators.angles import circular_mean_deg, from_east_north, to_east_north, wrap_180
from estimators import wording
from estimators.base import CAUTION, Condition, EstimatorBase, Output, Publication
from estimators.params import param
from estimators.samples import Attitude, Fix, GroundVelocity, Heading, Sample, WaterSpeed
from estimators.thresholds import Hysteresis

TOPIC = "current"
S_PER_H = 3600.0
S_PER_DAY = 86400.0
IE, IN, IK, ID = 0, 1, 2, 3  # state indices


MANOEUVRE_SAMPLE_S = 10.0  # spacing of the course/speed history that detects a manoeuvre


def chi2_quantile_2dof(p: float) -> float:
    """Chi-square quantile with 2 degrees of freedom: -2 ln(1 - p), exact.

    With 2 degrees of freedom the chi-square distribution is exponential with mean 2
    (Abramowitz & Stegun 26.4.20; from memory): CDF 1 - exp(-x/2). p = 0.9973 gives 11.83.
    """
    return -2.0 * math.log1p(-p)


class FilterState:
    """The filter's state vector ``x`` (4 x 1) and covariance ``P`` (4 x 4), as numpy arrays."""

    __slots__ = ("x", "P")

    def __init__(self) -> None:
        self.x = np.zeros((4, 1))
        self.P = np.eye(4)


@dataclass(frozen=True)
class CurrentParams:
    """Parameters of the current estimator ([current] in the config)."""

    current_walk_kn_per_sqrt_h: float = param(
        0.4, "kn/sqrt(h)", 0.0, 10.0, "how fast the current may change (random walk, per axis): tidal streams over hours")
    stw_scale_walk_per_sqrt_h: float = param(
        0.003, "1/sqrt(h)", 0.0, 0.5, "how fast the log's scale may drift (fouling)")
    heading_offset_walk_deg_per_sqrt_h: float = param(
        0.1, "deg/sqrt(h)", 0.0, 10.0, "how fast the compass offset may drift")
    gnss_velocity_sigma_kn: float = param(0.1, "kn", 0.005, 5.0, "GNSS ground-velocity noise per axis")
    low_sog_kn: float = param(0.5, "kn", 0.0, 5.0, "below this SOG the course is poor: velocity variance inflated")
    low_sog_inflation: float = param(4.0, "", 1.0, 100.0, "factor on the GNSS velocity sigma below low_sog_kn")
    log_sigma_kn: float = param(0.1, "kn", 0.005, 5.0, "noise of the log speed averaged over one fix interval")
    heading_sigma_deg: float = param(1.5, "deg", 0.05, 30.0, "noise of the heading averaged over one fix interval")
    leeway_coefficient: float = param(
        0.0, "deg kn^2 / deg", 0.0, 50.0, "K in leeway = K * heel / STW^2 (rule of thumb); 0: no leeway")
    leeway_sigma_fraction: float = param(0.5, "", 0.0, 2.0, "uncertainty of the leeway angle as a fraction of it")
    leeway_max_deg: float = param(15.0, "deg", 0.0, 45.0, "leeway angle clamp")
    leeway_min_stw_kn: float = param(1.5, "kn", 0.1, 10.0, "below this STW no leeway is applied (the rule diverges)")
    initial_stw_scale_sigma: float = param(0.05, "", 0.001, 0.5, "prior sigma of the log scale with no calibration")
    initial_heading_offset_sigma_deg: float = param(3.0, "deg", 0.05, 45.0, "prior sigma of the heading offset")
    calibration_age_stw_scale_per_sqrt_day: float = param(
        0.01, "1/sqrt(day)", 0.0, 1.0, "growth of a saved log-scale sigma with its age")
    calibration_age_heading_deg_per_sqrt_day: float = param(
        0.5, "deg/sqrt(day)", 0.0, 45.0, "growth of a saved heading-offset sigma with its age")
    calibrated_stw_scale_sigma: float = param(
        0.01, "", 0.0001, 0.5, "log scale counts as calibrated below this sigma (2 sigma: 2 % of STW)")
    calibrated_heading_offset_sigma_deg: float = param(
        0.75, "deg", 0.01, 45.0, "heading offset counts as calibrated below this sigma (2 sigma: 1.5 deg)")
    min_course_change_deg: float = param(
        60.0, "deg", 10.0, 180.0, "course change that calibrates (quoted in the advice); half of it opens the calibration window")
    calibration_window_s: float = param(
        900.0, "s", 60.0, 7200.0, "after a course or speed change, k and d are updated for this long")
    calibration_speed_change_fraction: float = param(0.3, "", 0.05, 1.0, "a relative speed change that opens the window")
    gate_probability: float = param(0.9995, "", 0.9, 0.999999, "chi-square gate on the ground-velocity innovation")
    rejections_before_reset: int = param(8, "fixes", 1, 1000, "a run of this many rejections inflates and accepts")
    reset_current_sigma_kn: float = param(1.0, "kn", 0.05, 10.0, "current sigma added per axis on such a reset")
    nis_window_fixes: float = param(10.0, "fixes", 2.0, 1000.0, "time constant of the NIS average that drives adaptation")
    nis_trigger_ratio: float = param(2.0, "", 1.1, 20.0, "average NIS above this times its expectation (2) inflates Q")
    q_inflation_step: float = param(2.0, "", 1.01, 100.0, "factor on the current's process noise per fix while triggered")
    q_inflation_decay: float = param(0.9, "", 0.1, 1.0, "factor per fix back towards 1 once the NIS is normal")
    q_inflation_max: float = param(400.0, "", 1.0, 1e6, "largest factor on the current's process noise")
    min_fix_interval_s: float = param(0.5, "s", 0.0, 60.0, "a ground velocity closer than this to the last one is a duplicate")
    averaging_window_s: float = param(2.0, "s", 0.1, 60.0, "longest window for the mean heading and log speed before a fix")
    input_timing_sigma_s: float = param(
        1.0, "s", 0.0, 10.0, "uncertain lag between the GNSS velocity and the compass/log means (in R as rate x lag in a long turn)")
    turn_rate_hold_deg_s: float = param(
        2.0, "deg/s", 0.2, 30.0, "a heading rate above this (or a manoeuvre) holds the filter: prediction only")
    turn_hold_max_s: float = param(60.0, "s", 0.0, 600.0, "longest hold through one turn; a longer one is fused")
    jacobian_smoothing_s: float = param(
        30.0, "s", 0.0, 600.0, "time constant of the low-passed log speed and heading used in the Jacobian")
    manoeuvre_heading_deg: float = param(8.0, "deg", 0.5, 90.0, "a heading change beyond this is a manoeuvre (Jacobian follows)")
    manoeuvre_speed_kn: float = param(0.5, "kn", 0.05, 10.0, "a log speed change beyond this is a manoeuvre")
    stale_s: float = param(5.0, "s", 0.5, 600.0, "an input older than this makes the estimate degraded")
    publish_interval_s: float = param(1.0, "s", 1.0, 600.0, "at most one publication per this interval")
    valid_sigma_kn: float = param(0.3, "kn", 0.01, 5.0, "vector sigma of the current below which it is valid")
    unavailable_sigma_kn: float = param(3.0, "kn", 0.1, 50.0, "vector sigma above which the estimate is unavailable")
    current_strong_kn: float = param(2.0, "kn", 0.1, 20.0, "current_strong caution raised at this drift")
    current_strong_clear_kn: float = param(1.7, "kn", 0.0, 20.0, "and cleared below this drift")
    log_dead_kn: float = param(0.3, "kn", 0.0, 5.0, "a log reading below this ...")
    log_dead_sog_kn: float = param(3.0, "kn", 0.5, 20.0, "... while SOG is above this (more than the current expected) is a dead log")
    log_step_kn: float = param(1.0, "kn", 0.1, 20.0, "a log step this large while SOG along the heading holds is suspect")
    log_step_window_s: float = param(10.0, "s", 2.0, 300.0, "window of the log-step comparison")
    log_suspect_hold_s: float = param(5.0, "s", 0.0, 600.0, "a dead log must persist this long before the caution")
    log_recover_s: float = param(120.0, "s", 5.0, 3600.0, "the log must agree this long before it is trusted again")


@dataclass(frozen=True)
class Calibration:
    """The log scale and compass offset, learnt or stated, with their uncertainty.

    ``stw_scale``: true STW = log x stw_scale. ``heading_offset_deg``: true
    heading = heading + offset. Sigmas None mean "the prior's" (a stated
    installation value); ``t_s`` None means "no age" (no inflation).
    """

    stw_scale: float = 1.0
    heading_offset_deg: float = 0.0
    stw_scale_sigma: float | None = None
    heading_offset_sigma_deg: float | None = None
    t_s: float | None = None
    fixes_used: int = 0

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> "Calibration":
        """From a saved dict; unknown keys are ignored, missing ones take defaults; bad values raise ValueError."""
        def num(key: str, default: float | None) -> float | None:
            v = d.get(key, default)
            if v is None:
                return None
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
                raise ValueError(f"calibration {key} = {v!r}: expected a finite number")
            return float(v)
        cal = cls(stw_scale=num("stw_scale", 1.0), heading_offset_deg=num("heading_offset_deg", 0.0),
                  stw_scale_sigma=num("stw_scale_sigma", None),
                  heading_offset_sigma_deg=num("heading_offset_sigma_deg", None),
                  t_s=num("t_s", None), fixes_used=int(num("fixes_used", 0) or 0))
        if not 0.3 <= cal.stw_scale <= 3.0:
            raise ValueError(f"calibration stw_scale = {cal.stw_scale}: expected 0.3 to 3")
        for key in ("stw_scale_sigma", "heading_offset_sigma_deg"):
            if getattr(cal, key) is not None and getattr(cal, key) <= 0.0:
                raise ValueError(f"calibration {key} = {getattr(cal, key)}: expected a positive number")
        return cal


@dataclass(frozen=True, slots=True)
class FusionReport:
    """What one ground-velocity fusion did (the style's step report)."""

    t_s: float
    innovation: tuple[float, float]
    nis: float
    gate: float
    fused: bool
    reason: str = ""


@dataclass(frozen=True, slots=True)
class FilterRecord:
    """State before and after one epoch, for the RTS smoother."""

    t_s: float
    x_prior: np.ndarray
    P_prior: np.ndarray
    x_post: np.ndarray
    P_post: np.ndarray
    restart: bool


@dataclass
class _Health:
    fused: int = 0
    rejected: int = 0
    faults: int = 0
    resets: int = 0
    duplicates: int = 0
    held: int = 0          # epochs not fused because the log was suspect
    turning: int = 0       # epochs predicted through a turn, not fused (see _turn_hold)
    no_inputs: int = 0     # epochs without a heading or a log speed
    bad_inputs: int = 0    # heading/log samples out of range, ignored

    def as_dict(self) -> dict[str, int]:
        return dict(vars(self))


@dataclass
class _WaterInputs:
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


_I4 = np.eye(4)


def _inv2(S: np.ndarray) -> np.ndarray:
    """Inverse of a 2 x 2 matrix (closed form)."""
    a, b, c, d = S.ravel().tolist()
    det = a * d - b * c
    return np.array([[d, -b], [-c, a]]) / det


def _nis(y: np.ndarray, S: np.ndarray) -> float:
    """y' S^-1 y for a 2-vector; NaN when y or S is not finite, or S not positive definite."""
    a, b, c, d = S.ravel().tolist()
    y0, y1 = y[0, 0].item(), y[1, 0].item()
    det = a * d - b * c
    if not (math.isfinite(a + b + c + d + y0 + y1) and det > 0.0 and a > 0.0):
        return math.nan
    return (y0 * (d * y0 - b * y1) + y1 * (a * y1 - c * y0)) / det


def unit(angle_rad: float) -> np.ndarray:
    """(east, north) of a unit vector toward ``angle_rad`` (from north, clockwise)."""
    return np.array([[math.sin(angle_rad)], [math.cos(angle_rad)]])


def d_unit(angle_rad: float) -> np.ndarray:
    """d u / d angle: the unit vector 90 deg to starboard."""
    return np.array([[math.cos(angle_rad)], [-math.sin(angle_rad)]])


def leeway_deg(params: CurrentParams, heel_deg: float | None, stw_kn: float) -> float:
    """Leeway angle, deg (positive: water track clockwise of the heading), by the rule of thumb K*heel/STW^2."""
    if heel_deg is None or params.leeway_coefficient == 0.0 or stw_kn < params.leeway_min_stw_kn:
        return 0.0
    lam = params.leeway_coefficient * heel_deg / (stw_kn * stw_kn)  # lambda = K * heel / STW^2
    return max(-params.leeway_max_deg, min(params.leeway_max_deg, lam))


def ground_velocity_of(sample: Sample) -> tuple[float, float] | None:
    """(east, north) kn from a Fix's or GroundVelocity's SOG/COG; None when there is none."""
    sog = getattr(sample, "sog_kn", None)
    cog = getattr(sample, "cog_deg", None)
    if sog is None or not math.isfinite(sog) or sog < 0.0 or sog > 100.0:
        return None
    if cog is None or not math.isfinite(cog):
        return (0.0, 0.0) if sog < 0.05 else None  # at rest the course does not matter
    return to_east_north(sog, cog)


class CurrentEstimator(EstimatorBase):
    """Set and drift of the current, the log scale and the compass offset (topic "current")."""

    name = "current"
    accepts = (Fix, GroundVelocity, Heading, WaterSpeed, Attitude)

    def __init__(self, params: CurrentParams | None = None, calibration: Calibration | None = None) -> None:
        self.params = params or CurrentParams()
        self.saved = calibration
        self.health = _Health()
        self.ekf: FilterState | None = None
        self.t_filter: float | None = None
        self.t_prev_gv: float | None = None
        self.q_inflation = 1.0
        self.nis_avg = 2.0
        self.consecutive_rejects = 0
        self.last_report: FusionReport | None = None
        self.records: list[FilterRecord] | None = None  # set to [] to keep them (smoother)
        self._seen: dict[str, float] = {}
        self._buf: dict[str, deque[tuple[float, float]]] = {k: deque() for k in ("heading", "water_speed", "heel")}
        self._gate = chi2_quantile_2dof(self.params.gate_probability)
        self._t_last_pub: float | None = None
        self._prior: tuple[float, float, float, float] | None = None  # k, d_rad, sigma_k, sigma_d_rad
        self._strong = Hysteresis(self.params.current_strong_kn,
                                  min(self.params.current_strong_clear_kn, self.params.current_strong_kn * 0.999))
        self._log_checks: deque[tuple[float, float, float, float]] = deque()  # t, log, along-SOG, heading
        self._log_state = "trusted"          # trusted | suspect
        self._log_reason = ""
        self._log_bad_since: float | None = None
        self._log_good_since: float | None = None
        self._log_values: dict[str, float] = {}
        self._log_alert = False
        self._restart_next = False
        self._last_gv: tuple[float, float] | None = None
        self._last_inputs: _WaterInputs | None = None
        self._slow: tuple[float, float, float, float] | None = None  # t, speed, heading unit vector (e, n)
        self._fast: tuple[float, float, float, float] | None = None
        self._turn_since: float | None = None
        self._manoeuvre_hist: deque[tuple[float, float, float, float]] = deque()  # t, heading unit e/n, speed
        self._manoeuvre_arrays: tuple[np.ndarray, np.ndarray, float] = (np.ones(1), np.zeros(1), 0.0)
        self._calibrating = False
        self._calibrating_until = -math.inf

    # -- the protocol ---------------------------------------------------------------

    def step(self, sample: Sample, ctx: Any) -> Sequence[Output]:
        t = sample.t_s
        if not math.isfinite(t):
            self.health.bad_inputs += 1
            return ()
        if isinstance(sample, Heading):
            self._input_seen("heading", t, sample.true_deg, *DIRECTION_DEG)
            return ()
        if isinstance(sample, WaterSpeed):
            self._input_seen("water_speed", t, sample.speed_kn, 0.0, STW_MAX_KN)
            return ()
        if isinstance(sample, Attitude):
            if sample.heel_deg is not None:
                self._input_seen("heel", t, sample.heel_deg, -ATTITUDE_MAX_DEG, ATTITUDE_MAX_DEG)
            return ()
        return self._ground_velocity_epoch(sample, ctx)

    def tick(self, t_s: float, ctx: Any) -> Sequence[Output]:
        if self._t_last_pub is None or t_s - self._t_last_pub < self.params.publish_interval_s:
            return ()
        return self._publish(t_s)

    # -- inputs ---------------------------------------------------------------------

    def _input_seen(self, kind: str, t: float, value: float, lo: float, hi: float) -> None:
        """An input sample: range-checked (a bad one is counted and ignored), buffered for the fix's means."""
        if not (math.isfinite(value) and lo <= value <= hi):
            self.health.bad_inputs += 1
            return
        buf = self._buf[kind]
        if buf and t < buf[-1][0]:
            return  # late: not part of the history
        self._seen[kind] = t
        buf.append((t, value))
        keep = max(self.params.averaging_window_s, self.params.stale_s) + 1.0
        while buf and buf[0][0] < t - keep:
            buf.popleft()

    def _water_inputs(self, t: float, ctx: Any) -> _WaterInputs | None:
        """Mean log speed and circular-mean heading over the fix interval (at most averaging_window_s).

        The same means SampleHistory.mean_heading_deg gives, from the estimator's own short buffers
        (``_buffer``), so one fix costs O(window) whatever the history keeps.
        """
        p = self.params
        t0 = t - p.averaging_window_s if self.t_prev_gv is None else max(self.t_prev_gv, t - p.averaging_window_s)
        in_window = [v for (ts, v) in self._buf["heading"] if t0 < ts <= t]
        heading = circular_mean_deg(in_window)
        spread = max((abs(wrap_180(v - heading)) for v in in_window), default=0.0) if heading is not None else 0.0
        if heading is None:
            last = self._buf["heading"][-1] if self._buf["heading"] else None
            heading = last[1] if (last is not None and t - last[0] <= p.stale_s) else None
        logs = [v for (ts, v) in self._buf["water_speed"] if t0 < ts <= t]
        if logs:
            speed = sum(logs) / len(logs)
        else:
            last = self._buf["water_speed"][-1] if self._buf["water_speed"] else None
            speed = last[1] if (last is not None and t - last[0] <= p.stale_s) else None
        if heading is None or speed is None:
            return None
        heels = [v for (ts, v) in self._buf["heel"] if t0 < ts <= t]
        w = _WaterInputs(speed, heading, sum(heels) / len(heels) if heels else None, spread_deg=spread)
        self._slow_inputs(t, w)
        return w

    def _slow_inputs(self, t: float, w: _WaterInputs) -> None:
        """Low-pass the log speed and heading for the Jacobian, except in a manoeuvre.

        The log and the compass are inputs with noise: a Jacobian built from the
        noisy readings reads their noise as speed and course changes and "learns"
        k and d from it (errors in variables: k is biased toward zero on a steady
        course). Built from low-passed readings (time constant
        ``jacobian_smoothing_s``), only real, lasting changes inform the
        calibration. In a manoeuvre (a fast EMA of the readings departs from the
        slow one by more than ``manoeuvre_heading_deg`` or ``manoeuvre_speed_kn``,
        far beyond the noise) the slow value follows the readings at once, so the
        Jacobian does not lag a turn. The innovation always uses the fix
        interval's means, with their noise in R.
        """
        p = self.params
        he, hn = to_east_north(1.0, w.heading_deg)
        now = (w.speed_kn, he, hn)
        dt = math.inf if self._slow is None else t - self._slow[0]
        if self._slow is None or dt > 10.0 * max(p.jacobian_smoothing_s, 1.0):
            self._slow = (t, *now)
            self._fast = (t, *now)
        ema = lambda old, tau: tuple(o + (1.0 - math.exp(-dt / tau)) * (v - o) if tau > 0 else v
                                     for o, v in zip(old[1:], now))
        fast = ema(self._fast, 3.0)                                                # EMA, 3 s
        slow = ema(self._slow, p.jacobian_smoothing_s)                             # EMA, jacobian_smoothing_s
        fast_heading = from_east_north(fast[1], fast[2])[1]
        if 0.0 < dt <= 5.0:  # rates of the 3-s EMA: a turn or a speed change, not the readings' noise
            w.turn_rate_deg_s = wrap_180(fast_heading - from_east_north(self._fast[2], self._fast[3])[1]) / dt
            w.speed_rate_kn_s = (fast[0] - self._fast[1]) / dt
        turn = abs(wrap_180(fast_heading - from_east_north(slow[1], slow[2])[1]))
        if turn > p.manoeuvre_heading_deg or abs(fast[0] - slow[0]) > p.manoeuvre_speed_kn:
            slow = now                                                             # a manoeuvre: no lag
        # this epoch's Jacobian uses the slow value *before* this epoch's readings (in a manoeuvre, the
        # readings): their noise is then independent of the gain and cannot nudge k or d one way
        in_manoeuvre = slow is now
        w.manoeuvring = in_manoeuvre
        ref = now if in_manoeuvre else self._slow[1:]
        w.slow_speed_kn = ref[0]
        w.slow_heading_deg = from_east_north(ref[1], ref[2])[1]
        self._slow, self._fast = (t, *slow), (t, *fast)

    # -- one ground-velocity epoch --------------------------------------------------------

    def _ground_velocity_epoch(self, sample: Sample, ctx: Any) -> Sequence[Output]:
        p = self.params
        t = sample.t_s
        g = ground_velocity_of(sample)
        if g is None:
            return ()
        if self.t_prev_gv is not None and t - self.t_prev_gv < p.min_fix_interval_s:
            self.health.duplicates += 1
            return ()
        self._seen["fix"] = t
        inputs = self._water_inputs(t, ctx)
        self.t_prev_gv = t
        self._last_gv = g
        out: list[Output] = []
        if inputs is None:
            self.health.no_inputs += 1
        else:
            self._last_inputs = inputs
            out.extend(self._check_log(t, g, inputs))
            self._fuse_or_hold(t, g, inputs)
        if self._t_last_pub is None or t - self._t_last_pub >= p.publish_interval_s:
            out.extend(self._publish(t))
        return out

    def _fuse_or_hold(self, t: float, g: tuple[float, float], w: _WaterInputs) -> None:
        if self._log_state == "suspect":
            self.health.held += 1
            if self.ekf is not None:
                self._predict(t)
                self._record(t, restart=False)
            return
        if self.ekf is None or self._restart_next:
            self._start(t, g, w)
            return
        self._predict(t)
        self._track_manoeuvres(t, w)
        if self._turn_hold(t, w):
            self.health.turning += 1
            self._record(t, restart=False)
            return
        self._fuse_ground_velocity(t, g, w)

    def _turn_hold(self, t: float, w: _WaterInputs) -> bool:
        """Predict only through a turn (at most ``turn_hold_max_s``).

        In a turn the fix's ground velocity and the interval's mean heading and
        log speed belong to instants up to a second apart (sample times, the
        receiver's and the compass's own lags), and the boat sheds speed: an
        error of rate x lag with the same sign for every fix of the turn, which
        no white R describes. Fused, those fixes teach k and d the lag; the
        information that separates them from the current comes from the steady
        legs on either side, so the filter carries the current across the turn
        on its random walk. A turn longer than the cap (circling) is fused with
        rate x lag in R.
        """
        p = self.params
        turning = w.manoeuvring or abs(w.turn_rate_deg_s) > p.turn_rate_hold_deg_s
        if not turning:
            self._turn_since = None
            return False
        if self._turn_since is None:
            self._turn_since = t
        w.turning = True
        return t - self._turn_since <= p.turn_hold_max_s

    # -- the filter -----------------------------------------------------------------

    def _prior_calibration(self, t: float) -> tuple[float, float, float, float]:
        """(k, d_rad, sigma_k, sigma_d_rad): the saved calibration inflated by its age, or the params' prior."""
        p = self.params
        cal = self.saved or Calibration()
        sk = cal.stw_scale_sigma if cal.stw_scale_sigma is not None else p.initial_stw_scale_sigma
        sd = cal.heading_offset_sigma_deg if cal.heading_offset_sigma_deg is not None else p.initial_heading_offset_sigma_deg
        if cal.t_s is not None:
            age_days = max(0.0, t - cal.t_s) / S_PER_DAY
            sk = math.sqrt(sk ** 2 + p.calibration_age_stw_scale_per_sqrt_day ** 2 * age_days)   # var grows linearly with age
            sd = math.sqrt(sd ** 2 + p.calibration_age_heading_deg_per_sqrt_day ** 2 * age_days)
        return cal.stw_scale, math.radians(cal.heading_offset_deg), sk, math.radians(sd)

    def _start(self, t: float, g: tuple[float, float], w: _WaterInputs) -> None:
        """Start (or restart) the current from this fix, consistently with k's and d's prior."""
        if self._prior is None:
            self._prior = self._prior_calibration(t)
        restart = self.ekf is not None
        if restart:
            k, d = float(self.ekf.x[IK, 0]), float(self.ekf.x[ID, 0])
            sk = max(math.sqrt(self.ekf.P[IK, IK]), self._prior[2], self.params.initial_stw_scale_sigma)
            sd = max(math.sqrt(self.ekf.P[ID, ID]), self._prior[3])
        else:
            k, d, sk, sd = self._prior
        ekf = FilterState()
        s = w.speed_kn
        theta = math.radians(w.heading_deg + leeway_deg(self.params, w.heel_deg, k * s)) + d
        u, n = unit(theta), d_unit(theta)
        z = np.array([[g[0]], [g[1]]])
        ekf.x = np.vstack([z - k * s * u, [[k]], [[d]]])                 # c0 = g - k s u(theta)
        R = self._measurement_cov(g, w, k, theta)
        P = np.zeros((4, 4))
        P[:2, :2] = R + (s * sk) ** 2 * u @ u.T + (k * s * sd) ** 2 * n @ n.T  # cov(c0) through the Jacobian
        P[:2, IK:IK + 1] = -s * sk ** 2 * u                                 # cov(c0, k) = -s u sigma_k^2
        P[:2, ID:ID + 1] = -k * s * sd ** 2 * n                             # cov(c0, d) = -k s n sigma_d^2
        P[IK:IK + 1, :2] = P[:2, IK:IK + 1].T
        P[ID:ID + 1, :2] = P[:2, ID:ID + 1].T
        P[IK, IK], P[ID, ID] = sk ** 2, sd ** 2
        ekf.P = P
        self.ekf = ekf
        self.t_filter = t
        self._restart_next = False
        self.consecutive_rejects = 0
        self.q_inflation, self.nis_avg = 1.0, 2.0
        self._record(t, restart=True)

    def _process_noise(self, dt: float) -> np.ndarray:
        p = self.params
        qc = (p.current_walk_kn_per_sqrt_h ** 2 / S_PER_H) * self.q_inflation        # kn^2/s per axis
        qk = p.stw_scale_walk_per_sqrt_h ** 2 / S_PER_H
        qd = math.radians(p.heading_offset_walk_deg_per_sqrt_h) ** 2 / S_PER_H
        return np.diag([qc * dt, qc * dt, qk * dt, qd * dt])                            # random walk: Q = q dt

    def _predict(self, t: float) -> None:
        dt = max(0.0, t - self.t_filter)
        self.ekf.P = self.ekf.P + self._process_noise(dt)                            # F = I: x = x, P = P + Q
        self.t_filter = t

    def _measurement_cov(self, g: tuple[float, float], w: _WaterInputs, k: float, theta: float) -> np.ndarray:
        """R: GNSS velocity noise plus the log's and the compass's noise through the Jacobian."""
        p = self.params
        sg = p.gnss_velocity_sigma_kn * (p.low_sog_inflation if math.hypot(*g) < p.low_sog_kn else 1.0)
        s = w.speed_kn
        lam = math.radians(leeway_deg(p, w.heel_deg, k * s))
        # heading noise, the leeway's uncertainty and, in a turn, how far the interval's mean heading
        # can be from the heading at the fix (the spread of the headings in the window)
        # ... and, in a turn fused (longer than the hold), the unknown lag between the GNSS velocity and
        # the compass/log means: rate x lag (not on a steady course: there the rate is the readings' noise)
        lag = p.input_timing_sigma_s if w.turning else 0.0
        cross = (k * s) ** 2 * (math.radians(p.heading_sigma_deg) ** 2 + (p.leeway_sigma_fraction * lam) ** 2
                                + math.radians(w.spread_deg) ** 2 + math.radians(w.turn_rate_deg_s * lag) ** 2)
        along = k ** 2 * (p.log_sigma_kn ** 2 + (w.speed_rate_kn_s * lag) ** 2)
        ue, un = math.sin(theta), math.cos(theta)                               # u = u(theta), n = (un, -ue)
        r2 = sg ** 2
        return np.array([[r2 + along * ue * ue + cross * un * un, (along - cross) * ue * un],   # sg^2 I + along u u'
                         [(along - cross) * ue * un, r2 + along * un * un + cross * ue * ue]])  #   + cross n n'

    def _fuse_ground_velocity(self, t: float, g: tuple[float, float], w: _WaterInputs) -> FusionReport:
        """One gated, Joseph-form EKF update with the ground velocity.

        Written out for the 2 x 4 case with plain floats where numpy's small-matrix
        calls cost more than the arithmetic (it runs at 1 Hz on a small computer and
        over whole passages in replay). Every step makes new arrays, never changes
        one in place, so the prior is kept by reference.
        """
        p, ekf = self.params, self.ekf
        x_prior, P_prior = ekf.x, ekf.P
        x, P = x_prior, P_prior
        s = w.speed_kn
        ce, cn, k, d = x[:, 0].tolist()
        theta = math.radians(w.heading_deg + leeway_deg(p, w.heel_deg, k * s)) + d
        R = self._measurement_cov(g, w, k, theta)
        H = self._jacobian(w, k, d)
        y = np.array([[g[0] - ce - k * s * math.sin(theta)],                    # y = z - h(x),
                      [g[1] - cn - k * s * math.cos(theta)]])                   # h(x) = c + k s u(theta)
        PHt = P @ H.T
        S = H @ PHt + R                                                         # S = H P H' + R
        gate = self._gate
        nis = _nis(y, S)                                                        # y' S^-1 y, NaN if S is not usable
        if not math.isfinite(nis):
            self.health.faults += 1
            return self._report(t, y, math.nan, gate, False, "numerical guard", x_prior, P_prior)
        self._adapt(min(nis, 4.0 * gate))
        if nis > gate:
            self.health.rejected += 1
            self.consecutive_rejects += 1
            if self.consecutive_rejects < p.rejections_before_reset:
                return self._report(t, y, nis, gate, False, "gate", x_prior, P_prior)
            self.health.resets += 1
            P = P.copy()
            P[:2, :2] += (p.reset_current_sigma_kn ** 2 + float(y[0, 0] ** 2 + y[1, 0] ** 2) / 2.0) * np.eye(2)  # inflate, then accept
            ekf.P = P_prior = P
            PHt = P @ H.T                                                       # the inflated innovation covariance
            S = H @ PHt + R
        self.consecutive_rejects = 0
        K = PHt @ _inv2(S)                                                      # K = P H' S^-1
        if not self._calibrating:
            K[IK:, :] = 0.0   # Schmidt "consider" states: k, d not updated on a steady course (see _track_manoeuvres)
        x_new = x + K @ y                                                       # x+ = x + K y
        I_KH = _I4 - K @ H
        P_new = I_KH @ P @ I_KH.T + K @ R @ K.T                                 # Joseph form: right for any gain
        P_new = 0.5 * (P_new + P_new.T)
        if not (math.isfinite(float(x_new.sum())) and math.isfinite(float(P_new.sum()))
                and float(P_new.diagonal().min()) > 0.0):
            self.health.faults += 1
            ekf.x, ekf.P = x_prior, P_prior
            return self._report(t, y, nis, gate, False, "numerical guard after update", x_prior, P_prior)
        ekf.x, ekf.P = x_new, P_new
        self.health.fused += 1
        return self._report(t, y, nis, gate, True, "", x_prior, P_prior)

    def _jacobian(self, w: _WaterInputs, k: float, d: float) -> np.ndarray:
        """H = [I, s u(theta), k s du/dtheta] from the low-passed inputs (_slow_inputs)."""
        ss = w.slow_speed_kn
        th = math.radians(w.slow_heading_deg + leeway_deg(self.params, w.heel_deg, k * ss)) + d
        sn, cs = math.sin(th), math.cos(th)
        return np.array([[1.0, 0.0, ss * sn, k * ss * cs],
                         [0.0, 1.0, ss * cs, -k * ss * sn]])

    def _track_manoeuvres(self, t: float, w: _WaterInputs) -> None:
        """Open the calibration window for ``calibration_window_s`` after a manoeuvre.

        Only a change of the water velocity's direction (or, a little, its size)
        separates k and d from the current. On a steady course the filter treats
        k and d as Schmidt "consider" states: their covariance and their
        correlation with the current are propagated exactly (Joseph form), but
        their estimates are not moved. Otherwise a current that changes faster
        than its random walk allows (a current's edge) would be explained away
        as a compass offset or a log scale it had never observed.
        """
        p = self.params
        hist = self._manoeuvre_hist
        he, hn = to_east_north(1.0, w.slow_heading_deg)
        changed = False
        if not hist or t - hist[-1][0] >= MANOEUVRE_SAMPLE_S:  # the low-passed course needs no 1-s history
            hist.append((t, he, hn, w.slow_speed_kn))
            changed = True
        while hist and hist[0][0] < t - p.calibration_window_s:
            hist.popleft()
            changed = True
        if changed:  # every 10 s: the history as arrays, and its speed range
            arr = np.array(hist)
            top = float(arr[:, 3].max())
            self._manoeuvre_arrays = (arr[:, 1].copy(), arr[:, 2].copy(), (top - float(arr[:, 3].min())) / max(0.5, top))
        east, north, sped = self._manoeuvre_arrays
        # turned by half the calibrating course change or more  <=>  cos(turn) = u_then . u_now <= cos(half)
        cos_half = math.cos(math.radians(0.5 * p.min_course_change_deg))
        turned = float((east * he + north * hn).min()) <= cos_half
        if turned or sped >= p.calibration_speed_change_fraction:
            self._calibrating_until = t + p.calibration_window_s
        self._calibrating = t <= self._calibrating_until

    def _adapt(self, nis: float) -> None:
        """Windowed NIS above its expectation (2) -> the current changes faster than Q says: inflate Q."""
        p = self.params
        a = 1.0 / p.nis_window_fixes
        self.nis_avg += a * (nis - self.nis_avg)                               # exponential window mean
        if self.nis_avg > p.nis_trigger_ratio * 2.0:
            self.q_inflation = min(p.q_inflation_max, self.q_inflation * p.q_inflation_step)
        else:
            self.q_inflation = max(1.0, self.q_inflation * p.q_inflation_decay)

    def _report(self, t: float, y: np.ndarray, nis: float, gate: float, fused: bool, reason: str,
                x_prior: np.ndarray, P_prior: np.ndarray) -> FusionReport:
        self.last_report = FusionReport(t, (float(y[0, 0]), float(y[1, 0])), nis, gate, fused, reason)
        if self.records is not None:
            self.records.append(FilterRecord(t, x_prior, P_prior, self.ekf.x.copy(), self.ekf.P.copy(), False))
        return self.last_report

    def _record(self, t: float, restart: bool) -> None:
        if self.records is not None:
            x, P = self.ekf.x.copy(), self.ekf.P.copy()
            self.records.append(FilterRecord(t, x, P, x, P, restart))

    # -- the speed log's health --------------------------------------------------------

    def _check_log(self, t: float, g: tuple[float, float], w: _WaterInputs) -> list[Output]:
        """Dead log (near zero while SOG is not) or a step of the log while SOG along the heading holds."""
        p = self.params
        sog = math.hypot(*g)
        along = float(np.dot(np.array(g), unit(math.radians(w.heading_deg))[:, 0]))
        self._log_checks.append((t, w.speed_kn, along, w.heading_deg))
        while self._log_checks and self._log_checks[0][0] < t - 2.0 * p.log_step_window_s:
            self._log_checks.popleft()
        bad = ""
        if w.speed_kn < p.log_dead_kn and sog > p.log_dead_sog_kn:
            bad = "dead"
            self._log_values = {"log_kn": round(w.speed_kn, 2), "sog_kn": round(sog, 2)}
        elif self._log_step(t):
            bad = "step"
        if bad:
            self._log_good_since = None
            if self._log_state != "suspect":
                self._log_state, self._log_reason, self._log_bad_since = "suspect", bad, t
        elif self._log_state == "suspect":
            if self._log_good_since is None:
                self._log_good_since = t
            elif t - self._log_good_since >= p.log_recover_s:
                self._log_state, self._log_reason, self._log_bad_since = "trusted", "", None
                self._restart_next = self.ekf is not None
        alert = self._log_state == "suspect" and (self._log_reason == "step" or t - self._log_bad_since >= p.log_suspect_hold_s)
        if alert == self._log_alert:
            return []
        self._log_alert = alert
        return [self._log_condition(t, alert)]

    def _log_step(self, t: float) -> bool:
        p = self.params
        recent = [c for c in self._log_checks if c[0] > t - p.log_step_window_s]
        before = [c for c in self._log_checks if c[0] <= t - p.log_step_window_s]
        if len(recent) < 3 or len(before) < 3:
            return False
        mean = lambda rows, i: sum(r[i] for r in rows) / len(rows)
        turn = abs(wrap_180(recent[-1][3] - before[0][3]))
        if turn > 20.0:
            return False  # a course change changes the speed along the heading by itself
        d_log = mean(recent, 1) - mean(before, 1)
        d_along = mean(recent, 2) - mean(before, 2)
        if abs(d_log - d_along) > p.log_step_kn:
            self._log_values = {"log_change_kn": round(d_log, 2), "sog_along_change_kn": round(d_along, 2)}
            return True
        return False

    def _log_condition(self, t: float, active: bool) -> Condition:
        if not active:
            return Condition(t, "log_suspect", CAUTION, False, "The speed log agrees with the GNSS again.", {})
        if self._log_reason == "dead":
            text = (f"Speed log reads {self._log_values.get('log_kn', 0):.1f} kn through the water while the GNSS shows "
                    f"{self._log_values.get('sog_kn', 0):.1f} kn over ground: check the log's paddle wheel or "
                    f"transducer (weed, fouling, a cable). The current estimate is held meanwhile.")
        else:
            text = (f"Speed log changed by {wording.signed(self._log_values.get('log_change_kn', 0))} kn while the "
                    f"speed over ground along the heading changed by "
                    f"{wording.signed(self._log_values.get('sog_along_change_kn', 0))} kn: "
                    f"check the log's paddle wheel or transducer. The current estimate is held meanwhile.")
        return Condition(t, "log_suspect", CAUTION, True, text, dict(self._log_values))

    # -- outputs ---------------------------------------------------------------------

    def _covariance_at(self, t: float) -> np.ndarray:
        """P predicted to ``t`` without changing the filter (for publishing between fixes and in outages)."""
        dt = max(0.0, t - self.t_filter)
        return self.ekf.P + self._process_noise(dt)

    def _stale_inputs(self, t: float) -> list[str]:
        return [k for k in ("fix", "heading", "water_speed") if t - self._seen.get(k, -math.inf) > self.params.stale_s]

    def _quality(self, t: float, sigma_vec: float) -> str:
        if self.ekf is None or sigma_vec > self.params.unavailable_sigma_kn:
            return "unavailable"
        if self._stale_inputs(t) or self._log_state == "suspect":
            return "degraded"
        return "converging" if sigma_vec > self.params.valid_sigma_kn else "valid"

    def _publish(self, t: float) -> list[Output]:
        self._t_last_pub = t
        if self.ekf is None:
            payload = {"set_deg": None, "drift_kn": None, "east_kn": None, "north_kn": None, "set_sigma_deg": None,
                       "drift_sigma_kn": None, "quality": "unavailable", "stw_scale": None, "heading_offset_deg": None,
                       "calibration": self._calibration_words(None), "health": self.health.as_dict()}
            return [Publication(t, TOPIC, payload)]
        P = self._covariance_at(t)
        e, n = float(self.ekf.x[IE, 0]), float(self.ekf.x[IN, 0])
        drift, set_deg = from_east_north(e, n)
        sig_drift, sig_set = polar_sigmas(e, n, P[:2, :2])
        sigma_vec = math.sqrt(P[0, 0] + P[1, 1])
        quality = self._quality(t, sigma_vec)
        cal = self.calibration()
        payload = {
            "set_deg": round(set_deg, 1), "drift_kn": round(drift, 3),
            "east_kn": round(e, 3), "north_kn": round(n, 3),
            "set_sigma_deg": round(sig_set, 1), "drift_sigma_kn": round(sig_drift, 3),
            "quality": quality,
            "stw_scale": round(cal.stw_scale, 4), "heading_offset_deg": round(cal.heading_offset_deg, 2),
            "stw_scale_sigma": round(cal.stw_scale_sigma, 4),
            "heading_offset_sigma_deg": round(cal.heading_offset_sigma_deg, 2),
            "calibration": self._calibration_words(P),
            "stale_inputs": self._stale_inputs(t),
            "log": self._log_state,
            "q_inflation": round(self.q_inflation, 2),
            "health": self.health.as_dict(),
        }
        out: list[Output] = [Publication(t, TOPIC, payload)]
        out.extend(self._strong_condition(t, drift, set_deg, quality))
        return out

    def _strong_condition(self, t: float, drift: float, set_deg: float, quality: str) -> list[Output]:
        was = self._strong.active
        if quality == "valid":
            self._strong.update(drift)
        elif quality == "unavailable":
            self._strong.update(0.0)
        if not self._strong.active:
            if self._strong.active == was:
                return []
            return [Condition(t, "current_strong", CAUTION, False, f"Strong current; eased to {drift:.1f} kn",
                              {"drift_kn": round(drift, 1), "set_deg": round(set_deg)})]
        # said again with each estimate while it lasts: the alert's figures follow the current (rate-limited there)
        text = (f"Current of {drift:.1f} kn setting toward {set_deg:03.0f}° measured: check the tidal stream "
                f"atlas and the chart for the passage ahead.")
        return [Condition(t, "current_strong", CAUTION, True, text,
                          {"drift_kn": round(drift, 1), "set_deg": round(set_deg)})]

    def _calibrated(self) -> tuple[bool, bool]:
        if self.ekf is None:
            return False, False
        p = self.params
        return (math.sqrt(self.ekf.P[IK, IK]) <= p.calibrated_stw_scale_sigma,
                math.degrees(math.sqrt(self.ekf.P[ID, ID])) <= p.calibrated_heading_offset_sigma_deg)

    def _earned(self) -> tuple[bool, bool]:
        """Whether the log scale / the heading offset are known better than their prior."""
        if self.ekf is None or self._prior is None:
            return False, False
        _, _, sk0, sd0 = self._prior
        return self.ekf.P[IK, IK] < sk0 ** 2, self.ekf.P[ID, ID] < sd0 ** 2

    def _calibration_words(self, P: np.ndarray | None) -> dict[str, str]:
        p = self.params
        if self._log_state == "suspect":
            return {"status": "suspended",
                    "advice": "the speed log disagrees with the GNSS; the calibration is held until it agrees again"}
        log_ok, hdg_ok = self._calibrated()
        turn = (f"a course change of {p.min_course_change_deg:.0f} deg or more (a tack, or legs at 90 deg or "
                f"reciprocal), held for a few minutes on each leg,")
        if log_ok and hdg_ok:
            return {"status": "calibrated", "advice": "log scale and heading offset are calibrated; "
                    "further course changes keep them fresh"}
        if log_ok:
            return {"status": "partly calibrated", "advice": f"{turn} would calibrate the heading offset"}
        if hdg_ok:
            return {"status": "partly calibrated", "advice": f"{turn} would calibrate the log scale"}
        return {"status": "not yet calibrated",
                "advice": f"{turn} would calibrate the log scale and the heading offset; a change of speed helps a little"}

    def calibration(self) -> Calibration:
        """The calibration earned so far; a part not yet earned is the prior (saved or stated) with its sigma.

        A part is earned once the filter's sigma is below the prior's (it has learnt something: a better
        estimate than the prior, with its honest sigma); the status words say "calibrated" only below the
        tighter ``calibrated_*`` sigmas. So a calibration whose sigma creeps past those thresholds on a
        long steady passage keeps its learnt value rather than falling back to the prior.
        """
        if self.ekf is None:
            saved = self.saved or Calibration()
            # before any sample there is no "now": the prior at its own age (none), else as first seen
            k, d, sk, sd = self._prior or self._prior_calibration(saved.t_s if saved.t_s is not None else 0.0)
            return Calibration(k, math.degrees(d), sk, math.degrees(sd), saved.t_s, saved.fixes_used)
        log_ok, hdg_ok = self._earned()
        k0, d0, sk0, sd0 = self._prior
        x, P = self.ekf.x, self.ekf.P
        k, sk = (float(x[IK, 0]), math.sqrt(P[IK, IK])) if log_ok else (k0, sk0)
        d, sd = (float(x[ID, 0]), math.sqrt(P[ID, ID])) if hdg_ok else (d0, sd0)
        used = (self.saved.fixes_used if self.saved else 0) + self.health.fused
        return Calibration(k, wrap_180(math.degrees(d)), sk, math.degrees(sd), self.t_filter, used)

    # -- for the smoother, the bench and tests ---------------------------------------------

    def state(self) -> dict[str, float] | None:
        """The filter's own state (not the reported one): current, k, offset and sigmas; None before the start."""
        if self.ekf is None:
            return None
        x, P = self.ekf.x, self.ekf.P
        return {"east_kn": float(x[IE, 0]), "north_kn": float(x[IN, 0]), "stw_scale": float(x[IK, 0]),
                "heading_offset_deg": math.degrees(float(x[ID, 0])), "east_sigma_kn": math.sqrt(P[IE, IE]),
                "north_sigma_kn": math.sqrt(P[IN, IN]), "stw_scale_sigma": math.sqrt(P[IK, IK]),
                "heading_offset_sigma_deg": math.degrees(math.sqrt(P[ID, ID]))}


def polar_sigmas(e: float, n: float, Pc: np.ndarray) -> tuple[float, float]:
    """(drift sigma kn, set sigma deg) from the current's east/north covariance, linearised.

    drift = |c|: J = [e, n] / |c|; set = atan2(e, n): J = [n, -e] / |c|^2 (rad).
    The set sigma is capped at 180 deg where the drift is too small to have a direction.
    """
    d = math.hypot(e, n)
    if d < 1e-6:
        return math.sqrt(max(Pc[0, 0], Pc[1, 1])), 180.0
    jd = np.array([e / d, n / d])
    js = np.array([n / d ** 2, -e / d ** 2])
    sig_d = math.sqrt(max(0.0, float(jd @ Pc @ jd)))
    sig_s = math.degrees(math.sqrt(max(0.0, float(js @ Pc @ js))))
    return sig_d, min(180.0, sig_s)
