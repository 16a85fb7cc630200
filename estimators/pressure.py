"""Pressure tendency: the barometer reduced to sea level, filtered, judged as observed and tide-corrected.

Theory of operation
-------------------
Input: station pressure ``p`` (hPa) at the barometer, ``barometer_height_m``
above the sea; air temperature when an air sensor is fitted; fixes for the
latitude and longitude.

1. Reduction to mean sea level with the hypsometric equation for a thin
   layer of dry air:  ``p0 = p · exp(g·h / (R_d · T̄))``, ``T̄`` the layer's
   mean temperature in kelvin (the air temperature at the sensor plus half the
   standard lapse of 6.5 K/km over ``h``; 15 °C without an air sensor). Near
   the surface that is about 0.12 hPa per metre. Humidity (virtual
   temperature) changes it by well under 0.01 hPa for a few metres: ignored.
2. Solar semidiurnal tide: the atmosphere's twice-daily pressure wave is
   removed before the tendency is judged, with the climatological model
   ``S2 = A · cos³(φ) · sin(2θ + σ)``, ``θ`` the local mean solar time as an
   angle (15° an hour from local midnight), ``A = 1.16 hPa``, ``σ = 158°``:
   maxima at about 09:44 and 21:44 local solar time. Those numbers are from
   memory of the Haurwitz & Cowley analyses of station data (Haurwitz 1956;
   Haurwitz & Cowley 1973), not looked up; the equation of time (±16 min) is
   ignored. Until a fix gives a position, no tide is removed; at the first
   fix the filter and its history are moved onto the tide-corrected scale.
3. Filter: a Kalman filter with a local linear trend in time,
   state ``x = [L (hPa, tide-corrected MSL), r (hPa/h)]``,
   ``F = [[1, Δt], [0, 1]]`` (Δt in hours), process noise a random walk of
   the level plus white noise on the rate (continuous white-noise
   acceleration), measurement ``z = p0 − S2``, ``H = [1, 0]``, variance the
   reading noise plus the quantisation step²/12. Each reading is gated on its
   normalised innovation (``gate_sigma``): a gust, a slammed hatch or a
   single spike is rejected and counted. If every reading is rejected for
   ``reset_after_s`` the barometer has really moved: the level is reset to
   the newest reading, the rate kept. A move of ``step_fault_hpa`` or more
   (±20 hPa in minutes) is one no atmosphere makes at sea (the sharpest
   pressure jumps of squall lines are a few hPa: from memory of the mesoscale
   literature): it is a sensor fault (a new or recalibrated sensor, a
   damaged one), counted, flagged in the payload (``sensor_step_hpa``) and
   raised as the caution ``barometer_fault``; the filter is re-initialised
   on the new readings and the histories are moved by the step, so the
   tendency goes on from the new readings and no fall is judged across it.
   A smaller lasting move is taken as weather. Joseph-form update.
4. History: once a minute the filtered level goes into a 25-hour history,
   and the median of the minute's accepted readings into a second one. The
   3-hour tendency is ``L(now) − L(now − 3 h)``: as the barometer on the
   bulkhead shows it, tide included (``tendency_3h_hpa``, WMO's pressure
   tendency), and with the modelled tide removed
   (``tendency_3h_tide_corrected_hpa``).

Judgement:
- Descriptor from the observed 3-hour tendency rounded to 0.1 hPa, with the
  usual marine bands (from memory of the usual marine convention, as in the
  shipping forecasts): steady ≤ 0.1; slowly 0.2–1.5; (plain) rising/falling
  1.6–3.5; quickly 3.6–6.0; very rapidly more than 6.0 hPa in 3 hours.
- Characteristic: WMO code table 0200 (0–8), from the two halves of the
  observed 3-hour trace (see ``characteristic_0200``), published with its
  words (``characteristic_text``).
- ``pressure_fall`` caution when the 3-hour fall is 3.6 hPa or more (rounded
  to 0.1, so from 3.55), upgraded to warning above 6.0 hPa (from 6.05);
  cleared at 3.0 and 5.5 hPa (hysteresis). The fall judged is the larger of
  the observed one and the tide-corrected one: a fall the barometer shows is
  not argued away by a model, and a fall the tide hides is not missed. The
  text says which figure it is and gives the other; its words ("falling
  quickly") are the descriptor's for that figure. While it lasts the figures
  follow the barometer (the alert manager rate-limits the updates).
  Early ``pressure_fall``: from the last hour alone, the least-squares slope
  ``b`` of the minute medians and its standard error ``se``: when even
  ``b + 2·se`` (the fall rate's 2-sigma bound toward zero) implies 3.6 hPa
  or more in 3 hours, i.e. ``−3 h · (b + 2·se) ≥ 3.6 hPa``, the caution is
  raised before three hours of fall have been seen. The measure the
  hysteresis sees is the larger of the measured fall and that implied fall.
  Raised that way, the text says it is a rate ("falling at 2.1 hPa/h over the
  last hour") and gives the 3-hour change so far; it does not call it
  "falling quickly".
- ``rapid_deepening`` warning: when the largest fall to now within the last
  24 hours reaches ``24 hPa · sin|φ| / sin 60°`` (Sanders & Gyakum 1980,
  the latitude-scaled explosive deepening rate; 13.9 hPa at 30°, 19.6 at 45°,
  24 at 60°). That criterion is for a low's central pressure; a boat sailing
  toward a low also measures its own track through the pressure field, and
  the text says so. Not judged equatorward of ``rapid_min_lat_deg``; judged
  on the tide-corrected trace.
"""

from __future__ import annotations

import math
import statistics
from collections import deque
from collections.abc import Sequence
from dataclasses import dataclass

from estimators.limits import PRESSURE_HPA, within
from estimators import wording
from estimators.base import CAUTION, WARNING, Condition, Context, EstimatorBase, Output, Publication
from estimators.fusion import FusionReport
from estimators.params import param
from estimators.samples import AirTemperature, Fix, Pressure
from estimators.thresholds import Hysteresis

G0 = 9.80665  # standard gravity, m/s² (CGPM 1901)
R_DRY = 287.05  # specific gas constant of dry air, J/(kg·K)
LAPSE_K_PER_M = 0.0065  # standard-atmosphere lapse rate (ICAO)
KELVIN = 273.15


@dataclass(frozen=True)
class PressureParams:
    """Parameters of the pressure tendency ([pressure] in the config)."""

    publish_interval_s: float = param(10.0, "s", 10.0, 600.0, "pressure is published at most this often")
    sigma_reading_hpa: float = param(0.2, "hPa", 0.01, 5.0, "noise of one reading (gusts, the sensor)")
    resolution_hpa: float = param(0.1, "hPa", 0.0, 1.0, "quantisation step of the readings")
    q_level_hpa2_per_h: float = param(0.01, "hPa²/h", 0.0, 10.0, "random walk of the level")
    q_rate_hpa2_per_h3: float = param(0.5, "hPa²/h³", 0.001, 100.0, "white noise on the rate's change")
    gate_sigma: float = param(4.0, "sigma", 2.0, 20.0, "innovation gate")
    reset_after_s: float = param(300.0, "s", 30.0, 3600.0, "all readings rejected this long: reset the level")
    default_air_temp_c: float = param(15.0, "°C", -40.0, 50.0, "air temperature for the reduction without a sensor")
    air_temp_max_age_s: float = param(1800.0, "s", 10.0, 86400.0, "an air temperature older than this is not used")
    tide_correction: bool = param(True, doc="remove the solar semidiurnal tide before judging")
    tide_amplitude_hpa: float = param(1.16, "hPa", 0.0, 3.0, "S2 amplitude at the equator (x cos³ latitude)")
    tide_phase_deg: float = param(158.0, "deg", 0.0, 360.0, "S2 phase in sin(2θ + phase)")
    fall_caution_hpa: float = param(3.6, "hPa/3h", 0.5, 20.0, "3-hour fall for the pressure_fall caution")
    fall_warning_hpa: float = param(6.0, "hPa/3h", 1.0, 30.0, "3-hour fall beyond which it is a warning")
    fall_clear_margin_hpa: float = param(0.6, "hPa/3h", 0.1, 5.0, "hysteresis: cleared this much below")
    early_rule: bool = param(True, doc="raise pressure_fall from the last hour's rate (see the module text)")
    early_window_s: float = param(3600.0, "s", 900.0, 10800.0, "window of the early fall rule")
    early_sigma: float = param(2.0, "sigma", 0.0, 5.0, "confidence of the early fall rule")
    rapid_ref_hpa: float = param(24.0, "hPa/24h", 5.0, 60.0, "Sanders-Gyakum rate at 60° latitude")
    rapid_min_lat_deg: float = param(20.0, "deg", 0.0, 60.0, "rapid_deepening is not judged nearer the equator")
    step_fault_hpa: float = param(10.0, "hPa", 3.0, 100.0,
                                  "a lasting jump of this much is a barometer fault, not weather")
    step_fault_hold_s: float = param(3600.0, "s", 60.0, 86400.0,
                                     "the barometer_fault caution shows this long after a jump")


# WMO code table 0200, characteristic of pressure tendency (WMO-No. 306, as remembered; see characteristic_0200)
CHARACTERISTIC_WORDS = {
    0: "increasing, then decreasing; the same as or higher than 3 hours ago",
    1: "increasing, then steady or increasing more slowly; higher than 3 hours ago",
    2: "increasing steadily or unsteadily; higher than 3 hours ago",
    3: "decreasing or steady, then increasing, or increasing more rapidly; higher than 3 hours ago",
    4: "steady; the same as 3 hours ago",
    5: "decreasing, then increasing; the same as or lower than 3 hours ago",
    6: "decreasing, then steady or decreasing more slowly; lower than 3 hours ago",
    7: "decreasing steadily or unsteadily; lower than 3 hours ago",
    8: "steady or increasing, then decreasing, or decreasing more rapidly; lower than 3 hours ago",
}


# ------------------------------------------------------------------ pure helpers


def reduce_to_msl(station_hpa: float, height_m: float, air_temp_c: float) -> float:
    """MSL pressure (hPa) from a reading ``height_m`` above the sea (hypsometric equation)."""
    t_mean_k = air_temp_c + KELVIN + 0.5 * LAPSE_K_PER_M * height_m  # layer mean: sensor temp + half the lapse
    return station_hpa * math.exp(G0 * height_m / (R_DRY * t_mean_k))  # p0 = p·exp(g h / (R_d T̄))


def local_solar_hours(t_s: float, lon_deg: float) -> float:
    """Local mean solar time, hours 0..24 (UTC + longitude/15; no equation of time)."""
    return ((t_s / 3600.0) + lon_deg / 15.0) % 24.0


def solar_tide_hpa(t_s: float, lat_deg: float, lon_deg: float, amplitude_hpa: float = 1.16,
                   phase_deg: float = 158.0) -> float:
    """Climatological solar semidiurnal pressure tide S2 (hPa) at a time and place."""
    theta = math.radians(15.0 * local_solar_hours(t_s, lon_deg))  # θ: 15° per hour from local midnight
    return amplitude_hpa * math.cos(math.radians(lat_deg)) ** 3 * math.sin(2.0 * theta + math.radians(phase_deg))


def sanders_gyakum_hpa(lat_deg: float, ref_hpa: float = 24.0) -> float:
    """24-hour central-pressure fall of explosive deepening at a latitude (hPa)."""
    return ref_hpa * abs(math.sin(math.radians(lat_deg))) / math.sin(math.radians(60.0))


def descriptor(tendency_3h_hpa: float | None) -> str | None:
    """Marine tendency descriptor from a 3-hour change (hPa), judged on its value to 0.1 hPa."""
    if tendency_3h_hpa is None:
        return None
    x = round(abs(tendency_3h_hpa), 1)
    if x <= 0.1:
        return "steady"
    word = "rising" if tendency_3h_hpa > 0 else "falling"
    if x <= 1.5:
        return f"{word} slowly"
    if x <= 3.5:
        return word
    if x <= 6.0:
        return f"{word} quickly"
    return f"{word} very rapidly"


def characteristic_0200(p_3h: float, p_90min: float, p_now: float, steady_hpa: float = 0.1) -> int:
    """WMO code table 0200 (characteristic of pressure tendency) from three points of the trace.

    ``a`` is the change over the first 90 minutes, ``b`` over the last 90 and
    ``Δ = a + b``; a half with ``|change| ≤ steady_hpa`` counts as steady, and
    the second half rising "more slowly" or "more rapidly" means at under half
    or over twice the first half's change. The codes (WMO Manual on Codes,
    table 0200, as remembered):
    0 increasing, then decreasing; same or higher than 3 h ago
    1 increasing, then steady; or increasing, then increasing more slowly; higher
    2 increasing (steadily or unsteadily); higher
    3 decreasing or steady, then increasing; or increasing, then increasing more rapidly; higher
    4 steady; the same as 3 h ago
    5 decreasing, then increasing; same or lower than 3 h ago
    6 decreasing, then steady; or decreasing, then decreasing more slowly; lower
    7 decreasing (steadily or unsteadily); lower
    8 steady or increasing, then decreasing; or decreasing, then decreasing more rapidly; lower
    """
    a, b = p_90min - p_3h, p_now - p_90min
    total = round(p_now - p_3h, 1)
    up_a, down_a = a > steady_hpa, a < -steady_hpa
    up_b, down_b = b > steady_hpa, b < -steady_hpa
    if abs(total) <= steady_hpa:  # the same as three hours ago
        if up_a and down_b:
            return 0
        if down_a and up_b:
            return 5
        return 4
    if total > 0:  # higher
        if up_a and down_b:
            return 0
        if up_a and not up_b:
            return 1
        if up_a and up_b:
            return 1 if b < 0.5 * a else 3 if b > 2.0 * a else 2
        return 3 if up_b else 2  # steady or decreasing, then increasing
    if down_a and up_b:  # lower
        return 5
    if down_a and not down_b:
        return 6
    if down_a and down_b:
        return 6 if b > 0.5 * a else 8 if b < 2.0 * a else 7
    return 8 if down_b else 7  # steady or increasing, then decreasing


def ols_slope(ts_h: Sequence[float], ys: Sequence[float]) -> tuple[float, float]:
    """Least-squares slope (per hour) and its standard error from the residuals."""
    n = len(ts_h)
    tm, ym = sum(ts_h) / n, sum(ys) / n
    stt = sum((t - tm) ** 2 for t in ts_h)
    b = sum((t - tm) * (y - ym) for t, y in zip(ts_h, ys)) / stt  # b = Σ(t-t̄)(y-ȳ) / Σ(t-t̄)²
    rss = sum((y - ym - b * (t - tm)) ** 2 for t, y in zip(ts_h, ys))
    se = math.sqrt(rss / (n - 2) / stt) if n > 2 else math.inf  # se² = s² / Σ(t-t̄)²
    return b, se


# ------------------------------------------------------------------ filter


class LevelTrendFilter:
    """Kalman local linear trend in time: x = [level hPa, rate hPa/h].

    Written out for 2x2 in plain floats (a reading a second for days on a
    small computer); the matrix form is in the comments.
    """

    def __init__(self, q_level: float, q_rate: float) -> None:
        self.q_level, self.q_rate = q_level, q_rate
        self.x: list[float] | None = None
        self.P = [[0.0, 0.0], [0.0, 0.0]]
        self.t_s: float | None = None

    def start(self, t_s: float, level: float, var_level: float, var_rate: float = 4.0) -> None:
        self.x = [level, 0.0]
        self.P = [[var_level, 0.0], [0.0, var_rate]]
        self.t_s = t_s

    def predict(self, t_s: float) -> None:
        dt = max(0.0, (t_s - self.t_s) / 3600.0)  # hours
        if dt == 0.0:
            return
        (p00, p01), (_, p11) = self.P
        q = self.q_rate
        self.x = [self.x[0] + dt * self.x[1], self.x[1]]  # x⁻ = F x, F = [[1, Δt], [0, 1]]
        # P⁻ = F P Fᵀ + Q, Q = q [[Δt³/3, Δt²/2], [Δt²/2, Δt]] + [[q_level Δt, 0], [0, 0]]
        n00 = p00 + 2.0 * dt * p01 + dt * dt * p11 + q * dt**3 / 3.0 + self.q_level * dt
        n01 = p01 + dt * p11 + q * dt * dt / 2.0
        n11 = p11 + q * dt
        self.P = [[n00, n01], [n01, n11]]
        self.t_s = t_s

    def update(self, z: float, r: float, gate_sigma: float) -> FusionReport:
        (p00, p01), (_, p11) = self.P
        nu = z - self.x[0]  # innovation ν = z - H x⁻, H = [1, 0]
        s = p00 + r  # S = H P Hᵀ + R
        gate = gate_sigma * gate_sigma
        if not (math.isfinite(nu) and s > 0.0):
            return FusionReport(self.t_s, (nu,), (s,), math.nan, gate, False, "numerical guard")
        nis = nu * nu / s  # NIS = ν²/S
        if nis > gate:
            return FusionReport(self.t_s, (nu,), (s,), nis, gate, False, "gate")
        k0, k1 = p00 / s, p01 / s  # K = P Hᵀ S⁻¹
        self.x = [self.x[0] + k0 * nu, self.x[1] + k1 * nu]
        # Joseph form P = (I-KH) P (I-KH)ᵀ + K R Kᵀ, with I-KH = [[1-k0, 0], [-k1, 1]]
        a00, a10 = 1.0 - k0, -k1
        n00 = a00 * a00 * p00 + r * k0 * k0
        n01 = a00 * (a10 * p00 + p01) + r * k0 * k1
        n11 = a10 * a10 * p00 + 2.0 * a10 * p01 + p11 + r * k1 * k1
        self.P = [[n00, n01], [n01, n11]]
        return FusionReport(self.t_s, (nu,), (s,), nis, gate, True)


# ------------------------------------------------------------------ the estimator


@dataclass(frozen=True)
class _Minute:
    t_s: float
    level_hpa: float  # filtered, tide-corrected
    tide_hpa: float  # tide removed at that time


class PressureTendency(EstimatorBase):
    """Tide-corrected MSL pressure, its rate and 3-hour tendency; pressure_fall and rapid_deepening."""

    name = "pressure"
    accepts = (Pressure, AirTemperature, Fix)
    _KEEP_S = 25 * 3600.0

    def __init__(self, params: PressureParams | None = None, barometer_height_m: float = 0.0) -> None:
        self.p = params or PressureParams()
        self.height_m = float(barometer_height_m)
        self.kf = LevelTrendFilter(self.p.q_level_hpa2_per_h, self.p.q_rate_hpa2_per_h3)
        self.counts = {"fused": 0, "rejected": 0, "faults": 0, "resets": 0, "step_faults": 0}
        self._step: tuple[float, float] | None = None  # (time, hPa) of the last sensor step
        self.last_report: FusionReport | None = None
        self._air: AirTemperature | None = None
        self._pos: tuple[float, float] | None = None
        self._minutes: deque[_Minute] = deque()
        self._medians: deque[tuple[float, float]] = deque()  # (t_s, median of the minute's accepted z)
        self._minute_z: list[float] = []
        self._minute_index: int | None = None
        self._rejected_since: float | None = None
        self._last_pub_t = -math.inf
        self._last_station: float | None = None
        c = self.p.fall_caution_hpa - 0.05  # thresholds judged on values to 0.1 hPa
        w = self.p.fall_warning_hpa + 0.05
        self._fall = Hysteresis(c, c - self.p.fall_clear_margin_hpa)
        self._very = Hysteresis(w, w - self.p.fall_clear_margin_hpa)
        self._rapid = Hysteresis(1.0, 0.9)
        self._fall_state: tuple[bool, str] = (False, CAUTION)

    # ------------------------------------------------------------------ protocol

    def fusion_health(self) -> dict[str, dict]:
        """Each fusion step's health for the status topic (the shape of ``FusionHealth.as_dict``)."""
        nis = self.last_report.nis if self.last_report is not None else None
        return {"barometer": {**self.counts, "last_nis": None if nis is None or not math.isfinite(nis) else round(nis, 2)}}

    def step(self, sample, ctx: Context) -> Sequence[Output]:
        if isinstance(sample, Pressure):
            return self._on_pressure(sample)
        if isinstance(sample, AirTemperature):
            if math.isfinite(sample.temp_c):
                self._air = sample
            return ()
        if isinstance(sample, Fix):
            self._on_fix(sample)
        return ()

    # ------------------------------------------------------------------ inputs

    def _on_fix(self, fix: Fix) -> None:
        if not (math.isfinite(fix.lat_deg) and math.isfinite(fix.lon_deg)):
            return
        first = self._pos is None
        self._pos = (fix.lat_deg, fix.lon_deg)
        if first and self.p.tide_correction:
            self._move_onto_tide_scale()

    def _move_onto_tide_scale(self) -> None:
        """The first position: what was filtered without a tide now has it removed."""
        if self.kf.x is not None:
            self.kf.x[0] -= self._tide(self.kf.t_s)
        self._minutes = deque(_Minute(m.t_s, m.level_hpa - self._tide(m.t_s), self._tide(m.t_s))
                              for m in self._minutes)
        self._medians = deque((t, z - self._tide(t)) for t, z in self._medians)
        self._minute_z.clear()

    def _tide(self, t_s: float) -> float:
        if self._pos is None or not self.p.tide_correction:
            return 0.0
        return solar_tide_hpa(t_s, self._pos[0], self._pos[1], self.p.tide_amplitude_hpa, self.p.tide_phase_deg)

    def air_temp_c(self, t_s: float) -> float | None:
        """The air temperature used for the reduction, or None when it is the default."""
        a = self._air
        if a is None or t_s - a.t_s > self.p.air_temp_max_age_s:
            return None
        return a.temp_c

    def _on_pressure(self, s: Pressure) -> Sequence[Output]:
        if not math.isfinite(s.station_hpa) or not within(s.station_hpa, PRESSURE_HPA):
            self.counts["faults"] += 1
            return ()
        air = self.air_temp_c(s.t_s)
        msl = reduce_to_msl(s.station_hpa, self.height_m, self.p.default_air_temp_c if air is None else air)
        z = msl - self._tide(s.t_s)  # observation on the tide-corrected scale
        self._last_station = s.station_hpa
        self._fuse(s.t_s, z)
        self._roll_minute(s.t_s)
        if s.t_s - self._last_pub_t < self.p.publish_interval_s:
            return ()
        self._last_pub_t = s.t_s
        return self._judge(s.t_s, air)

    def _fuse(self, t_s: float, z: float) -> None:
        r = self.p.sigma_reading_hpa**2 + self.p.resolution_hpa**2 / 12.0  # R: noise + quantisation q²/12
        if self.kf.x is None:
            self.kf.start(t_s, z, r)
            self.counts["fused"] += 1
            return
        self.kf.predict(t_s)
        rep = self.kf.update(z, r, self.p.gate_sigma)
        self.last_report = rep
        if rep.fused:
            self.counts["fused"] += 1
            self._rejected_since = None
            self._minute_z.append(z)
            return
        self.counts["rejected"] += 1
        if self._rejected_since is None:
            self._rejected_since = t_s
        elif t_s - self._rejected_since >= self.p.reset_after_s:
            self.counts["resets"] += 1  # a lasting move: the barometer was moved, replaced, or failed
            step = z - self.kf.x[0]  # the new readings against the level the filter expected
            if abs(step) >= self.p.step_fault_hpa:
                self._sensor_step(self._rejected_since, step)
            rate_var = self.kf.P[1][1]
            rate = self.kf.x[1]
            self.kf.start(t_s, z, r, rate_var)
            self.kf.x[1] = rate
            self._rejected_since = None

    def _sensor_step(self, t_s: float, step: float) -> None:
        """A jump no atmosphere makes: move the histories by it, so no tendency is judged across it."""
        self.counts["step_faults"] += 1
        self._step = (t_s, step)
        self._minutes = deque(_Minute(m.t_s, m.level_hpa + step, m.tide_hpa) for m in self._minutes)
        self._medians = deque((t, z + step) for t, z in self._medians)

    def _roll_minute(self, t_s: float) -> None:
        """Once a minute: the filtered level and the minute's median into the histories."""
        idx = int(t_s // 60.0)
        if self._minute_index is None:
            self._minute_index = idx
        if idx == self._minute_index:
            return
        self._minute_index = idx
        self._minutes.append(_Minute(t_s, float(self.kf.x[0]), self._tide(t_s)))
        if self._minute_z:
            self._medians.append((t_s - 30.0, statistics.median(self._minute_z)))
            self._minute_z.clear()
        horizon = t_s - self._KEEP_S
        while self._minutes and self._minutes[0].t_s < horizon:
            self._minutes.popleft()
        while self._medians and self._medians[0][0] < horizon:
            self._medians.popleft()

    # ------------------------------------------------------------------ derived values

    def _level_at(self, t_s: float) -> _Minute | None:
        """The minute record nearest ``t_s`` (within 90 s), or None."""
        if not self._minutes or self._minutes[0].t_s > t_s + 60.0:  # not before the history reaches back
            return None
        lo, hi = 0, len(self._minutes) - 1
        while lo < hi:  # first record at or after t_s
            mid = (lo + hi) // 2
            if self._minutes[mid].t_s < t_s:
                lo = mid + 1
            else:
                hi = mid
        best = min((self._minutes[i] for i in (lo - 1, lo) if 0 <= i < len(self._minutes)),
                   key=lambda m: abs(m.t_s - t_s))
        return best if abs(best.t_s - t_s) <= 90.0 else None

    def _tendency(self, t_s: float, span_s: float) -> tuple[float, float] | None:
        """(tide-corrected, as measured) change over ``span_s`` to now, hPa."""
        then = self._level_at(t_s - span_s)
        if then is None:
            return None
        now_level = float(self.kf.x[0])
        corrected = now_level - then.level_hpa
        raw = corrected + self._tide(t_s) - then.tide_hpa
        return corrected, raw

    def _implied_fall_3h(self, t_s: float) -> tuple[float | None, float | None, float | None]:
        """(implied 3-h fall, slope, se) from the last hour's minute medians (early rule)."""
        w = self.p.early_window_s
        if not self.p.early_rule:
            return None, None, None
        pts = [(t, z) for t, z in self._medians if t >= t_s - w]
        if len(pts) < 0.8 * w / 60.0 or pts[-1][0] - pts[0][0] < 0.8 * w:
            return None, None, None
        b, se = ols_slope([(t - t_s) / 3600.0 for t, _ in pts], [z for _, z in pts])
        implied = -3.0 * (b + self.p.early_sigma * se)  # the fall rate's bound toward zero, over 3 h
        return implied, b, se

    def _fall_24h(self) -> float | None:
        """Largest fall to now within the last 24 h (tide-corrected), hPa."""
        if not self._minutes:
            return None
        t_now = self._minutes[-1].t_s
        peak = max(m.level_hpa for m in self._minutes if m.t_s >= t_now - 24 * 3600.0)
        return peak - float(self.kf.x[0])

    def _characteristic(self, t_s: float) -> int | None:
        """WMO 0200 from the observed trace (the filtered level with the tide put back)."""
        a, m = self._level_at(t_s - 3 * 3600.0), self._level_at(t_s - 1.5 * 3600.0)
        if a is None or m is None:
            return None
        return characteristic_0200(a.level_hpa + a.tide_hpa, m.level_hpa + m.tide_hpa,
                                   float(self.kf.x[0]) + self._tide(t_s))

    # ------------------------------------------------------------------ publication and conditions

    def _judge(self, t_s: float, air: float | None) -> list[Output]:
        level, rate = float(self.kf.x[0]), float(self.kf.x[1])
        tide = self._tide(t_s)
        tend = self._tendency(t_s, 3 * 3600.0)
        implied, slope, se = self._implied_fall_3h(t_s)
        fall24 = self._fall_24h()
        char = self._characteristic(t_s)
        step = self._recent_step(t_s)
        payload = {
            "msl_hpa": round(level + tide, 2),
            # to the 0.1 hPa a barometer shows, the figure the descriptor is judged on
            "tendency_3h_hpa": None if tend is None else round(tend[1], 1),  # observed: what the barometer did
            "tendency_3h_tide_corrected_hpa": None if tend is None else round(tend[0], 1),
            "rate_hpa_per_h": round(rate, 3),
            "rate_sigma_hpa_per_h": round(math.sqrt(max(self.kf.P[1][1], 0.0)), 3),
            "descriptor": descriptor(None if tend is None else round(tend[1], 1)),  # from the figure shown
            "characteristic": char,
            "characteristic_text": None if char is None else CHARACTERISTIC_WORDS[char],
            "sensor_step_hpa": None if step is None else round(step[1], 1),
            "air_temp_c": air,
            "station_hpa": self._last_station,
            "tide_hpa": round(tide, 3) if self._pos is not None and self.p.tide_correction else None,
            "msl_tide_corrected_hpa": round(level, 2),
            "rate_1h_hpa_per_h": None if slope is None else round(slope, 3),
            "fall_24h_hpa": None if fall24 is None else round(fall24, 2),
        }
        out: list[Output] = [Publication(t_s, "pressure", payload)]
        out.extend(self._fall_condition(t_s, tend, implied, slope, se))
        out.extend(self._rapid_condition(t_s, fall24))
        out.extend(self._fault_condition(t_s, step))
        return out

    def _recent_step(self, t_s: float) -> tuple[float, float] | None:
        if self._step is None or t_s - self._step[0] > self.p.step_fault_hold_s:
            return None
        return self._step

    def _fault_condition(self, t_s: float, step: tuple[float, float] | None) -> list[Output]:
        if step is None:
            if self._step is None:
                return []
            t0, dp = self._step
            self._step = None
            return [Condition(t_s, "barometer_fault", CAUTION, False,
                              f"Barometer jumped {wording.signed(dp)} hPa at {wording.clock(t0)}; steady since",
                              {"step_hpa": round(dp, 1)})]
        t0, dp = step
        text = (f"Barometer reading jumped {wording.signed(dp)} hPa at {wording.clock(t0)} and stayed there: no "
                f"weather does that in minutes. Taken as a sensor fault, not weather: the tendency goes on from "
                f"the new readings and nothing is judged across the jump, but the pressure shown may be off by "
                f"that much. Check the barometer, its static port and its feed.")
        return [Condition(t_s, "barometer_fault", CAUTION, True, text, {"step_hpa": round(dp, 1)})]

    def _fall_condition(self, t_s: float, tend, implied, slope, se) -> list[Output]:
        """pressure_fall, judged on the larger fall of the observed and the tide-corrected 3-hour change."""
        falls = self._falls(tend)
        which, measured = max(falls, key=lambda f: f[1]) if falls else (None, None)
        measures = [v for v in (measured, implied) if v is not None]
        caution = self._fall.update(max(measures) if measures else None)
        warning = self._very.update(measured) and caution
        state = (caution, WARNING if warning else CAUTION)
        changed, self._fall_state = state != self._fall_state, state
        values = {"fall_3h_hpa": _r(measured, 1), "fall_3h_is": which,
                  "observed_3h_hpa": _r(None if tend is None else tend[1], 1),
                  "tide_corrected_3h_hpa": _r(None if tend is None else tend[0], 1),
                  "implied_fall_3h_hpa": _r(implied, 1), "rate_1h_hpa_per_h": _r(slope, 2),
                  "rate_1h_se_hpa_per_h": _r(se, 2)}
        if not caution:
            if not changed:
                return []
            text = "Pressure fell quickly" + (f"; now {self._three_hours_words(tend)}" if tend else "")
            return [Condition(t_s, "pressure_fall", state[1], False, text, values)]
        if measured is not None and (implied is None or slope is None or measured >= self.p.fall_caution_hpa - 0.05
                                     or measured >= implied):
            seen = f"Pressure fell {measured:.1f} hPa in the last 3 hours {_FIGURE_WORDS[which]}"
            text = (f"{seen}{self._other_figure(which, tend)}: {descriptor(-measured)}. "
                    f"Check the latest forecast and the sky to windward.")
        else:
            minutes = round(self.p.early_window_s / 60.0)
            window = "hour" if minutes == 60 else f"{minutes} min"
            so_far = self._three_hours_words(tend) if tend else "no 3-hour figure yet"
            text = (f"Pressure falling at {-slope:.1f} hPa/h over the last {window}: at least {implied:.1f} hPa in "
                    f"3 hours at that rate (95 % bound); {so_far}. "
                    f"Check the latest forecast and the sky to windward.")
        return [Condition(t_s, "pressure_fall", state[1], True, text, values)]

    def _falls(self, tend) -> list[tuple[str, float]]:
        """(which, fall hPa) for the observed and, where a tide is modelled, the tide-corrected change."""
        if tend is None:
            return []
        out = [("observed", -tend[1])]
        if self._pos is not None and self.p.tide_correction:
            out.append(("tide_corrected", -tend[0]))
        return out

    def _other_figure(self, which: str | None, tend) -> str:
        if tend is None or self._pos is None or not self.p.tide_correction:
            return ""
        if which == "observed":
            return f" ({wording.signed(tend[0])} hPa with the daily pressure tide removed)"
        return f" (the barometer itself shows {wording.signed(tend[1])} hPa)"

    @staticmethod
    def _three_hours_words(tend) -> str:
        return f"the barometer's 3-hour change is {wording.signed(tend[1])} hPa ({descriptor(tend[1])})"

    def _rapid_condition(self, t_s: float, fall24: float | None) -> list[Output]:
        if self._pos is None or fall24 is None or abs(self._pos[0]) < self.p.rapid_min_lat_deg:
            return []
        lat = self._pos[0]
        thr = sanders_gyakum_hpa(lat, self.p.rapid_ref_hpa)
        was = self._rapid.active
        now = self._rapid.update(fall24 / thr)
        values = {"fall_24h_hpa": round(fall24, 1), "threshold_hpa": round(thr, 1), "lat": round(lat, 2)}
        if not now:
            if not was:
                return []
            return [Condition(t_s, "rapid_deepening", WARNING, False,
                              f"Pressure fell at an explosive rate; the 24-hour fall is now {fall24:.1f} hPa, "
                              f"below {thr:.1f} hPa", values)]
        hemi = "N" if lat >= 0 else "S"
        text = (f"Pressure here fell {fall24:.1f} hPa within the last 24 hours (daily tide removed), past {thr:.1f} hPa, the "
                f"explosive-deepening rate at {abs(lat):.0f}°{hemi} (Sanders & Gyakum). That criterion is defined "
                f"for a low's central pressure; the boat's own track through the pressure field adds to what "
                f"is measured here. Check the latest forecast.")
        return [Condition(t_s, "rapid_deepening", WARNING, True, text, values)]


_FIGURE_WORDS = {"observed": "as the barometer shows it",
                 "tide_corrected": "with the daily pressure tide removed"}


def _r(x: float | None, decimals: int) -> float | None:
    return None if x is None else round(x, decimals)
