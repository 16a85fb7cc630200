"""The current estimator: the filter's life (start, predict, fuse, restart) and the protocol.

See the package's theory of operation (``estimators.current``).
"""

from __future__ import annotations

import math
from collections import deque
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from estimators.base import EstimatorBase, Output
from estimators.fusion import FusionHealth, FusionReport, WindowedMeanShift, WindowedNis, chi2_quantile
from estimators.limits import ATTITUDE_MAX_DEG, DIRECTION_DEG, STW_MAX_KN
from estimators.samples import Attitude, Fix, GroundVelocity, Heading, Sample, WaterSpeed
from estimators.thresholds import Hysteresis

from .calibration import CalibrationFit
from .control import Control
from .fusion import fuse_rows, innovation_cov_rows, joseph_with_gain_rows, nis2
from .model import (
    FilterState, WaterInputs, d_unit, ground_velocity_of, inflated_rate, jacobian_rows, leeway_deg,
    measurement_cov, measurement_rows, plus_diagonal, unit, walk_variances,
)
from .params import ID, IE, IK, IN, S_PER_DAY, S_PER_H, Calibration, CurrentParams
from .publication import Publisher
from .walk import WaterWalk, lag_predicted, lag_updated


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
class _Health(FusionHealth):
    """The ground-velocity step's counters (``FusionHealth``) and the estimator's own."""

    duplicates: int = 0
    held: int = 0          # epochs not fused because the log was suspect
    turning: int = 0       # epochs predicted through a turn, not fused (see _turn_hold)
    no_inputs: int = 0     # epochs without a heading or a log speed
    bad_inputs: int = 0    # heading/log samples out of range, ignored

    def as_dict(self) -> dict[str, int | float | None]:
        return {**super().as_dict(), "duplicates": self.duplicates, "held": self.held, "turning": self.turning,
                "no_inputs": self.no_inputs, "bad_inputs": self.bad_inputs}


class CurrentEstimator(Control, Publisher, EstimatorBase):
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
        self.cusum = 0.0  # the change detector's cumulative sum (see _adapt)
        self.consecutive_rejects = 0
        self.last_report: FusionReport | None = None
        self.records: list[FilterRecord] | None = None  # set to [] to keep them (smoother)
        self._seen: dict[str, float] = {}
        self._buf: dict[str, deque[tuple[float, float]]] = {k: deque() for k in ("heading", "water_speed", "heel")}
        self._gate = chi2_quantile(self.params.gate_probability, 2)  # chi-square, 2 dof
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
        self._withheld: set[str] = set()  # kinds the runner withholds as lying (see on_distrust)
        self._last_gv: tuple[float, float] | None = None
        self._last_inputs: WaterInputs | None = None
        self._slow: tuple[float, float, float, float] | None = None  # t, speed, heading unit vector (e, n)
        self._fast: tuple[float, float, float, float] | None = None
        self._turn_since: float | None = None
        self._turn_ended = -math.inf    # the last epoch of a turn (the hold's settling, _turn_hold)
        self._calibration_stepped = -math.inf  # the last fit that moved k or d beyond its new sigma (publication)
        self._settled_from = -math.inf  # the Jacobian's low-pass resumes here after a manoeuvre (_slow_inputs)
        self._calfit: CalibrationFit | None = None
        self._h_kd: tuple[float, float, float, float] | None = None  # H's k and d columns at the last fused fix (publication)
        self.water_walk: WaterWalk | None = None  # the walk the published covariance P_pub assumes (see walk)
        self._cal_gate = chi2_quantile(self.params.calibration_fit_probability, 2)
        self._walk_floor = min(self.params.current_walk_floor_kn_per_sqrt_h,   # kn^2/s: filter_rate's floor
                               self.params.current_walk_kn_per_sqrt_h) ** 2 / S_PER_H
        self.cal_health = FusionHealth()  # the calibration fit's fusion step
        self.nis_check = WindowedNis(self.params.nis_check_fixes, 2, self.params.nis_check_probability)
        self.ramp_check = WindowedMeanShift(self.params.ramp_window_s, self.params.ramp_probability)  # see _adapt

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


    def on_distrust(self, kind: str, active: bool, since_s: float) -> None:
        """A compass or log found lying (the runner withholds its samples from now on): what it fed the
        current since the evidence began cannot be believed either. The published sigma says so at once
        (the current's covariance grows by ``reset_current_sigma_kn`` per axis), nothing is fused while
        it lasts, and the current restarts from the first fix once the sensor is trusted again; k and d
        keep what the steady legs taught."""
        if kind not in ("heading", "water_speed"):
            return
        if active:
            self._withheld.add(kind)
            if self.ekf is not None:
                self.ekf.inflate_current(self.params.reset_current_sigma_kn ** 2)
        else:
            self._withheld.discard(kind)
            self._restart_next = self.ekf is not None

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
        inputs = None if self._withheld else self._water_inputs(t, ctx)  # no water track from a lying sensor
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

    # -- the filter ---------------------------------------------------------------

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

    def _start(self, t: float, g: tuple[float, float], w: WaterInputs) -> None:
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
        R = measurement_cov(self.params, g, w, k, theta)
        P = np.zeros((4, 4))
        P[:2, :2] = R + (s * sk) ** 2 * u @ u.T + (k * s * sd) ** 2 * n @ n.T  # cov(c0) through the Jacobian
        P[:2, IK:IK + 1] = -s * sk ** 2 * u                                 # cov(c0, k) = -s u sigma_k^2
        P[:2, ID:ID + 1] = -k * s * sd ** 2 * n                             # cov(c0, d) = -k s n sigma_d^2
        P[IK:IK + 1, :2] = P[:2, IK:IK + 1].T
        P[ID:ID + 1, :2] = P[:2, ID:ID + 1].T
        P[IK, IK], P[ID, ID] = sk ** 2, sd ** 2
        ekf.P = P
        ekf.P_pub = P.copy()
        self.ekf = ekf
        self.t_filter = t
        self._restart_next = False
        self.consecutive_rejects = 0
        self.q_inflation, self.cusum = 1.0, 0.0
        self.nis_check.reset()
        self.ramp_check.reset()
        self._calfit = CalibrationFit(self.params, (k, d, sk, sd))  # blocks of a log trusted again start afresh
        self.water_walk = WaterWalk(self.params)                     # and so does the water's walk
        self._record(t, restart=True)

    def _predict(self, t: float) -> None:
        dt = max(0.0, t - self.t_filter)
        p, ekf = self.params, self.ekf
        ekf.P = plus_diagonal(ekf.P, walk_variances(p, dt, current_rate=self.filter_rate()))    # F = I: x = x, P = P + Q
        ekf.P_pub = plus_diagonal(ekf.P_pub, walk_variances(p, dt, current_rate=self.published_rate()))
        ekf.lag = lag_predicted(ekf.lag, dt)
        self.t_filter = t

    def filter_rate(self) -> float:
        """The current's walk (kn^2/s per axis) the filter's own Q assumes: the water's, as the published sigma
        reads it (``walk``), but not below ``current_walk_floor_kn_per_sqrt_h`` (a reading of still water must
        not stop the filter following a change), the configured walk where the water's slope is evident, and
        the change detector's inflation of the configured walk on top. On steady water the filter averages
        longer than the configured walk allows; at an edge the detectors raise it as before. Adaptive Q by
        covariance matching in spirit (R. K. Mehra, "Approaches to adaptive filtering", IEEE Trans.
        Automatic Control 17, 1972)."""
        water = self.water_walk
        # a steadily changing current: the configured walk (the ceiling), for a filter with no slope to follow it
        rate = water.ceiling if water.trending else max(self._walk_floor, water.rate)
        return inflated_rate(self.params, rate, self.q_inflation)

    def published_rate(self) -> float:
        """The current's walk (kn^2/s per axis) the published covariance P_pub assumes: the water's, read from
        the data (``walk``), with the change detector's inflation of the configured walk on top."""
        return inflated_rate(self.params, self.water_walk.rate, self.q_inflation)

    def _fuse_ground_velocity(self, t: float, g: tuple[float, float], w: WaterInputs) -> FusionReport:
        """Observation, its covariance and the innovation; the fusion step (``fusion.fuse``); a run of rejections.

        A run of ``rejections_before_reset`` rejections by the gate is not a
        lock-out: the current's covariance is inflated and the fix accepted.
        """
        p, ekf = self.params, self.ekf
        x_prior, P_prior = ekf.x, ekf.P
        # x, P, R and H in plain floats for the step (``fusion.fuse_rows``); x and P stay arrays in the filter
        xl, Pl = x_prior[:, 0].tolist(), P_prior.tolist()
        s = w.speed_kn
        ce, cn, k, d = xl
        theta = math.radians(w.heading_deg + leeway_deg(p, w.heel_deg, k * s)) + d
        R = measurement_rows(p, g, w, k, theta)
        h0, h1 = jacobian_rows(p, w, k, d)
        y0 = g[0] - ce - k * s * math.sin(theta)                                # y = z - h(x),
        y1 = g[1] - cn - k * s * math.cos(theta)                                # h(x) = c + k s u(theta)
        # k and d are Schmidt "consider" states: learnt from the calibration fit only (see calibration)
        consider = IK
        up = fuse_rows(x_prior, P_prior, xl, Pl, y0, y1, h0, h1, R, self._gate, consider)
        nis = up.nis
        if math.isfinite(nis):
            # the change detector reads the innovation against one fix's own noise (no allowance for
            # correlation: that would blunt it), the gate and the model check the covariance the filter uses
            S_fix = innovation_cov_rows(Pl, h0, h1, measurement_rows(p, g, w, k, theta, correlated=False))
            # the mean-shift test reads the innovations against the covariance the filter uses (R's long-run
            # variance: a window's sum of correlated noise), an outlier beyond the gate left out of its mean;
            # after a turn the calibration's error is a step of the apparent current, for the calibration fit
            # to take, not the current's Q: the test is quiet for ``ramp_quiet_after_turn_s``
            ramp = self.ramp_check.alarm
            if t - self._turn_ended < p.ramp_quiet_after_turn_s:
                self.ramp_check.reset()
                ramp = False
            elif nis <= self._gate:
                s00, s01, _, s11 = up.innovation_cov   # the fusion step's own S
                ramp = self.ramp_check.add(t, y0, y1, s00, s01, s11)
            self._adapt(min(nis2(y0, y1, S_fix), self._gate), nis, ramp)  # one outlier alone cannot raise the alarm
        if up.reason == "gate":
            self.consecutive_rejects += 1
            if self.consecutive_rejects >= p.rejections_before_reset:
                self.health.rejected += 1
                self.health.resets += 1
                ekf.inflate_current(p.reset_current_sigma_kn ** 2 + (y0 ** 2 + y1 ** 2) / 2.0)
                P_prior = ekf.P                                                 # inflated, then accepted
                up = fuse_rows(x_prior, P_prior, xl, P_prior.tolist(), y0, y1, h0, h1, R, math.inf, consider)
        if up.fused:
            self.consecutive_rejects = 0
            ekf.x, ekf.P = up.x, up.P
            self._h_kd = (h0[IK], h0[ID], h1[IK], h1[ID])
            # the same step, the filter's gain, with the noise the water's blocks show (``walk``)
            scale = self.water_walk.noise_scale
            (r00, r01), (r10, r11) = R                                      # R x scale, written out (2 x 2)
            ekf.P_pub = joseph_with_gain_rows(ekf.P_pub.tolist(), up.gain, h0, h1,
                                              [[r00 * scale, r01 * scale], [r10 * scale, r11 * scale]])
            ekf.lag = lag_updated(ekf.lag, up.gain)                          # H's current columns are I
            if not w.turning:
                self.water_walk.add(t, w.interval_s, g, s, math.degrees(theta - d), R[0][0], R[1][1],
                                    float(up.x[IK, 0]), float(up.x[ID, 0]))
        return self._report(t, (y0, y1), nis, up, x_prior, P_prior)

    def _report(self, t: float, y: tuple[float, float], nis: float, up, x_prior: np.ndarray,
                P_prior: np.ndarray) -> FusionReport:
        report = FusionReport(t, y, up.innovation_var, nis, self._gate, up.fused, up.reason)
        self.health.count(report)
        self.last_report = report
        if self.records is not None:
            self.records.append(FilterRecord(t, x_prior, P_prior, self.ekf.x.copy(), self.ekf.P.copy(), False))
        return report

    def _record_update(self, t: float, x_prior: np.ndarray, P_prior: np.ndarray) -> None:
        """A record of an update outside the ground-velocity step (the calibration fit), for the smoother."""
        if self.records is not None:
            self.records.append(FilterRecord(t, x_prior, P_prior, self.ekf.x.copy(), self.ekf.P.copy(), False))

    def _record(self, t: float, restart: bool) -> None:
        if self.records is not None:
            x, P = self.ekf.x.copy(), self.ekf.P.copy()
            self.records.append(FilterRecord(t, x, P, x, P, restart))

    # -- for the smoother, the bench and tests ---------------------------------------------

    def fusion_health(self) -> dict[str, dict]:
        """Each fusion step's health for the status topic: the ground-velocity step's counters and last NIS."""
        return {"ground_velocity": {**FusionHealth.as_dict(self.health), "held": self.health.held,
                                    "turning": self.health.turning},
                "calibration_fit": self.cal_health.as_dict()}

    def state(self) -> dict[str, float] | None:
        """The filter's own state (not the reported one): current, k, offset and sigmas; None before the start."""
        if self.ekf is None:
            return None
        x, P = self.ekf.x, self.ekf.P
        return {"east_kn": float(x[IE, 0]), "north_kn": float(x[IN, 0]), "stw_scale": float(x[IK, 0]),
                "heading_offset_deg": math.degrees(float(x[ID, 0])), "east_sigma_kn": math.sqrt(P[IE, IE]),
                "north_sigma_kn": math.sqrt(P[IN, IN]), "stw_scale_sigma": math.sqrt(P[IK, IK]),
                "heading_offset_sigma_deg": math.degrees(math.sqrt(P[ID, ID]))}

