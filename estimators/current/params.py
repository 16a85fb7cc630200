"""The current estimator's parameters ([current] in the config) and the calibration it learns or is given.

Every parameter has a default, a unit and a range (``estimators.params.param``),
checked at start and written into each recording.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from typing import Any

from estimators.params import param

TOPIC = "current"
S_PER_H = 3600.0
S_PER_DAY = 86400.0
IE, IN, IK, ID = 0, 1, 2, 3  # state indices


# Names once in [current] and removed; never reused for something else (an old config naming them is
# refused with the list of keys): calibration_window_s, calibration_speed_change_fraction (the window
# and the speed-change trigger of a calibration learnt at course changes, replaced by the batch fit).
# nis_window_fixes, nis_trigger_ratio (the exponentially windowed NIS that triggered adaptation,
# replaced by the CUSUM change detector: change_reference_nis, change_threshold).
RETIRED = ("calibration_window_s", "calibration_speed_change_fraction", "nis_window_fixes", "nis_trigger_ratio")

MANOEUVRE_SAMPLE_S = 10.0  # spacing of the course/speed history that detects a manoeuvre

@dataclass(frozen=True)
class CurrentParams:
    """Parameters of the current estimator ([current] in the config)."""

    current_walk_kn_per_sqrt_h: float = param(
        0.25, "kn/sqrt(h)", 0.0, 10.0, "how fast the current may change (random walk, per axis): a 3-kn tidal stream turning, within 1 sigma over the filter's memory")
    stw_scale_walk_per_sqrt_h: float = param(
        0.003, "1/sqrt(h)", 0.0, 0.5, "how fast the log's scale may drift (fouling)")
    heading_offset_walk_deg_per_sqrt_h: float = param(
        0.1, "deg/sqrt(h)", 0.0, 10.0, "how fast the compass offset may drift")
    gnss_velocity_sigma_kn: float = param(0.1, "kn", 0.005, 5.0, "GNSS ground-velocity noise per axis")
    low_sog_kn: float = param(0.5, "kn", 0.0, 5.0, "below this SOG the course is poor: velocity variance inflated")
    low_sog_inflation: float = param(4.0, "", 1.0, 100.0, "factor on the GNSS velocity sigma below low_sog_kn")
    log_sigma_kn: float = param(
        0.1, "kn", 0.005, 5.0, "the log speed's noise over one fix interval that is independent from fix to fix")
    log_correlated_sigma_kn: float = param(
        0.11, "kn", 0.0, 5.0, "the log speed's noise correlated over noise_correlation_s (a paddle wheel in a seaway)")
    heading_sigma_deg: float = param(
        1.5, "deg", 0.05, 30.0, "the heading's noise over one fix interval that averages out within seconds (white, wave yaw)")
    heading_correlated_sigma_deg: float = param(
        0.7, "deg", 0.0, 30.0, "the heading's noise correlated over heading_correlation_s (the compass card's swing)")
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
    calibration_block_s: float = param(60.0, "s", 10.0, 900.0, "steady sailing is averaged over blocks this long for the calibration fit")
    calibration_fit_window_h: float = param(3.0, "h", 0.5, 24.0, "the calibration fit uses the steady blocks of this many hours")
    calibration_min_spread_deg: float = param(
        10.0, "deg", 0.0, 180.0, "the fit runs only once the window's steady water tracks differ by this much")
    calibration_fit_every_s: float = param(300.0, "s", 10.0, 7200.0, "how often the calibration is refitted")
    calibration_walk_prior_dof: float = param(
        8.0, "", 0.0, 1000.0, "the calibration fit's model error: current_walk_kn_per_sqrt_h counts as this many residuals against the walk the window's residuals show")
    calibration_fit_probability: float = param(
        0.9995, "", 0.9, 0.999999, "chi-square gate between a calibration fit and the filter's calibration")
    water_walk_window_h: float = param(
        1.0, "h", 0.1, 24.0, "the published sigma's walk of the water is read from the measured current of this many hours")
    water_walk_block_s: float = param(
        60.0, "s", 10.0, 900.0, "the measured current is averaged over blocks this long for that reading (read again as each closes)")
    water_walk_min_blocks: int = param(
        20, "blocks", 3, 10000, "with fewer blocks in the window the published sigma uses current_walk_kn_per_sqrt_h")
    water_walk_confidence: float = param(
        0.95, "", 0.5, 0.9999, "the calibration fit's walk of the water is the upper end of its likelihood-ratio interval at this confidence, and the water's slope counts where a test at it finds one")
    current_walk_floor_kn_per_sqrt_h: float = param(
        0.2, "kn/sqrt(h)", 0.0, 10.0, "the filter's own walk follows the water's, read as for the published sigma, down to this floor (at or above current_walk_kn_per_sqrt_h: always the configured walk)")
    published_walk_confidence: float = param(
        0.5, "", 0.5, 0.9999, "the walk the published sigma assumes is the upper end of its likelihood-ratio interval at this confidence (0.5: a little above the likeliest), at most current_walk_kn_per_sqrt_h")
    noise_correlation_s: float = param(
        3.0, "s", 0.0, 120.0, "correlation time of the log's correlated noise (effective sample count)")
    heading_correlation_s: float = param(
        5.0, "s", 0.0, 120.0, "correlation time of the heading's correlated noise (effective sample count)")
    nis_check_fixes: int = param(120, "fixes", 10, 10000, "window of the NIS consistency test that decides 'degraded'")
    nis_check_probability: float = param(0.999, "", 0.9, 0.999999, "two-sided probability of that test's bounds")
    gate_probability: float = param(0.9995, "", 0.9, 0.999999, "chi-square gate on the ground-velocity innovation")
    rejections_before_reset: int = param(8, "fixes", 1, 1000, "a run of this many rejections inflates and accepts")
    reset_current_sigma_kn: float = param(1.0, "kn", 0.05, 10.0, "current sigma added per axis on such a reset")
    change_reference_nis: float = param(
        2.0, "", 0.1, 50.0, "reference value nu of the CUSUM change detector: NIS above 2 + nu piles up")
    change_threshold: float = param(
        30.0, "", 1.0, 1000.0, "CUSUM threshold h: above it the current's process noise is inflated (false alarm about every exp(0.4 h) fixes)")
    q_inflation_step: float = param(2.0, "", 1.01, 100.0, "factor on the current's process noise per fix while triggered")
    q_inflation_decay: float = param(
        0.985, "", 0.1, 1.0, "factor per fix back towards 1 once the NIS is normal (0.985: from the largest factor to 1 in about 7 minutes, "
        "the span of a sharp current edge's rise)")
    q_inflation_max: float = param(400.0, "", 1.0, 1e6, "largest factor on the current's process noise")
    ramp_window_s: float = param(
        60.0, "s", 5.0, 1800.0, "window of the mean-shift test on the innovations: a mean away from zero (a slow ramp of the current) inflates the process noise as the CUSUM does")
    ramp_probability: float = param(
        0.999, "", 0.9, 0.999999, "that test's chi-square quantile (2 degrees of freedom): the window's mean innovation beyond it is a ramp")
    ramp_quiet_after_turn_s: float = param(
        600.0, "s", 0.0, 7200.0, "that test is quiet this long after a turn (the calibration's error, a step of the apparent current there, is the calibration fit's to take)")
    min_fix_interval_s: float = param(0.5, "s", 0.0, 60.0, "a ground velocity closer than this to the last one is a duplicate")
    averaging_window_s: float = param(2.0, "s", 0.1, 60.0, "longest window for the mean heading and log speed before a fix")
    input_timing_sigma_s: float = param(
        1.0, "s", 0.0, 10.0, "uncertain lag between the GNSS velocity and the compass/log means (in R as rate x lag in a long turn)")
    turn_rate_hold_deg_s: float = param(
        2.0, "deg/s", 0.2, 30.0, "a heading rate above this (or a manoeuvre) holds the filter: prediction only")
    turn_hold_max_s: float = param(60.0, "s", 0.0, 600.0, "longest hold through one turn; a longer one is fused")
    turn_settle_s: float = param(
        30.0, "s", 0.0, 300.0, "the hold lasts this long after a turn ends: the boat regains the speed a tack cost")
    calibration_settle_s: float = param(
        30.0, "s", 0.0, 600.0, "after a calibration fit moves the log scale or the compass offset by more than its new "
        "sigma, or narrows the current's sigma below 2/3, the current is 'converging' this long while the fixes bring "
        "it to the new calibration")
    jacobian_smoothing_s: float = param(
        120.0, "s", 0.0, 600.0, "time constant of the low-passed log speed and heading used in the Jacobian")
    jacobian_steady_s: float = param(
        600.0, "s", 0.0, 3600.0, "on a steady course that low-pass's memory grows from jacobian_smoothing_s to this "
        "(the readings since the last manoeuvre): the current's gain steadies with it")
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


def leeway_deg(params: CurrentParams, heel_deg: float | None, stw_kn: float) -> float:
    """Leeway angle, deg (positive: water track clockwise of the heading), by the rule of thumb K*heel/STW^2."""
    if heel_deg is None or params.leeway_coefficient == 0.0 or stw_kn < params.leeway_min_stw_kn:
        return 0.0
    lam = params.leeway_coefficient * heel_deg / (stw_kn * stw_kn)  # lambda = K * heel / STW^2
    return max(-params.leeway_max_deg, min(params.leeway_max_deg, lam))


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

