"""A scenario, one seeded run of it, and the ground truth that comes with it."""

from __future__ import annotations

import math
from dataclasses import dataclass, field, fields

import numpy as np

from estimators.samples import Sample

from .boat import TRUTH_FIELDS, HelmModel, Leg, sail_track
from .ocean import CurrentBand, Front, Ocean
from .sensors import GustyAir, SensorSpec, TruthInterpolator, sense


@dataclass(frozen=True)
class Scenario:
    """Everything that makes a simulated passage, except the random seed.

    ``start_utc`` in UNIX seconds; ``variation_deg`` is magnetic variation,
    east positive, written into HDG (None: take it from the World Magnetic
    Model at the start position and date, as the daemon would).
    """

    name: str
    start_utc: float
    duration_s: float
    start_lat: float
    start_lon: float
    helm: tuple[Leg, ...]
    ocean: Ocean
    sensors: SensorSpec = field(default_factory=SensorSpec)
    boat: HelmModel = field(default_factory=HelmModel)
    variation_deg: float | None = None
    truth_dt_s: float = 1.0
    description: str = ""
    vessel: str = "an invented boat"


@dataclass(frozen=True, slots=True)
class TruthRow:
    """The truth at one instant. Degrees true, knots, °C, hPa (MSL), metres.

    Currents are (east, north) toward; ``set_deg``/``drift_kn`` the same as a
    direction and a speed. Wind directions are where it blows from. ``heel_deg``
    is positive to starboard; ``leeway_deg`` positive clockwise (water track =
    heading + leeway). ``apparent_wind_angle_deg`` is off the bow, 0..360
    clockwise. ``motoring`` is 0/1; ``leg`` the index of the helm leg.
    """

    t_s: float
    lat: float
    lon: float
    heading_true_deg: float
    helm_heading_deg: float
    stw_true_kn: float
    leeway_deg: float
    water_east_kn: float
    water_north_kn: float
    sog_kn: float
    cog_deg: float
    ground_east_kn: float
    ground_north_kn: float
    current_east_kn: float
    current_north_kn: float
    set_deg: float
    drift_kn: float
    sea_temp_c: float
    air_temp_c: float
    msl_hpa: float
    ground_wind_from_deg: float
    ground_wind_kn: float
    water_wind_from_deg: float
    water_wind_kn: float
    apparent_wind_angle_deg: float
    apparent_wind_kn: float
    heel_deg: float
    depth_m: float
    motoring: int
    leg: int


assert tuple(f.name for f in fields(TruthRow)) == TRUTH_FIELDS


@dataclass(frozen=True, slots=True)
class SimEvent:
    """A fact of the scenario worth checking an estimator against (UNIX s, WGS84 degrees)."""

    t_s: float
    kind: str  # "front_crossing", "band_edge", "gnss_outage_start", "gnss_outage_end", "leg_start"
    lat: float
    lon: float
    detail: dict


@dataclass(frozen=True)
class SimRun:
    """One seeded run: the truth (numpy structured array, fields ``TRUTH_FIELDS``,
    one row every ``scenario.truth_dt_s``), the sensor samples in time order,
    the scenario's checkable events, the magnetic variation used (east +), and
    the gusty air the vane measured (``air``: the true wind over the water with its
    gusts, at each vane time; the truth rows hold the wind without gusts)."""

    scenario: Scenario
    seed: int
    truth: np.ndarray
    samples: list[Sample]
    events: tuple[SimEvent, ...]
    variation_deg: float
    _interp: TruthInterpolator = field(repr=False, compare=False, default=None)
    air: GustyAir | None = field(repr=False, compare=False, default=None)

    def truth_at(self, t_s: float) -> TruthRow:
        """The truth interpolated at ``t_s`` (angles the short way round; motoring/leg from the row before)."""
        at = self._interp
        i = max(0, min(len(self.truth) - 1, int(np.searchsorted(self.truth["t_s"], t_s, side="right")) - 1))
        values = {f: float(at(f, t_s)) for f in TRUTH_FIELDS if f not in ("motoring", "leg")}
        values["t_s"] = float(t_s)
        return TruthRow(**values, motoring=int(self.truth["motoring"][i]), leg=int(self.truth["leg"][i]))

    def truth_series(self, field: str, t_s) -> np.ndarray:
        """One truth field interpolated at many times (a numpy array of UNIX seconds): fast."""
        return self._interp(field, np.asarray(t_s, dtype=float))

    def rows(self) -> list[TruthRow]:
        """Every truth row as a ``TruthRow``."""
        return [TruthRow(*(r[f].item() for f in TRUTH_FIELDS)) for r in self.truth]

    def samples_of(self, kind: type) -> list[Sample]:
        return [s for s in self.samples if type(s) is kind]

    def gusty_wind_mean(self, t_s: float, window_s: float) -> tuple[float, float]:
        """(from_deg, kn) of the true wind over the water, gusts included, averaged as vectors over
        (t - window, t]: what a mean wind over that window is (WMO-No. 8's block average)."""
        a = self.air
        i, j = np.searchsorted(a.t_s, [t_s - window_s, t_s], side="right")
        j = max(j, i + 1)
        e, n = float(a.east_kn[i:j].mean()), float(a.north_kn[i:j].mean())
        return float(np.mod(np.degrees(np.arctan2(-e, -n)), 360.0)), math.hypot(e, n)

    def gusty_wind_gust(self, t_s: float, window_s: float, average_s: float = 3.0) -> float:
        """The highest ``average_s`` running vector-mean speed of the gusty true wind over the water in
        (t - window, t], kn (WMO-No. 8's gust: the highest 3-s mean of the reporting period)."""
        speeds = self._gust_speeds(average_s)
        i, j = np.searchsorted(self.air.t_s, [t_s - window_s, t_s], side="right")
        return float(speeds[i:max(j, i + 1)].max())

    def _gust_speeds(self, average_s: float) -> np.ndarray:
        """The speed of the running vector mean over (t - average_s, t] at every vane time (cached)."""
        cache = self.__dict__.setdefault("_gusts", {})  # a frozen dataclass: kept beside its fields
        if average_s not in cache:
            a = self.air
            ce = np.concatenate(([0.0], np.cumsum(a.east_kn)))
            cn = np.concatenate(([0.0], np.cumsum(a.north_kn)))
            hi = np.arange(1, a.t_s.size + 1)
            lo = np.searchsorted(a.t_s, a.t_s - average_s, side="right")
            count = hi - lo
            cache[average_s] = np.hypot((ce[hi] - ce[lo]) / count, (cn[hi] - cn[lo]) / count)
        return cache[average_s]


def magnetic_variation_deg(lat: float, lon: float, t_s: float) -> float:
    """Declination (east +) from the World Magnetic Model (pygeomag), at sea level."""
    from pygeomag import GeoMag

    year = 1970.0 + t_s / (365.2425 * 86400.0)
    return float(GeoMag().calculate(glat=lat, glon=lon, alt=0.0, time=year).d)


def simulate(scenario: Scenario, seed: int) -> SimRun:
    """Sail the scenario and read the sensors; the same seed gives the same run, bit for bit."""
    rng = np.random.default_rng(seed)
    yaw_phases = (float(rng.uniform(0, 2 * math.pi)), float(rng.uniform(0, 2 * math.pi)))
    truth = sail_track(scenario.ocean, scenario.helm, scenario.start_utc, scenario.duration_s,
                       scenario.start_lat, scenario.start_lon, scenario.boat, scenario.truth_dt_s, yaw_phases)
    samples, air = sense(truth, scenario.sensors, rng)
    var = scenario.variation_deg
    if var is None:
        var = round(magnetic_variation_deg(scenario.start_lat, scenario.start_lon, scenario.start_utc), 1)
    run = SimRun(scenario, seed, truth, samples, find_events(scenario, truth), var, air=air)
    object.__setattr__(run, "_interp", TruthInterpolator(truth))
    return run


def find_events(scenario: Scenario, truth: np.ndarray) -> tuple[SimEvent, ...]:
    """Where the true track crosses each front and band edge, outages, leg changes."""
    ocean = scenario.ocean
    events: list[SimEvent] = []
    lat, lon, t = truth["lat"], truth["lon"], truth["t_s"]
    for j, front in enumerate(ocean.sea_temp.fronts):
        d = np.array([front.signed_distance_m(a, b) for a, b in zip(lat, lon)])
        for i in np.nonzero(np.sign(d[:-1]) != np.sign(d[1:]))[0]:
            warmer = bool(d[i + 1] > d[i]) == (front.delta_c > 0)
            events.append(SimEvent(float(t[i + 1]), "front_crossing", float(lat[i + 1]), float(lon[i + 1]),
                                   {"front": j, "delta_c": abs(front.delta_c) * (1 if warmer else -1),
                                    "width_nm": front.width_nm, "warmer": warmer}))
    for j, band in enumerate(b for b in ocean.currents if isinstance(b, CurrentBand)):
        prof = np.array([band.profile(a, b) for a, b in zip(lat, lon)])
        inside = prof >= 0.5
        for i in np.nonzero(inside[:-1] != inside[1:])[0]:
            entering = bool(inside[i + 1])
            events.append(SimEvent(float(t[i + 1]), "band_edge", float(lat[i + 1]), float(lon[i + 1]),
                                   {"band": j, "entering": entering, "core_kn": band.core_kn,
                                    "delta_c": band.warm_c * (1 if entering else -1)}))
    for start, end in scenario.sensors.gnss_outages:
        for ts, kind in ((start, "gnss_outage_start"), (end, "gnss_outage_end")):
            i = min(len(t) - 1, int(np.searchsorted(t, ts)))
            events.append(SimEvent(float(ts), kind, float(lat[i]), float(lon[i]), {"duration_s": end - start}))
    leg = truth["leg"]
    for i in np.nonzero(leg[1:] != leg[:-1])[0]:
        if leg[i + 1] >= len(scenario.helm):
            continue  # the plan is done: the boat stops
        events.append(SimEvent(float(t[i + 1]), "leg_start", float(lat[i + 1]), float(lon[i + 1]),
                               {"leg": int(leg[i + 1])}))
    events.sort(key=lambda e: e.t_s)
    return tuple(events)


__all__ = ["Scenario", "TruthRow", "SimEvent", "SimRun", "simulate", "magnetic_variation_deg",
           "find_events", "Front", "TRUTH_FIELDS"]
