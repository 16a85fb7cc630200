"""The current (set and drift), learnt together with the speed log's scale and
the compass's offset, with the uncertainty it honestly has.

Theory of operation
-------------------
State (extended Kalman filter; x and P live in a small ``FilterState``, the predict and the 2 x 4
update are written out here, cheaper than the generic ones)::

    x = [c_e, c_n, k, d]
        c_e, c_n  the current toward east / north, kn (ground frame)
        k         speed-log scale factor: true STW = k * log reading (dimensionless)
        d         heading offset, rad: true heading = heading reading + d

Process model: every state is a random walk (F = I). The current walks at
``current_walk_kn_per_sqrt_h`` per axis (tidal streams turn over hours), or,
where the last hour's measured current shows the water walking slower and no
steady slope, at the walk it shows, down to ``current_walk_floor_kn_per_sqrt_h``
(``CurrentEstimator.filter_rate``): steady water is averaged longer, and the
floor and the change detectors below keep the filter following a change. Fast
at an edge, steady in between: a CUSUM change detector (E. S. Page,
"Continuous inspection schemes", Biometrika 41, 1954) sums each fix's NIS
against that fix's own noise above its expectation less a reference value; while
the sum is above its threshold it inflates the current's process noise step by
step, and the inflation decays back once the sum falls (see ``control._adapt``).
Its threshold sets how rarely it fires on steady water (about once in
exp(0.4 h) fixes), so the steady legs keep the filter's full averaging. A slow
ramp (the first minutes of a current's edge) hardly moves each fix's NIS, so a
mean-shift test reads the last minute's innovations as well: the generalized
likelihood ratio for a constant bias, (sum y)' (sum S)^-1 (sum y) against
chi-square with 2 degrees of freedom (A. S. Willsky and H. L. Jones, "A
generalized likelihood ratio approach to the detection and estimation of jumps
in linear systems", IEEE Trans. Automatic Control 21, 1976;
``fusion.WindowedMeanShift``); while it alarms Q is inflated as while the sum is
above its threshold. It is quiet for ``ramp_quiet_after_turn_s`` after a turn,
where the calibration's error shows as a step of the apparent current that the
calibration fit, not the current's Q, is to take. k and d walk very slowly
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
helps a little). So in the 1-Hz step k and d are Schmidt "consider" states:
their uncertainty and cross-correlation are carried into the current's, their
estimates never moved by a fix. They are learnt by a batch least-squares fit
over the steady legs of a sliding window (``calibration``: one-minute blocks
with effective sample counts for correlated noise, the current as a slowly
varying polynomial, the prior as two observations, the least squares corrected
for the instruments' noise in the readings it regresses on), fused into the filter with
only the information the filter lacks. The filter reports stw_scale and
heading_offset_deg as the prior values until it knows them better than the
prior, and the status "calibrated" only once their sigmas fall below the
``calibrated_*`` thresholds (2 sigma: 2 % of STW, 1.5 deg); until then it says
what would calibrate them.

Correlated noise: each input's noise has a part independent from fix to fix
(white noise averaged over the interval, wave yaw whose swings of a few seconds
average out: ``log_sigma_kn``, ``heading_sigma_deg``) and a first-order
Gauss-Markov part correlated over seconds (a paddle wheel, a compass card:
``log_correlated_sigma_kn`` over ``noise_correlation_s``,
``heading_correlated_sigma_deg`` over ``heading_correlation_s``). Fixes a second
apart are not independent samples of the latter, so its part of R is multiplied
by 2 tau / dt (the effective sample count): R carries each noise's long-run
variance, and the current's sigma holds under that noise without counting the
white part as correlated.

Published sigma: the filter's Q lets the current walk as a strong tidal stream
turns, or at the floor; where the water walks slower, P (rightly the filter's
own, for its gain) is larger than the error variance the filter makes. So beside P the estimator
carries P_pub, the error covariance of this same filter (its gain, its consider
structure, Joseph form for any gain: ``fusion.joseph_with_gain``) if the water
walks at the rate the last ``water_walk_window_h`` of measured current shows
(``walk``: a local level model's likelihood, or a local linear trend's where the
current changes steadily, the upper end of its 50 % likelihood-ratio interval:
a little above the likeliest, ``published_walk_confidence``; never above the
configured walk), plus the change detector's inflation, and if the measurement
noise is what the same blocks show of it (R times the scale read with the walk,
between 1/4 and 1: a realistic seaway's minute means sit at about 0.75 of R's).
Every reset, inflation and restart of P is done to P_pub as well; P - P_pub
stays positive semidefinite. Beside it the filter's lag per unit slope (``walk``):
a filter whose model has no slope lags a steadily changing current by about its
time constant times the slope, so the published covariance of the current is
P_pub's plus that lag's mean square for the slope the trend reads.
``set_sigma_deg``, ``drift_sigma_kn`` and the vector sigma that ``quality`` holds
against its thresholds come from it; the gate, the NIS test, the change
detector, the calibration and the smoother keep P, so every estimate is the same
as without it. The water's walk read for it also sets the filter's own walk
(above, down to the floor), so the smoother's forward pass reads it too.

Honest quality: the NIS of the last ``nis_check_fixes`` fixes against the
covariance the filter uses is tested against its two-sided chi-square bounds
(``estimators.fusion.WindowedNis``, Bar-Shalom et al. 2001, sect. 5.4.2); above
them the quality is 'degraded' with the reason, so 'valid' is said only while
the filter's own statistics say its model fits. Nor while a course change has
narrowed the current's sigma through the consider states' cross-covariance
before the calibration fit has weighed it: 'valid' is also held against the
sigma the present heading alone would give (``publication._sigma_on_this_heading``).

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

import importlib
from typing import Any

from estimators.fusion import FusionReport

from .params import ID, IE, IK, IN, TOPIC, Calibration, CurrentParams, leeway_deg

# The filter's modules need numpy; a config check needs only the parameters above, so these
# names are imported on first use (PEP 562), and reading a config never loads numpy.
_LAZY = {
    "CurrentEstimator": ".estimator", "FilterRecord": ".estimator",
    "FilterState": ".model", "WaterInputs": ".model", "d_unit": ".model",
    "ground_velocity_of": ".model", "jacobian": ".model", "measurement_cov": ".model",
    "unit": ".model",
    "polar_sigmas": ".publication",
}


def __getattr__(name: str) -> Any:
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(importlib.import_module(module, __name__), name)
    globals()[name] = value  # once found, an ordinary attribute
    return value

__all__ = [
    "Calibration", "CurrentEstimator", "FilterState", "CurrentParams", "FilterRecord", "FusionReport", "ID", "IE", "IK", "IN",
    "TOPIC", "WaterInputs", "d_unit", "ground_velocity_of", "jacobian", "leeway_deg",
    "measurement_cov", "polar_sigmas", "unit",
]
