"""Whether to fuse, and what the fusion step is given: the control logic of the current filter.

- inputs: the log speed and heading over each fix interval, and their
  low-passed values for the Jacobian (errors in variables, see ``_slow_inputs``);
- turn hold: prediction only through a turn (``_turn_hold``);
- when k and d learn: from the batch fit over steady legs (``calibration``,
  ``_learn_calibration``); in the 1-Hz step they are Schmidt consider states;
- the speed log's health (``_check_log``): a dead or stepping log holds the
  filter and raises ``log_suspect``;
- adaptation and the model check: a CUSUM change detector and the windowed NIS (``_adapt``).

A mixin of ``CurrentEstimator``: it reads and sets the estimator's state.
"""

from __future__ import annotations

import bisect
import math
from typing import Any

import numpy as np

from estimators import wording
from estimators.angles import circular_mean_deg, from_east_north, to_east_north, wrap_180
from estimators.base import CAUTION, Condition, Output

from estimators.fusion import FusionReport

from .calibration import FitResult
from .fusion import fuse, joseph_with_gain
from .model import WaterInputs, leeway_deg
from .params import ID, IK

SETTLE_NARROWING = 2.0 / 3.0  # a fit narrowing the current's published sigma below this holds 'valid' back


class Control:
    """Inputs, turn hold, the calibration window, the log's health and adaptation (see the module doc)."""

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

    def _water_inputs(self, t: float, ctx: Any) -> WaterInputs | None:
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
        w = WaterInputs(speed, heading, sum(heels) / len(heels) if heels else None, spread_deg=spread,
                        interval_s=p.averaging_window_s if self.t_prev_gv is None else t - self.t_prev_gv)
        self._slow_inputs(t, w)
        return w

    def _slow_inputs(self, t: float, w: WaterInputs) -> None:
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

        Why minutes, not seconds: while k and d are known only to their prior, the
        current's gain through the consider states is (P_cc + P_c,kd H_kd') S^-1,
        a small difference of two large terms (H_kd P_kd H_kd' is about 0.2 kn^2 at
        6 kn with 5 % and 3 deg); a Jacobian that wanders with the wave surge and
        the compass swing by 1 % leaves P_c,kd out of step with it and the gain a
        fraction of the conditional one (a jet's edge followed minutes late).

        After a manoeuvre, for ``jacobian_smoothing_s``, the Jacobian follows the
        readings too: the boat regains the speed a tack cost over a minute or two,
        and a low-pass restarted at the slowest moment lagged it by half a knot,
        just when the first fixes on the new heading tell k and d from the current
        (a beat: the current's sigma halved at once while it stayed 0.4 kn off).

        Why longer still on a steady course: that difference of two large terms
        (the Schmidt consider gain, P_c,kd following -H_kd P_kd only at the
        filter's own pace) amplifies any wander of the Jacobian. A 120-s mean
        of the log still wanders about 0.5 % with its noise (the straight leg of the
        current bench), which moved the along-track gain by 12 % (sd), in step
        with the along-track error (correlation +0.14 to +0.18): a gain-weighted
        mean 0.0017 kn above the triangle's, the same sign on every seed. So
        the memory grows with the time since the low-pass (re)started, from
        ``jacobian_smoothing_s`` to ``jacobian_steady_s`` (a running mean at
        first, then an EMA), and an outage does not end it (a gap counts as one
        interval: a course or speed changed across it is a manoeuvre).
        """
        p = self.params
        he, hn = to_east_north(1.0, w.heading_deg)
        now = (w.speed_kn, he, hn)
        dt = math.inf if self._slow is None else t - self._slow[0]
        if self._slow is None or dt > 10.0 * max(p.jacobian_steady_s, p.jacobian_smoothing_s, 1.0):
            self._slow = (t, *now)
            self._fast = (t, *now)
            self._settled_from = t                                                 # the low-pass starts here
        fast = _ema(self._fast, now, dt, 3.0)                                      # EMA, 3 s
        # the low-pass's memory: the readings since it (re)started, at least jacobian_smoothing_s, at most
        # jacobian_steady_s; a gap in the fixes (an outage) is no reason to forget the readings before it (a
        # change across it is a manoeuvre, below), so it counts as one interval of at most stale_s
        memory = min(p.jacobian_steady_s, max(p.jacobian_smoothing_s, t - self._settled_from))
        slow = _ema(self._slow, now, min(dt, p.stale_s), memory)                   # EMA over that memory
        fast_heading = from_east_north(fast[1], fast[2])[1]
        if 0.0 < dt <= 5.0:  # rates of the 3-s EMA: a turn or a speed change, not the readings' noise
            w.turn_rate_deg_s = wrap_180(fast_heading - from_east_north(self._fast[2], self._fast[3])[1]) / dt
            w.speed_rate_kn_s = (fast[0] - self._fast[1]) / dt
        turn = abs(wrap_180(fast_heading - from_east_north(slow[1], slow[2])[1]))
        if turn > p.manoeuvre_heading_deg or abs(fast[0] - slow[0]) > p.manoeuvre_speed_kn:
            slow = now                                                             # a manoeuvre: no lag
            self._settled_from = t + p.jacobian_smoothing_s
        # this epoch's Jacobian uses the slow value *before* this epoch's readings (in a manoeuvre, the
        # readings): their noise is then independent of the gain and cannot nudge k or d one way
        in_manoeuvre = slow is now
        w.manoeuvring = in_manoeuvre
        settling = t < self._settled_from
        if settling:
            slow = now   # the speed recovers after a tack: a low-pass restarted at its end would lag it
        ref = now if (in_manoeuvre or settling) else self._slow[1:]
        w.slow_speed_kn = ref[0]
        w.slow_heading_deg = from_east_north(ref[1], ref[2])[1]
        self._slow, self._fast = (t, *slow), (t, *fast)


    def _fuse_or_hold(self, t: float, g: tuple[float, float], w: WaterInputs) -> None:
        if self._log_state == "suspect":
            self.health.held += 1
            if self._calfit is not None:
                self._calfit.interrupt()
            if self.ekf is not None:
                self._predict(t)
                self._record(t, restart=False)
            return
        if self.ekf is None or self._restart_next:
            self._start(t, g, w)
            return
        self._predict(t)
        if self._turn_hold(t, w):
            self.health.turning += 1
            self._record(t, restart=False)
            self._calfit.interrupt()
            return
        report = self._fuse_ground_velocity(t, g, w)
        self._learn_calibration(t, g, w, report.fused)

    def _turn_hold(self, t: float, w: WaterInputs) -> bool:
        """Predict only through a turn (at most ``turn_hold_max_s``).

        In a turn the fix's ground velocity and the interval's mean heading and
        log speed belong to instants up to a second apart (sample times, the
        receiver's and the compass's own lags), and the boat sheds speed: an
        error of rate x lag with the same sign for every fix of the turn, which
        no white R describes. Fused, those fixes teach k and d the lag; the
        information that separates them from the current comes from the steady
        legs on either side, so the filter carries the current across the turn
        on its random walk. A turn longer than the cap (circling) is fused with
        rate x lag in R. The hold lasts ``turn_settle_s`` beyond the turn: the boat
        regains the speed a tack cost (on a beat the first fixes after the turn,
        the log rising 1 kn in 4 s, moved the current 0.3 kn the wrong way just
        as the new heading halved its sigma: 'valid' and 0.4 kn off).
        """
        p = self.params
        turning = w.manoeuvring or abs(w.turn_rate_deg_s) > p.turn_rate_hold_deg_s
        if not turning:
            self._turn_since = None
            if t < self._turn_ended + p.turn_settle_s:
                w.turning = True    # settling: the log speed recovers by a knot in seconds, rate x lag again
                return True
            return False
        if self._turn_since is None:
            self._turn_since = t
        w.turning = True
        self._turn_ended = t
        return t - self._turn_since <= p.turn_hold_max_s

    def _learn_calibration(self, t: float, g: tuple[float, float], w: WaterInputs, fused: bool) -> None:
        """Feed the steady blocks; every ``calibration_fit_every_s`` refit k and d and fuse what the fit earned.

        See ``calibration``: the fit's (k, d) is fused as a measurement with
        R = (Sigma^-1 - P_kd^-1)^-1 (only the information the filter lacks), in
        the directions where the fit knows more than the filter; elsewhere R is
        so large that the filter keeps what it has. The gate and the covariance
        are that update's; the estimate in those directions is the fit's own
        (``adopt_fit``), since the fit saw every block the filter learnt from.
        """
        fit = self._calfit
        if not fused or w.turning:
            fit.interrupt()
        else:
            k = float(self.ekf.x[IK, 0])
            fit.add(t, g, w.speed_kn, w.heading_deg + leeway_deg(self.params, w.heel_deg, k * w.speed_kn))
        if not fit.due(t):
            return
        x, P = self.ekf.x, self.ekf.P
        result = fit.fit(t, float(x[IK, 0]), float(x[ID, 0]))
        if result is None:
            return
        P_kd = P[IK:, IK:]
        if result.whole:
            self._take_whole_fit(t, result)
            return
        excess = np.linalg.inv(result.cov) - np.linalg.inv(P_kd)            # information the filter lacks
        lam, V = np.linalg.eigh(0.5 * (excess + excess.T))
        if lam.max() <= 0.0:
            return                                                          # the filter knows it already
        R = V @ np.diag(1.0 / np.maximum(lam, 1e-12 * lam.max())) @ V.T    # R = (Sigma^-1 - P_kd^-1)^-1
        H = np.zeros((2, 4))
        H[0, IK], H[1, ID] = 1.0, 1.0
        y = np.array([[result.k - x[IK, 0]], [result.d_rad - x[ID, 0]]])
        up = fuse(x, P, y, H, R, self._cal_gate)
        report = FusionReport(t, (float(y[0, 0]), float(y[1, 0])), up.innovation_var, up.nis, self._cal_gate,
                              up.fused, up.reason)
        self.cal_health.count(report)
        if up.fused:
            pub_before = self.ekf.P_pub
            self.ekf.x, self.ekf.P = adopt_fit(x, P, y, V[:, lam > 0.0]), up.P
            self.ekf.P_pub = joseph_with_gain(self.ekf.P_pub, up.gain, H, R)     # the same step, the filter's gain
            self._record_update(t, x, P)
            self._note_calibration_step(t, x, pub_before)

    def _take_whole_fit(self, t: float, result: FitResult) -> None:
        """A fit whose window holds every block since the filter started: it replaces the filter's (k, d).

        The fit saw all the filter's calibration was learnt from, and the same prior, so its (k, d) and
        covariance are the whole story, narrower or wider than the filter's (a window that shows the water
        walking faster than the first blocks did widens it: fusing only narrower fits would keep the
        first, overconfident one). The current keeps its regression on (k, d), G = P_c,kd P_kd^-1 (the
        conditional distribution of the current given the calibration is unchanged):
            x_kd = z, x_c += G (z - x_kd);  P_kd = Sigma, P_c,kd = G Sigma, P_c = P_c - G P_kd,c + G Sigma G'
        in P and in the published P_pub alike. Gated as a fusion, the fit against the filter's own (k, d) with
        S = P_kd + Sigma: loose, as the two share their data (their difference varies less than that).
        """
        x, P = self.ekf.x, self.ekf.P
        z = np.array([[result.k], [result.d_rad]])
        y = z - x[IK:, :]
        S = P[IK:, IK:] + result.cov
        nis = float((y.T @ np.linalg.solve(S, y))[0, 0])
        fused = nis <= self._cal_gate
        self.cal_health.count(FusionReport(t, (float(y[0, 0]), float(y[1, 0])), (float(S[0, 0]), float(S[1, 1])),
                                           nis, self._cal_gate, fused,
                                           "" if fused else "gate"))
        if not fused:
            return
        pub_before = self.ekf.P_pub
        self.ekf.x = adopt_fit(x, P, y, np.eye(2))
        self.ekf.P = replaced_calibration(P, result.cov)
        self.ekf.P_pub = replaced_calibration(pub_before, result.cov)
        self._record_update(t, x, P)
        self._note_calibration_step(t, x, pub_before)

    def _note_calibration_step(self, t: float, x_before: np.ndarray, pub_before: np.ndarray) -> None:
        """A fit that moved k or d by more than its new sigma, or narrowed the current's published sigma below
        ``SETTLE_NARROWING`` of what it was: the current follows the fit only through its regression on k and
        d, and the fixes of the next seconds bring it the rest of the way (the ordinary passage's first fit
        after a 25-deg course change: 0.4 kn off for 3 s under a sigma of 0.12 kn). An error the old sigma
        allowed, 2 of them, is more than 3 of the new ones below 2/3 of it. Until ``calibration_settle_s``
        has passed the quality is 'converging' (``publication``)."""
        step = self.ekf.x[IK:, 0] - x_before[IK:, 0]
        sigma = np.sqrt(np.diag(self.ekf.P)[IK:])
        narrowed = np.trace(self.ekf.P_pub[:IK, :IK]) < SETTLE_NARROWING ** 2 * np.trace(pub_before[:IK, :IK])
        if narrowed or np.any(np.abs(step) > sigma):
            self._calibration_stepped = t

    def _adapt(self, nis_fix: float, nis: float, ramp: bool) -> None:
        """A change of the current that Q does not describe: a CUSUM on the innovations, or the mean-shift test
        on them (``ramp``), inflates Q.

        ``nis_fix`` is the innovation against one fix's own noise (the detector),
        ``nis`` against the covariance the filter uses, which feeds the consistency
        test (``nis_check``) that takes the quality to 'degraded'.

        Page's one-sided cumulative sum (E. S. Page, "Continuous inspection schemes",
        Biometrika 41, 1954) of the NIS above its expectation (2, chi-square with 2
        degrees of freedom) less a reference value nu::

            g_k = max(0, g_{k-1} + NIS_k - 2 - nu),   alarm while g_k > h

        Under a fitting model the increments drift down by nu on average, so an alarm
        is rare (h = ``change_threshold``: for nu = 2 an average run of about
        exp(0.4 h) fixes between false alarms, 0.4 solving E exp(theta (NIS - 4)) = 1),
        while a jump of the current piles up within a few fixes. While the alarm
        lasts the current's process noise grows by ``q_inflation_step`` per fix; it
        decays back by ``q_inflation_decay`` per fix once the sum has fallen below h.
        The decay is slow (minutes): an edge keeps rising after the alarm, and the
        detector (its reference nu) does not see the lag of a few tenths of a knot
        that a quickly decaying Q would leave behind (the demo's 0.8-nm edge: a
        second alarm and a 0.35-kn lag over the next five minutes with a decay of
        0.9 per fix). While Q is inflated the quality is 'degraded' (publication).

        A slow ramp hardly moves the NIS (a lag of a third of one fix's sigma adds a tenth to it, far below
        nu): the sum piled up only once the edge was steep and the lag large. Its
        mean over ``ramp_window_s`` shows it much sooner (``WindowedMeanShift``: a bias the size of the
        fixes' sigma over a minute's sixty fixes); while that test alarms (``ramp``) Q is inflated as while
        the sum is above h.
        """
        p = self.params
        self.nis_check.add(nis)
        self.cusum = max(0.0, self.cusum + nis_fix - 2.0 - p.change_reference_nis)   # g = max(0, g + NIS - 2 - nu)
        if self.cusum > p.change_threshold or ramp:
            self.q_inflation = min(p.q_inflation_max, self.q_inflation * p.q_inflation_step)
        else:
            self.q_inflation = max(1.0, self.q_inflation * p.q_inflation_decay)

    # -- the speed log's health --------------------------------------------------------

    def _check_log(self, t: float, g: tuple[float, float], w: WaterInputs) -> list[Output]:
        """Dead log (near zero while SOG is not) or a step of the log while SOG along the heading holds."""
        p = self.params
        sog = math.hypot(*g)
        heading = math.radians(w.heading_deg)
        along = g[0] * math.sin(heading) + g[1] * math.cos(heading)  # g . u(heading), in floats
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
        # the rows' columns transposed in C once, split where the recent rows begin and summed as they are:
        # at every fix, about 90 rows, a comparison for each in Python was most of this check's cost (the rows
        # are in time order, as fixes earlier than the last are duplicates: the same split, the same sums)
        times, logs, alongs, headings = zip(*self._log_checks)
        split = bisect.bisect_right(times, t - p.log_step_window_s)          # rows[:split] are the earlier
        n_before, n_recent = split, len(times) - split
        if n_recent < 3 or n_before < 3:
            return False
        turn = abs(wrap_180(headings[-1] - headings[0]))
        if turn > 20.0:
            return False  # a course change changes the speed along the heading by itself
        d_log = sum(logs[split:]) / n_recent - sum(logs[:split]) / n_before
        d_along = sum(alongs[split:]) / n_recent - sum(alongs[:split]) / n_before
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


def _ema(old: tuple[float, float, float, float], now: tuple[float, float, float], dt: float,
         tau: float) -> tuple[float, float, float]:
    """One step of an exponential moving average of (speed, heading east, heading north) over ``dt`` s with
    time constant ``tau`` (none: the readings); ``old`` is (t, speed, east, north). Its factor is worked out
    once for the three, not once each: the same numbers."""
    if not tau > 0:
        return now[0], now[1], now[2]  # the readings, as a new tuple (``_slow_inputs`` tells a manoeuvre by `is now`)
    a = 1.0 - math.exp(-dt / tau)
    _, s, e, n = old
    return s + a * (now[0] - s), e + a * (now[1] - e), n + a * (now[2] - n)


def adopt_fit(x: np.ndarray, P: np.ndarray, y: np.ndarray, informed: np.ndarray) -> np.ndarray:
    """The state with (k, d) moved to the fit's values in the directions where the fit knows more.

    A gain of R = (Sigma^-1 - P_kd^-1)^-1 would blend the fit with the filter's own (k, d), which
    came from earlier fits over the same blocks: their data counted twice, the estimate held back
    toward the older fit (on a beat, a log scale half a percent behind for the half hour after
    the first tack). The fit's window holds all of it, so in the informed directions the filter
    takes the fit's value; the current follows by its regression on (k, d), the conditional mean:
        delta = V V' (z - x_kd),   x_kd += delta,   x_c += P_c,kd P_kd^-1 delta
    """
    delta = informed @ (informed.T @ y)                                     # y = z - x_kd, projected
    out = x.copy()
    out[IK:, :] += delta
    out[:IK, :] += P[:IK, IK:] @ np.linalg.solve(P[IK:, IK:], delta)
    return out


def replaced_calibration(P: np.ndarray, sigma: np.ndarray) -> np.ndarray:
    """P with the calibration's block replaced by ``sigma``, the current's regression on it kept (see ``_take_whole_fit``)."""
    G = P[:IK, IK:] @ np.linalg.inv(P[IK:, IK:])
    out = P.copy()
    out[:IK, :IK] = P[:IK, :IK] - G @ P[IK:, :IK] + G @ sigma @ G.T
    out[:IK, IK:] = G @ sigma
    out[IK:, :IK] = (G @ sigma).T
    out[IK:, IK:] = sigma
    return 0.5 * (out + out.T)
