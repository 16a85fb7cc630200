"""The instruments: what each sensor would report of the truth, with its errors.

Each sensor samples the true track (interpolated to its own times) and adds
its own errors. Output is a list of ``estimators.samples`` dataclasses in time
order, as the daemon would hand them to the estimators: the heading already
referenced to true north (the compass reading plus variation), the log speed
uncalibrated, pressure at the barometer's height.

Error models (all seeded through one ``numpy.random.Generator``):
- log: reads ``stw_scale`` × the speed along the keel (STW·cos λ), white noise,
  quantised (a log reading 6 % low has ``stw_scale = 0.94``);
- compass: reads ``heading_offset_deg`` more than the true heading, white noise;
  inside a ``heading_frozen`` window it repeats its last reading before the
  window (a fluxgate or a gateway that freezes rather than falls silent);
- GNSS: position error a first-order Gauss–Markov process (σ, τ) per axis,
  SOG/COG from the true ground velocity with white noise per axis; no fix
  inside an outage window; a fix carries SOG/COG like an RMC does;
- sea temperature: truth + a hull warming in the sun (strongest when slow,
  in the middle of the local solar day), noise, quantisation;
- barometer: station pressure from MSL by the ISO 2533 standard atmosphere
  (p = p0·(1 − 2.25577e-5·h)^5.25588), + wind-gust dynamic pressure
  (a fraction of ½ρ(u'² + 2Uu')), single-sample spikes, slow drift, noise,
  quantisation to the sentence's resolution;
- wind vane: apparent wind with angle noise and correlated gusts; the
  instrument's own "true wind" (wind over water) computed from its apparent
  wind, the log and the compass, so it carries their errors, as real ones do.
  The gusts are the air's, not the instrument's: the gusty apparent wind
  (before the vane's angle noise and the hull's yaw) plus the boat's true
  velocity through the water is the true wind over the water, gusts included,
  kept at each vane time as ``GustyAir`` (what a perfect instrument's true
  wind would average; the truth a 10-minute mean and a gust are judged by);
- sounder, heel sensor, air thermometer: truth + noise;
- every kind: independent dropouts with probability ``dropout_prob`` a sample.

The realistic small-boat model (fields off by default, so older scenarios and
the demo passage are unchanged bit for bit; ``REALISTIC`` switches them on
with the values of an ordinary small boat, common practice, from memory):
- log: correlated noise, a first-order Gauss–Markov process (σ, τ of a few
  seconds: a paddle wheel in a seaway), on top of the white noise;
- wave surge: a real oscillation of the speed through the water (±``surge_kn``
  at the wave encounter periods): the log and the GNSS both see it;
- compass: correlated noise (Gauss–Markov, τ about 5 s) beside the white;
- wave yaw: the hull swings ±``wave_yaw_deg`` at the wave periods
  (``wave_period_s``); the compass and the wind vane see it, the water track
  does not (the keel averages it out);
- GNSS latency: a fix is received ``gnss_latency_s`` after its epoch and
  stamped on arrival, as are the heading, log, temperature and wind
  sentences that carry no time of their own.
The speed loss through a tack (40 %) is the helm model's ``turn_speed_loss``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.signal import lfilter

from estimators.angles import wrap_360
from estimators.samples import (
    AirTemperature, ApparentWind, Attitude, Depth, Fix, Heading, Pressure, Sample, SeaTemperature,
    WaterSpeed, WaterWind,
)

from .boat import ANGLE_FIELDS

AIR_DENSITY_KG_M3 = 1.225  # ISO 2533 sea-level density


@dataclass(frozen=True)
class SensorSpec:
    """Sensor errors and rates. Times in UNIX seconds; rates in Hz; periods in s."""

    # speed log
    stw_scale: float = 1.0  # log reading / true speed along the keel (0.94 = 6 % low)
    stw_noise_kn: float = 0.05
    stw_quantum_kn: float = 0.01
    stw_hz: float = 1.0
    # compass (after variation: the daemon's true heading)
    heading_offset_deg: float = 0.0  # compass reads this much more than the true heading
    heading_noise_deg: float = 0.5
    heading_hz: float = 10.0
    heading_frozen: tuple[tuple[float, float], ...] = ()  # (start_s, end_s): the last reading repeats
    # GNSS
    fix_hz: float = 1.0
    position_sigma_m: float = 2.0
    position_tau_s: float = 120.0
    ground_velocity_noise_kn: float = 0.05  # per axis
    hdop: float = 0.9
    gnss_outages: tuple[tuple[float, float], ...] = ()  # (start_s, end_s), no fix in [start, end)
    # sea temperature
    sea_temp_period_s: float = 2.0
    sea_temp_noise_c: float = 0.02
    sea_temp_quantum_c: float = 0.01
    hull_sun_warming_c: float = 0.0  # at local noon, boat stopped
    # barometer and air thermometer
    pressure_period_s: float = 5.0
    pressure_noise_hpa: float = 0.03
    pressure_quantum_hpa: float = 0.1
    barometer_height_m: float = 2.0
    gust_coeff: float = 0.3  # fraction of the gust dynamic pressure the sensor feels
    gust_intensity: float = 0.15  # σ of u'/U
    pressure_spikes: tuple[tuple[float, float], ...] = ()  # (t_s, hPa added to the one sample at/after t)
    baro_drift_hpa_per_h: float = 0.0
    air_temp_noise_c: float = 0.1
    # wind
    wind_hz: float = 1.0
    wind_angle_noise_deg: float = 2.0
    wind_gust_tau_s: float = 8.0
    # sounder, heel
    depth_period_s: float = 2.0
    depth_noise_m: float = 0.05
    attitude_hz: float = 1.0
    heel_noise_deg: float = 0.8
    # every kind
    dropout_prob: float = 0.001
    # the realistic small-boat model (see the module doc; 0 = off)
    stw_correlated_noise_kn: float = 0.0
    stw_noise_tau_s: float = 3.0
    surge_kn: float = 0.0  # wave surge amplitude: a real speed oscillation (log and GNSS see it)
    heading_correlated_noise_deg: float = 0.0
    heading_noise_tau_s: float = 5.0
    wave_yaw_deg: float = 0.0  # wave yaw amplitude: the compass and the vane see it, the water track does not
    wave_period_s: tuple[float, float] = (6.0, 11.0)  # range of the wave encounter periods
    gnss_latency_s: float = 0.0  # a fix is received (and stamped) this long after its epoch

    def in_outage(self, t_s: np.ndarray) -> np.ndarray:
        out = np.zeros(np.shape(t_s), dtype=bool)
        for start, end in self.gnss_outages:
            out |= (t_s >= start) & (t_s < end)
        return out


class TruthInterpolator:
    """Linear interpolation of the truth array at any times (angles through their unwrapped series)."""

    def __init__(self, truth: np.ndarray) -> None:
        self.truth = truth
        self.t = truth["t_s"]
        self._unwrapped = {f: np.unwrap(truth[f], period=360.0) for f in ANGLE_FIELDS}

    def __call__(self, field: str, t_s: np.ndarray | float) -> np.ndarray:
        if field in self._unwrapped:
            return np.mod(np.interp(t_s, self.t, self._unwrapped[field]), 360.0)
        return np.interp(t_s, self.t, self.truth[field])


def sample_times(t0_s: float, duration_s: float, period_s: float, phase_s: float = 0.0) -> np.ndarray:
    """Regular sample times in [t0 + phase, t0 + duration]."""
    n = int(math.floor((duration_s - phase_s) / period_s + 1e-9)) + 1
    return t0_s + phase_s + period_s * np.arange(max(n, 0))


def gauss_markov(rng: np.random.Generator, n: int, dt_s: float, sigma: float, tau_s: float) -> np.ndarray:
    """First-order Gauss–Markov sequence: x_k = a·x_{k−1} + σ√(1−a²)·w_k, a = e^(−dt/τ)."""
    a = math.exp(-dt_s / tau_s)
    w = rng.standard_normal(n) * sigma * math.sqrt(1.0 - a * a)
    w[0] = rng.standard_normal() * sigma  # start in the stationary distribution
    return lfilter([1.0], [1.0, -a], w)


def quantise(x: np.ndarray, q: float) -> np.ndarray:
    return np.round(x / q) * q if q > 0 else x


def station_pressure_hpa(msl_hpa: np.ndarray, height_m: float) -> np.ndarray:
    """Pressure at ``height_m`` above sea level from MSL (ISO 2533 standard atmosphere)."""
    return msl_hpa * (1.0 - 2.25577e-5 * height_m) ** 5.25588


def solar_day_fraction(t_s: np.ndarray, lon_deg: np.ndarray) -> np.ndarray:
    """0 at night, rising to 1 at local solar noon (a half-sine from 06 to 18 solar time)."""
    solar_h = np.mod(t_s / 3600.0 + lon_deg / 15.0, 24.0)
    return np.clip(np.sin(np.pi * (solar_h - 6.0) / 12.0), 0.0, None)


# The realistic small-boat model (common practice, from memory): what an ordinary small boat's
# instruments do in a seaway. Used by the current benchmark's scenarios.
REALISTIC = dict(
    stw_noise_kn=0.1, stw_correlated_noise_kn=0.11, stw_noise_tau_s=3.0,   # about 0.15 kn in all, correlated over seconds
    surge_kn=0.2,
    heading_noise_deg=0.7, heading_correlated_noise_deg=0.7, heading_noise_tau_s=5.0,  # about 1 deg, half and half
    wave_yaw_deg=2.0, wave_period_s=(6.0, 11.0),
    ground_velocity_noise_kn=0.08, gnss_latency_s=0.1,
    heading_hz=5.0,
)

WAVE_COMPONENTS = 3  # sinusoids of random period and phase that make the wave motion


class WaveMotion:
    """Yaw and surge from a few wave components of random period in ``wave_period_s`` and random phase.

    Each of yaw and surge is a sum of ``WAVE_COMPONENTS`` sinusoids with the
    same periods (the same waves) and their own phases, scaled so that its RMS
    is that of one sinusoid of the stated amplitude.
    """

    def __init__(self, spec: SensorSpec, rng: np.random.Generator) -> None:
        lo, hi = spec.wave_period_s
        self.omega = 2.0 * np.pi / rng.uniform(lo, hi, WAVE_COMPONENTS)
        self.yaw_phase = rng.uniform(0.0, 2.0 * np.pi, WAVE_COMPONENTS)
        self.surge_phase = rng.uniform(0.0, 2.0 * np.pi, WAVE_COMPONENTS)
        self.yaw_amp = spec.wave_yaw_deg / math.sqrt(WAVE_COMPONENTS)
        self.surge_amp = spec.surge_kn / math.sqrt(WAVE_COMPONENTS)

    def _sum(self, t: np.ndarray, phase: np.ndarray, amp: float) -> np.ndarray:
        t = np.asarray(t, dtype=float)
        return amp * np.sin(np.multiply.outer(t, self.omega) + phase).sum(axis=-1)

    def yaw_deg(self, t: np.ndarray) -> np.ndarray:
        return self._sum(t, self.yaw_phase, self.yaw_amp)

    def surge_kn(self, t: np.ndarray) -> np.ndarray:
        return self._sum(t, self.surge_phase, self.surge_amp)


@dataclass(frozen=True)
class GustyAir:
    """The true wind over the water, gusts included, at each vane time (UNIX s; air velocity
    *toward*, east and north, kn): the air the simulated vane measured, without its errors."""

    t_s: np.ndarray
    east_kn: np.ndarray
    north_kn: np.ndarray


class _Sensors:
    def __init__(self, truth: np.ndarray, spec: SensorSpec, rng: np.random.Generator) -> None:
        self.at = TruthInterpolator(truth)
        self.spec = spec
        self.rng = rng
        self.t0 = float(truth["t_s"][0])
        self.dur = float(truth["t_s"][-1] - truth["t_s"][0])
        # drawn only when switched on, so a spec without waves keeps its random sequence
        self.waves = WaveMotion(spec, rng) if (spec.wave_yaw_deg or spec.surge_kn) else None
        self.air: GustyAir | None = None  # made with the vane's readings (``wind``)

    def wave_yaw_deg(self, t: np.ndarray) -> np.ndarray | float:
        return self.waves.yaw_deg(t) if self.waves is not None else 0.0

    def surge_kn(self, t: np.ndarray) -> np.ndarray | float:
        return self.waves.surge_kn(t) if self.waves is not None else 0.0

    def correlated(self, t: np.ndarray, sigma: float, tau_s: float) -> np.ndarray | float:
        """Gauss–Markov noise at the regular times ``t`` (0 when ``sigma`` is 0: no draw)."""
        if sigma <= 0.0 or t.size < 2:
            return 0.0
        return gauss_markov(self.rng, t.size, float(t[1] - t[0]), sigma, tau_s)

    def keep(self, t: np.ndarray) -> np.ndarray:
        return self.rng.random(t.shape) >= self.spec.dropout_prob

    def headings(self) -> tuple[np.ndarray, np.ndarray]:
        s = self.spec
        t = sample_times(self.t0, self.dur, 1.0 / s.heading_hz, 0.05)
        h = self.at("heading_true_deg", t) + s.heading_offset_deg + self.rng.normal(0, s.heading_noise_deg, t.shape)
        h = h + self.wave_yaw_deg(t) + self.correlated(t, s.heading_correlated_noise_deg, s.heading_noise_tau_s)
        for start, end in s.heading_frozen:
            inside = (t >= start) & (t < end)
            before = np.flatnonzero(t < start)
            if inside.any() and before.size:
                h[inside] = h[before[-1]]
        return t, np.mod(h, 360.0)

    def heading_samples(self, t: np.ndarray, h: np.ndarray) -> list[Sample]:
        k = self.keep(t)
        return [Heading(float(a), round(float(b), 2) % 360.0) for a, b in zip(t[k], h[k])]

    def water_speed(self) -> tuple[np.ndarray, np.ndarray]:
        s = self.spec
        t = sample_times(self.t0, self.dur, 1.0 / s.stw_hz, 0.2)
        along_keel = self.at("stw_true_kn", t) * np.cos(np.radians(self.at("leeway_deg", t)))
        along_keel = along_keel + self.surge_kn(t)
        v = s.stw_scale * along_keel + self.rng.normal(0, s.stw_noise_kn, t.shape)
        v = v + self.correlated(t, s.stw_correlated_noise_kn, s.stw_noise_tau_s)
        return t, np.clip(quantise(v, s.stw_quantum_kn), 0.0, None)

    def fixes(self) -> list[Sample]:
        s = self.spec
        period = 1.0 / s.fix_hz
        t = sample_times(self.t0, self.dur, period)
        ex = gauss_markov(self.rng, t.size, period, s.position_sigma_m, s.position_tau_s)
        ny = gauss_markov(self.rng, t.size, period, s.position_sigma_m, s.position_tau_s)
        lat = self.at("lat", t)
        lon = self.at("lon", t)
        # metres → degrees with a spherical radius is ample for a 2-m error
        lat = lat + np.degrees(ny / 6_371_000.0)
        lon = lon + np.degrees(ex / (6_371_000.0 * np.cos(np.radians(lat))))
        ge = self.at("ground_east_kn", t) + self.rng.normal(0, s.ground_velocity_noise_kn, t.shape)
        gn = self.at("ground_north_kn", t) + self.rng.normal(0, s.ground_velocity_noise_kn, t.shape)
        if self.waves is not None:  # the surge is real: the boat's velocity over ground has it too
            he, hn = np.sin(np.radians(self.at("heading_true_deg", t))), np.cos(np.radians(self.at("heading_true_deg", t)))
            ge, gn = ge + self.surge_kn(t) * he, gn + self.surge_kn(t) * hn
        sog = np.hypot(ge, gn)
        cog = np.mod(np.degrees(np.arctan2(ge, gn)), 360.0)
        k = self.keep(t) & ~s.in_outage(t)
        t = t + s.gnss_latency_s  # stamped on arrival, after its epoch
        return [Fix(float(a), round(float(b), 7), round(float(c), 7), round(float(d), 2),
                    (round(float(e), 1) % 360.0) if d >= 0.05 else None, s.hdop)
                for a, b, c, d, e in zip(t[k], lat[k], lon[k], sog[k], cog[k])]

    def sea_temperature(self) -> list[Sample]:
        s = self.spec
        t = sample_times(self.t0, self.dur, s.sea_temp_period_s, 0.5)
        warm = s.hull_sun_warming_c * solar_day_fraction(t, self.at("lon", t)) * np.exp(-self.at("stw_true_kn", t) / 2.0)
        v = self.at("sea_temp_c", t) + warm + self.rng.normal(0, s.sea_temp_noise_c, t.shape)
        v = quantise(v, s.sea_temp_quantum_c)
        k = self.keep(t)
        return [SeaTemperature(float(a), round(float(b), 3)) for a, b in zip(t[k], v[k])]

    def barometer(self) -> list[Sample]:
        s = self.spec
        t = sample_times(self.t0, self.dur, s.pressure_period_s, 0.7)
        p = station_pressure_hpa(self.at("msl_hpa", t), s.barometer_height_m)
        u = self.at("apparent_wind_kn", t) * 1852.0 / 3600.0
        du = self.rng.normal(0, s.gust_intensity, t.shape) * u
        p = p + s.gust_coeff * 0.5 * AIR_DENSITY_KG_M3 * (du * du + 2.0 * u * du) / 100.0  # Pa → hPa
        p = p + s.baro_drift_hpa_per_h * (t - self.t0) / 3600.0 + self.rng.normal(0, s.pressure_noise_hpa, t.shape)
        for ts, dp in s.pressure_spikes:
            i = int(np.searchsorted(t, ts))
            if i < t.size:
                p[i] += dp
        p = quantise(p, s.pressure_quantum_hpa)
        air = self.at("air_temp_c", t) + self.rng.normal(0, s.air_temp_noise_c, t.shape)
        k = self.keep(t)
        out: list[Sample] = [Pressure(float(a), round(float(b), 2)) for a, b in zip(t[k], p[k])]
        out += [AirTemperature(float(a) + 0.01, round(float(b), 1)) for a, b in zip(t[k], air[k])]
        return out

    def wind(self, head_t: np.ndarray, head: np.ndarray, stw_t: np.ndarray, stw: np.ndarray) -> list[Sample]:
        s = self.spec
        t = sample_times(self.t0, self.dur, 1.0 / s.wind_hz, 0.4)
        awa = self.at("apparent_wind_angle_deg", t) + self.rng.normal(0, s.wind_angle_noise_deg, t.shape)
        awa = awa - self.wave_yaw_deg(t)  # the vane swings with the hull: the bow turns toward the wind by the yaw
        gust = gauss_markov(self.rng, t.size, 1.0 / s.wind_hz, s.gust_intensity, s.wind_gust_tau_s)
        aws = np.clip(self.at("apparent_wind_kn", t) * (1.0 + gust), 0.0, None)
        self.air = self.gusty_air(t, aws)
        awa = np.mod(awa, 360.0)
        # the instrument's wind over water: apparent + the boat's own motion (its log, its compass)
        log = np.interp(t, stw_t, stw)
        hdg = np.mod(np.interp(t, head_t, np.unwrap(head, period=360.0)), 360.0)
        bx = aws * np.sin(np.radians(awa))  # wind-from vector in the boat frame (x to starboard)
        by = aws * np.cos(np.radians(awa)) - log  # the boat's motion adds a headwind of its speed
        tws = np.hypot(bx, by)
        twa = np.mod(np.degrees(np.arctan2(bx, by)), 360.0)
        k = self.keep(t)
        out: list[Sample] = [ApparentWind(float(a), round(float(b), 1), round(float(c), 2))
                             for a, b, c in zip(t[k], awa[k], aws[k])]
        out += [WaterWind(float(a) + 0.01, round(float(b), 2), round(wrap_360(float(c) + float(d)), 1), round(float(c), 1))
                for a, b, c, d in zip(t[k], tws[k], twa[k], hdg[k])]
        return out

    def gusty_air(self, t: np.ndarray, aws: np.ndarray) -> GustyAir:
        """air/water = apparent + boat/water: the gusty apparent wind along its true angle off the
        true heading (toward = from + 180), plus the true water velocity (leeway included)."""
        toward = np.radians(self.at("heading_true_deg", t) + self.at("apparent_wind_angle_deg", t) + 180.0)
        east = aws * np.sin(toward) + self.at("water_east_kn", t)
        north = aws * np.cos(toward) + self.at("water_north_kn", t)
        return GustyAir(t, east, north)

    def depth(self) -> list[Sample]:
        s = self.spec
        t = sample_times(self.t0, self.dur, s.depth_period_s, 0.9)
        d = self.at("depth_m", t) + self.rng.normal(0, s.depth_noise_m, t.shape)
        k = self.keep(t)
        return [Depth(float(a), round(float(b), 2)) for a, b in zip(t[k], d[k])]

    def attitude(self) -> list[Sample]:
        s = self.spec
        t = sample_times(self.t0, self.dur, 1.0 / s.attitude_hz, 0.3)
        h = self.at("heel_deg", t) + self.rng.normal(0, s.heel_noise_deg, t.shape)
        k = self.keep(t)
        return [Attitude(float(a), round(float(b), 1), None) for a, b in zip(t[k], h[k])]


def sense(truth: np.ndarray, spec: SensorSpec, rng: np.random.Generator) -> tuple[list[Sample], GustyAir]:
    """All sensor samples of a true track, in time order, and the gusty air the vane measured."""
    sensors = _Sensors(truth, spec, rng)
    head_t, head = sensors.headings()
    stw_t, stw = sensors.water_speed()
    samples: list[Sample] = []
    samples += sensors.fixes()
    samples += sensors.heading_samples(head_t, head)
    keep = sensors.keep(stw_t)
    samples += [WaterSpeed(float(a), round(float(b), 3)) for a, b in zip(stw_t[keep], stw[keep])]
    samples += sensors.sea_temperature()
    samples += sensors.barometer()
    samples += sensors.wind(head_t, head, stw_t, stw)
    samples += sensors.depth()
    samples += sensors.attitude()
    samples.sort(key=lambda x: x.t_s)  # stable: equal times keep the order above
    return samples, sensors.air
