"""What the current estimator publishes: the payload, its quality, the calibration's words, current_strong.

The sigmas (set, drift, and the vector sigma ``quality`` holds against its
thresholds) come from the published covariance P_pub, not from the filter's P:
the error covariance of this filter if the water walks as fast as the data
says (``walk``), at most as fast as the filter's Q lets it, with the filter's
lag behind the slope the data show added to the current's block (``walk``:
L E[b b'] L'). The filter itself
(its gain, gate, NIS test, change detector) and the smoother keep P.
``quality`` (interface: converging, valid, degraded, unavailable) is what the
filter can vouch for; see ``_quality``. A mixin of ``CurrentEstimator``.
"""

from __future__ import annotations

import math

import numpy as np

from estimators.angles import from_east_north, wrap_180
from estimators.base import CAUTION, Condition, Output, Publication

from .model import walk_variances
from .params import IK, ID, IE, IN, TOPIC, Calibration
from .walk import lag_covariance, lag_predicted


class Publisher:
    """The current topic's payload and the current_strong caution (see the module doc)."""

    def _published_covariance_at(self, t: float) -> tuple[tuple[float, float], tuple[float, float]]:
        """The current's 2 x 2 block of the published covariance P_pub predicted to ``t``, as floats, without
        changing the filter (for publishing between fixes and in outages): F = I, so only Q's diagonal is added, and the
        lag's part (``walk``) with the lag grown by the time since the fix."""
        (pee, pen, _, _), (pne, pnn, _, _) = self.ekf.P_pub[:2].tolist()
        dt = max(0.0, t - self.t_filter)
        qe, qn, _, _ = walk_variances(self.params, dt, current_rate=self.published_rate())
        (le, len_), (_, ln) = lag_covariance(lag_predicted(self.ekf.lag, dt), self.water_walk.slope_moment)
        return (pee + qe + le, pen + len_), (pne + len_, pnn + qn + ln)

    def published_covariance(self) -> np.ndarray:
        """The whole published covariance at the last fix (4 x 4): P_pub with the lag behind the water's slope in
        the current's block (``walk``)."""
        (le, len_), (_, ln) = lag_covariance(self.ekf.lag, self.water_walk.slope_moment)
        return self.ekf.P_pub + np.array([[le, len_, 0.0, 0.0], [len_, ln, 0.0, 0.0], [0.0] * 4, [0.0] * 4])

    def _sigma_on_this_heading(self) -> float:
        """The current's vector sigma without the credit a course change gives it before the calibration fit has
        weighed that change: the part of P_pub that k and d do not explain (the Schur complement) plus what the
        calibration's own covariance makes of the present heading's triangle, H_kd P_kd H_kd'.

        Why: k and d are consider states, so across a course change the filter's cross-covariance lets the first
        fixes on the new heading tell the current from the calibration's error and narrow its sigma at once. Those
        few fixes carry the log's correlated noise and the wave surge the fit averages over its blocks: with a
        log 11 % slow (a draw 2.2 sigma out in the prior) and a 25-degree course change the current read 0.6-0.8
        kn off under a sigma of 0.2, 'valid', for the four minutes until the fit came (tools/bench/NOTES.md, "A
        course change's credit"). Where the calibration is learnt, H_kd P_kd H_kd' is small and this is the
        published sigma; on one course the two are the same.
        """
        if self._h_kd is None:
            return 0.0
        P = self.ekf.P_pub.tolist()
        (a, b), (c, d) = (P[IK][IK], P[IK][ID]), (P[ID][IK], P[ID][ID])   # P_kd
        det = a * d - b * c
        if not det > 0.0:
            return 0.0
        i00, i01, i10, i11 = d / det, -b / det, -c / det, a / det          # P_kd^-1
        h00, h01, h10, h11 = self._h_kd                                    # H_kd: rows east, north
        total = 0.0
        for row, (g0, g1) in ((IE, (h00, h01)), (IN, (h10, h11))):
            p0, p1 = P[row][IK], P[row][ID]                                # this axis's P_c,kd
            explained = p0 * (i00 * p0 + i01 * p1) + p1 * (i10 * p0 + i11 * p1)
            on_heading = g0 * (a * g0 + b * g1) + g1 * (c * g0 + d * g1)
            total += P[row][row] - explained + on_heading
        return math.sqrt(max(0.0, total))

    def _stale_inputs(self, t: float) -> list[str]:
        return [k for k in ("fix", "heading", "water_speed") if t - self._seen.get(k, -math.inf) > self.params.stale_s]

    def _quality(self, t: float, sigma_vec: float, stale: list[str]) -> tuple[str, str]:
        """(quality, why). 'valid' promises: sigma small, fresh inputs, a trusted log, and the filter's
        innovations over the last ``nis_check_fixes`` as large as its model says (the windowed NIS test), and no
        change of the current beyond its model still being caught up with (the CUSUM detector's inflation of Q back to 1)."""
        p = self.params
        if self.ekf is None or sigma_vec > p.unavailable_sigma_kn:
            return "unavailable", "no estimate yet" if self.ekf is None else "uncertainty too large"
        if stale:
            return "degraded", "stale inputs: " + ", ".join(stale)
        if self._log_state == "suspect":
            return "degraded", "the speed log disagrees with the GNSS"
        if self.nis_check.verdict() == "high":
            return "degraded", (f"GNSS, log and compass disagree more than their noise explains: the current may be "
                                f"changing fast or an instrument misreading (mean NIS {self.nis_check.mean:.1f} over "
                                f"the last {p.nis_check_fixes} fixes, expected at most {self.nis_check.high:.1f})")
        if self.q_inflation > 1.0:
            # the change detector's own evidence: the current changed faster than the model's walk, and the
            # filter is still catching up with it (at a sharp edge its estimate lags the truth by more than sigma)
            # words for the crew at the chart table; how far Q is raised is the payload's q_inflation
            return "degraded", ("the current is changing fast (a stream's edge, or the tide turning): the figures "
                                "are catching up and may lag it for some minutes")
        if sigma_vec > p.valid_sigma_kn:
            return "converging", "uncertainty above the valid threshold"
        if self._sigma_on_this_heading() > p.valid_sigma_kn:
            return "converging", ("a course change not yet weighed against the log and compass: the current is "
                                  "settling while the calibration is relearnt")
        if t < self._calibration_stepped + p.calibration_settle_s:
            return "converging", "the log scale or the compass offset has just been relearnt: the current is settling"
        return "valid", ""

    def _publish(self, t: float) -> list[Output]:
        self._t_last_pub = t
        if self.ekf is None:
            payload = {"set_deg": None, "drift_kn": None, "east_kn": None, "north_kn": None, "set_sigma_deg": None,
                       "drift_sigma_kn": None, "quality": "unavailable", "stw_scale": None, "heading_offset_deg": None,
                       "calibration": self._calibration_words(), "health": self.health.as_dict()}
            return [Publication(t, TOPIC, payload)]
        Pc = self._published_covariance_at(t)
        e, n = self.ekf.x[IE:IN + 1, 0].tolist()
        drift, set_deg = from_east_north(e, n)
        sig_drift, sig_set = polar_sigmas(e, n, Pc)
        sigma_vec = math.sqrt(Pc[0][0] + Pc[1][1])
        stale = self._stale_inputs(t)
        quality, why = self._quality(t, sigma_vec, stale)
        k, d, sk, sd = self._learnt()  # ``calibration``'s figures, without its record made each second
        payload = {
            "set_deg": round(set_deg, 1), "drift_kn": round(drift, 3),
            "east_kn": round(e, 3), "north_kn": round(n, 3),
            "set_sigma_deg": round(sig_set, 1), "drift_sigma_kn": round(sig_drift, 3),
            "quality": quality, "quality_reason": why,
            "stw_scale": round(k, 4), "heading_offset_deg": round(wrap_180(math.degrees(d)), 2),
            "stw_scale_sigma": round(sk, 4), "heading_offset_sigma_deg": round(math.degrees(sd), 2),
            "calibration": self._calibration_words(),
            "stale_inputs": stale,
            "log": self._log_state,
            "q_inflation": round(self.q_inflation, 2),
            "water_walk_kn_per_sqrt_h": round(self.water_walk.walk_kn_per_sqrt_h, 3),
            "noise_scale": round(self.water_walk.noise_scale, 2),
            **self._trend_fields(),
            "health": self.health.as_dict(),
        }
        out: list[Output] = [Publication(t, TOPIC, payload)]
        out.extend(self._strong_condition(t, drift, set_deg, quality))
        return out

    def _trend_fields(self) -> dict[str, float | None]:
        """The water's steady change (``walk``: the slope of the last hour's minute means, where evident), kn/h
        east and north: a stream strengthening, easing or turning; null where the hour shows no clear trend."""
        trend = self.water_walk.trend_kn_per_h
        if trend is None:
            return {"water_trend_east_kn_per_h": None, "water_trend_north_kn_per_h": None}
        return {"water_trend_east_kn_per_h": round(trend[0], 2), "water_trend_north_kn_per_h": round(trend[1], 2)}

    def _strong_condition(self, t: float, drift: float, set_deg: float, quality: str) -> list[Output]:
        was = self._strong.active
        # a current found changing fast (Q raised) is followed: its rise into a strong stream is the caution's news
        if quality == "valid" or (quality == "degraded" and self.q_inflation > 1.0 and not self._stale_inputs(t)
                                  and self._log_state != "suspect"):
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

    def _calibration_words(self) -> dict[str, str]:
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
        k, d, sk, sd = self._learnt()
        used = (self.saved.fixes_used if self.saved else 0) + self.health.fused
        return Calibration(k, wrap_180(math.degrees(d)), sk, math.degrees(sd), self.t_filter, used)

    def _learnt(self) -> tuple[float, float, float, float]:
        """(k, d_rad, sigma_k, sigma_d_rad) earned so far, each part the filter's or the prior's (see
        ``calibration``); the filter started."""
        log_ok, hdg_ok = self._earned()
        k0, d0, sk0, sd0 = self._prior
        x, P = self.ekf.x, self.ekf.P
        k, sk = (float(x[IK, 0]), math.sqrt(P[IK, IK])) if log_ok else (k0, sk0)
        d, sd = (float(x[ID, 0]), math.sqrt(P[ID, ID])) if hdg_ok else (d0, sd0)
        return k, d, sk, sd


def polar_sigmas(e: float, n: float, Pc) -> tuple[float, float]:
    """(drift sigma kn, set sigma deg) from the current's east/north covariance ``Pc`` (2 x 2: rows of floats
    or an array), linearised.

    drift = |c|: J = [e, n] / |c|; set = atan2(e, n): J = [n, -e] / |c|^2 (rad).
    The set sigma is capped at 180 deg where the drift is too small to have a direction.
    In floats: two numpy products of a 2-vector cost more than their arithmetic.
    """
    (p00, p01), (p10, p11) = Pc
    d = math.hypot(e, n)
    if d < 1e-6:
        return math.sqrt(max(p00, p11)), 180.0
    sig_d = math.sqrt(max(0.0, _quadratic(e / d, n / d, p00, p01, p10, p11)))
    sig_s = math.degrees(math.sqrt(max(0.0, _quadratic(n / d ** 2, -e / d ** 2, p00, p01, p10, p11))))
    return sig_d, min(180.0, sig_s)


def _quadratic(j0: float, j1: float, p00: float, p01: float, p10: float, p11: float) -> float:
    """j' P j for a 2-vector j, as (j' P) j."""
    return (j0 * p00 + j1 * p10) * j0 + (j0 * p01 + j1 * p11) * j1
