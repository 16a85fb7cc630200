"""Named scenarios for tests, benchmarks and the demo. All boats and places are invented.

Every function returns a fresh ``Scenario``; ``simulate(scenario, seed)`` runs it.
Times are absolute (UNIX seconds, UTC); positions are open-ocean coordinates
chosen for their emptiness, with invented names.
"""

from __future__ import annotations

import calendar

from estimators.angles import NM_M, to_east_north

from .boat import Beat, HelmModel, Steer, box
from .ocean import (
    CurrentBand, Front, Ocean, Patch, PressureField, SeaTemperatureField, SteadyCurrent, TidalStream,
    WindField, step_position,
)
from .run import Scenario
from .sensors import REALISTIC, SensorSpec

H = 3600.0
MIN = 60.0


def utc(y: int, mo: int, d: int, h: int = 0, mi: int = 0, s: int = 0) -> float:
    return float(calendar.timegm((y, mo, d, h, mi, s, 0, 0, 0)))


def along(lat: float, lon: float, toward_deg: float, dist_nm: float) -> tuple[float, float]:
    """A point ``dist_nm`` from (lat, lon) toward a direction (flat step, fine for tens of miles)."""
    e, n = to_east_north(dist_nm * NM_M, toward_deg)
    return step_position(lat, lon, e, n)


def _flat_pressure(t0: float, hpa: float) -> PressureField:
    return PressureField(((t0, hpa),))


def _steady_wind(t0: float, from_deg: float, kn: float) -> WindField:
    return WindField(((t0, from_deg, kn),))


def _plain_sea(lat: float, lon: float, base_c: float = 16.0) -> SeaTemperatureField:
    return SeaTemperatureField(base_c, lat, lon)


def tacking_leg() -> Scenario:
    """Two hours beating to windward, tacking every 15 min; log 6 % low, compass 3° high, steady current."""
    t0, lat, lon = utc(2026, 5, 4, 6), 44.60, -36.10
    ocean = Ocean(
        currents=(SteadyCurrent(set_deg=120.0, drift_kn=0.8),),
        sea_temp=_plain_sea(lat, lon, 14.5),
        pressure=_flat_pressure(t0, 1016.0),
        wind=_steady_wind(t0, 0.0, 14.0),
    )
    return Scenario(
        name="tacking_leg", start_utc=t0, duration_s=2 * H, start_lat=lat, start_lon=lon,
        helm=(Beat(twa_deg=45.0, stw_kn=5.5, tack_every_s=15 * MIN, duration_s=2 * H),),
        ocean=ocean,
        sensors=SensorSpec(stw_scale=0.94, heading_offset_deg=3.0),
        description="Beating north into 14 kn, tacks every 15 min; current 0.8 kn toward 120.",
    )


def tidal_box() -> Scenario:
    """Six hours motoring a square box (30-min sides) in a rotating tidal stream (1.6 kn major, 0.6 kn minor)."""
    t0, lat, lon = utc(2026, 5, 5, 8), 47.30, -29.40
    ocean = Ocean(
        currents=(TidalStream(flood_set_deg=60.0, major_kn=1.6, minor_kn=0.6, t_max_s=t0 + 1 * H),),
        sea_temp=_plain_sea(lat, lon, 13.0),
        pressure=_flat_pressure(t0, 1020.0),
        wind=_steady_wind(t0, 250.0, 8.0),
    )
    return Scenario(
        name="tidal_box", start_utc=t0, duration_s=6 * H, start_lat=lat, start_lon=lon,
        helm=box(0.0, 30 * MIN, 6.0) * 3,
        ocean=ocean,
        sensors=SensorSpec(stw_scale=0.96, heading_offset_deg=-2.0),
        description="Motoring a box at 6 kn while a tidal stream turns clockwise (M2 period).",
    )


def current_crossing() -> Scenario:
    """Four hours steering 090 across a narrow warm current (4.8 kn core toward 010, 0.8-nm edges, +3 °C)."""
    t0, lat, lon = utc(2026, 5, 6, 5), 39.80, -47.20
    clat, clon = along(lat, lon, 90.0, 11.0)
    band = CurrentBand(clat, clon, set_deg=10.0, core_kn=4.8, core_width_nm=6.0, edge_width_nm=0.8, warm_c=3.0)
    ocean = Ocean(
        currents=(SteadyCurrent(200.0, 0.3), band),
        sea_temp=SeaTemperatureField(17.0, lat, lon, patches=(Patch(0.15, 2.5, 30.0),)),
        pressure=_flat_pressure(t0, 1019.0),
        wind=_steady_wind(t0, 180.0, 12.0),
    )
    return Scenario(
        name="current_crossing", start_utc=t0, duration_s=4 * H, start_lat=lat, start_lon=lon,
        helm=(Steer(90.0, 6.0, 4 * H),),
        ocean=ocean,
        sensors=SensorSpec(stw_scale=0.97, heading_offset_deg=1.5),
        description="A warm current band 11 nm east of the start; its edges are +3 °C / −3 °C fronts.",
    )


def gnss_outage() -> Scenario:
    """Three hours with a 30-minute GNSS outage (1:15–1:45 in), a course change before it, steady current."""
    t0, lat, lon = utc(2026, 5, 7, 10), 42.10, -40.50
    ocean = Ocean(
        currents=(SteadyCurrent(200.0, 1.2),),
        sea_temp=_plain_sea(lat, lon, 15.0),
        pressure=_flat_pressure(t0, 1014.0),
        wind=_steady_wind(t0, 300.0, 12.0),
    )
    return Scenario(
        name="gnss_outage", start_utc=t0, duration_s=3 * H, start_lat=lat, start_lon=lon,
        helm=(Steer(70.0, 5.5, 40 * MIN), Steer(160.0, 5.5, 140 * MIN)),
        ocean=ocean,
        sensors=SensorSpec(stw_scale=0.95, heading_offset_deg=2.0,
                           gnss_outages=((t0 + 75 * MIN, t0 + 105 * MIN),)),
        description="No GNSS fix from 1:15 to 1:45 in; dead reckoning must carry the current.",
    )


def stuck_compass() -> Scenario:
    """Motoring 020 then 115 (a 95 deg course change at 30 min); the compass is frozen from 25 to 40 min."""
    t0, lat, lon = utc(2026, 5, 8, 2), 39.20, -44.70
    ocean = Ocean(
        currents=(SteadyCurrent(250.0, 1.0),),
        sea_temp=_plain_sea(lat, lon, 17.0),
        pressure=_flat_pressure(t0, 1015.0),
        wind=_steady_wind(t0, 60.0, 10.0),
    )
    return Scenario(
        name="stuck_compass", start_utc=t0, duration_s=1 * H, start_lat=lat, start_lon=lon,
        helm=(Steer(20.0, 6.0, 30 * MIN, motoring=True), Steer(115.0, 6.0, 30 * MIN, motoring=True)),
        ocean=ocean,
        sensors=SensorSpec(stw_scale=0.97, heading_offset_deg=1.0, heading_hz=2.0,
                           heading_frozen=((t0 + 25 * MIN, t0 + 40 * MIN),)),
        description="The compass repeats one reading from 0:25 to 0:40; the boat turns 95 deg at 0:30.",
    )


def front_crossing() -> Scenario:
    """Three hours south at 6 kn: a +3.0 °C front (0.5 nm wide) at 5 nm, patchiness, a −0.8 °C front at 14 nm."""
    t0, lat, lon = utc(2026, 5, 8, 7), 45.50, -25.80
    f1 = Front(*along(lat, lon, 180.0, 5.0), along_deg=90.0, delta_c=3.0, width_nm=0.5)  # warmer to the south
    f2 = Front(*along(lat, lon, 180.0, 14.0), along_deg=90.0, delta_c=-0.8, width_nm=0.8)  # cooler to the south
    sea = SeaTemperatureField(14.0, lat, lon, fronts=(f1, f2),
                              patches=(Patch(0.2, 3.0, 160.0, 0.4), Patch(0.1, 1.1, 45.0, 1.3)))
    ocean = Ocean(
        currents=(SteadyCurrent(250.0, 0.4),),
        sea_temp=sea,
        pressure=_flat_pressure(t0, 1015.0),
        wind=_steady_wind(t0, 270.0, 13.0),
    )
    return Scenario(
        name="front_crossing", start_utc=t0, duration_s=3 * H, start_lat=lat, start_lon=lon,
        helm=(Steer(180.0, 6.0, 3 * H),),
        ocean=ocean,
        sensors=SensorSpec(hull_sun_warming_c=0.2),
        description="Patchiness of ±0.3 °C everywhere; a sharp +3 °C front, later a weak −0.8 °C one (no front).",
    )


def pressure_fall() -> Scenario:
    """Six hours: 1016 hPa steady for three hours, then falling 2 hPa/h (to 1010); the wind rises."""
    t0, lat, lon = utc(2026, 5, 9, 0), 48.20, -20.60
    ocean = Ocean(
        currents=(SteadyCurrent(90.0, 0.3),),
        sea_temp=_plain_sea(lat, lon, 13.5),
        pressure=PressureField(((t0, 1016.0), (t0 + 3 * H, 1016.0), (t0 + 6 * H, 1010.0))),
        wind=WindField(((t0, 200.0, 10.0), (t0 + 3 * H, 190.0, 12.0), (t0 + 6 * H, 170.0, 24.0))),
        air_temp_c=13.0,
    )
    return Scenario(
        name="pressure_fall", start_utc=t0, duration_s=6 * H, start_lat=lat, start_lon=lon,
        helm=(Steer(250.0, 5.0, 6 * H),),
        ocean=ocean,
        sensors=SensorSpec(heading_hz=2.0, gust_coeff=0.5),
        description="MSL 1016 hPa until 3 h in, then −2 hPa/h; 3-h tendency −6 hPa at the end.",
    )


def steady_pressure_12h() -> Scenario:
    """Twelve hours of steady pressure: semidiurnal tide 0.4 hPa, +0.4 hPa drift, gusts, one +2.5 hPa spike."""
    t0, lat, lon = utc(2026, 5, 10, 0), 43.00, -33.00
    ocean = Ocean(
        currents=(SteadyCurrent(45.0, 0.4),),
        sea_temp=_plain_sea(lat, lon, 15.0),
        pressure=PressureField(((t0, 1013.0), (t0 + 12 * H, 1013.4)), semidiurnal_hpa=0.4),
        wind=WindField(((t0, 280.0, 18.0), (t0 + 12 * H, 290.0, 20.0))),
    )
    return Scenario(
        name="steady_pressure_12h", start_utc=t0, duration_s=12 * H, start_lat=lat, start_lon=lon,
        helm=(Steer(10.0, 5.0, 6 * H), Steer(190.0, 5.0, 6 * H)),
        ocean=ocean,
        sensors=SensorSpec(heading_hz=1.0, gust_coeff=1.0, gust_intensity=0.25,
                           pressure_spikes=((t0 + 5 * H, 2.5),), baro_drift_hpa_per_h=0.02),
        description="Nothing but weather noise: no pressure_fall should be raised.",
    )


# --------------------------------------------------------------------------- the demo

def wind_over_current(current: str = "against") -> Scenario:
    """Three hours reaching east across a strong current band (4.5 kn core, 8 nm wide) in 20 kn from 000.

    ``current``: "against" (the band sets 000, into the wind), "with" (it sets 180,
    downwind) or "none" (no band). A 20-min run south first calibrates the log
    (4 % low) and the compass (2° high). The band's water is 4 °C warmer than
    the 16 °C outside, the air 14.5 °C: unstable air in the band only. The
    instruments are the realistic small boat's (``realistic``: the hull yaws
    and surges in the waves, the log and compass noise is correlated, the fix
    arrives late), the gusts 15 % with an 8-s time scale.
    """
    t0, lat, lon = utc(2026, 5, 9, 5), 38.40, -44.70
    set_deg = {"against": 0.0, "with": 180.0, "none": 0.0}[current]
    clat, clon = along(lat, lon, 90.0, 9.0)
    band = CurrentBand(clat, clon, set_deg=set_deg, core_kn=0.0 if current == "none" else 4.5,
                       core_width_nm=8.0, edge_width_nm=0.6, warm_c=4.0)
    ocean = Ocean(
        currents=(SteadyCurrent(250.0, 0.3), band),
        sea_temp=_plain_sea(lat, lon, 16.0),
        pressure=_flat_pressure(t0, 1015.0),
        wind=_steady_wind(t0, 0.0, 20.0),
        air_temp_c=14.5, wind_drift_factor=0.03, depth_m=400.0,
    )
    return Scenario(
        name=f"wind_over_current_{current}", start_utc=t0, duration_s=3 * H, start_lat=lat, start_lon=lon,
        helm=(Steer(90.0, 6.5, 25 * MIN), Steer(180.0, 6.5, 20 * MIN), Steer(90.0, 6.5, 135 * MIN)),
        ocean=ocean,
        sensors=realistic(stw_scale=0.96, heading_offset_deg=2.0),  # wave yaw and surge, correlated noise, latency
        description=f"Reaching east in 20 kn from the north across a 4.5-kn current band, wind {current} current.",
    )


DEMO_VESSEL = 'the cutter "Tern of Haldane"'
DEMO_HARBOUR = "Port Averly, on the invented island of Skerrow"
DEMO_START = utc(2026, 5, 4, 4)
DEMO_LAT, DEMO_LON = 41.20, -32.50


def demo_passage(heading_hz: float = 2.0) -> Scenario:
    """Seven and a half hours out of Port Averly across the warm Skerrow Stream (invented).

    Timeline (from 04:00 UTC): motoring out 135° (30 min), sailing 135°;
    course change to 230° at 05:50 and back to 135° at 06:30 (calibration);
    the warm band's near edge about 07:18, its far edge about 09:12 (core
    5.0 kn toward 045, +4 °C, fronts 0.8 nm wide); wind from about 040, i.e.
    against the band's current; MSL steady 1017.6 hPa until 07:30, then
    falling 2.2 hPa/h to 1008.8 at 11:30; GNSS dropout 08:40:00–08:42:30;
    course 160° from 09:30.
    """
    t0, lat, lon = DEMO_START, DEMO_LAT, DEMO_LON
    clat, clon = along(lat, lon, 135.0, 22.0)
    band = CurrentBand(clat, clon, set_deg=45.0, core_kn=5.0, core_width_nm=12.0, edge_width_nm=0.8, warm_c=4.0)
    ocean = Ocean(
        currents=(SteadyCurrent(200.0, 0.3), band),
        sea_temp=SeaTemperatureField(15.5, lat, lon, patches=(Patch(0.15, 3.5, 20.0, 0.7), Patch(0.08, 1.2, 110.0))),
        pressure=PressureField(((t0, 1017.6), (t0 + 3.5 * H, 1017.6), (t0 + 7.5 * H, 1008.8))),
        wind=WindField(((t0, 35.0, 14.0), (t0 + 3.5 * H, 40.0, 16.0), (t0 + 7.5 * H, 50.0, 24.0))),
        air_temp_c=14.0, wind_drift_factor=0.03,
        depth_m=80.0, depth_gradient_m_per_nm=2.0, depth_toward_deg=135.0,
    )
    helm = (
        Steer(135.0, 5.5, 30 * MIN, motoring=True),
        Steer(135.0, 6.0, 80 * MIN),
        Steer(230.0, 6.0, 40 * MIN),
        Steer(135.0, 6.2, 180 * MIN),
        Steer(160.0, 6.0, 120 * MIN),
    )
    sensors = SensorSpec(
        stw_scale=0.95, heading_offset_deg=2.5, heading_hz=heading_hz,
        sea_temp_quantum_c=0.1, hull_sun_warming_c=0.15, depth_period_s=5.0,
        gnss_outages=((utc(2026, 5, 4, 8, 40), utc(2026, 5, 4, 8, 42, 30)),),
    )
    return Scenario(
        name="demo_passage", start_utc=t0, duration_s=7.5 * H, start_lat=lat, start_lon=lon,
        helm=helm, ocean=ocean, sensors=sensors, boat=HelmModel(heel_max_deg=28.0, heel_ref_kn=30.0),
        description=demo_passage.__doc__ or "",
        vessel=DEMO_VESSEL,
    )


# --------------------------------------------------------------------------- the current benchmark
# The realistic small-boat sensor model (sensors.REALISTIC) on passages that test a current estimator:
# small course changes that barely observe the calibration, a beat, a tidal box, a jet, an outage.


def realistic(**errors) -> SensorSpec:
    """The realistic sensor model with a boat's own log and compass errors."""
    return SensorSpec(**{**REALISTIC, **errors})


def ordinary_passage() -> Scenario:
    """Twelve hours of 2-hour legs whose headings differ by 10-35 deg (no tacks); 0.6 kn setting 080."""
    t0, lat, lon = utc(2026, 6, 1, 0), 40.40, -38.20
    ocean = Ocean(
        currents=(SteadyCurrent(set_deg=80.0, drift_kn=0.6),),
        sea_temp=_plain_sea(lat, lon, 17.0), pressure=_flat_pressure(t0, 1018.0), wind=_steady_wind(t0, 330.0, 13.0),
    )
    headings = (80.0, 105.0, 90.0, 60.0, 85.0, 120.0)
    return Scenario(
        name="ordinary_passage", start_utc=t0, duration_s=12 * H, start_lat=lat, start_lon=lon,
        helm=tuple(Steer(h, 6.0, 2 * H) for h in headings), ocean=ocean,
        sensors=realistic(stw_scale=0.98, heading_offset_deg=1.0),
        description="Small course changes only: the calibration is barely observable; log 2 % slow, compass 1 deg off.",
    )


def beat() -> Scenario:
    """Six hours beating into 15 kn, tacks every 25-35 min; log 6 % slow, compass 3 deg low, 1.2 kn current."""
    t0, lat, lon = utc(2026, 6, 2, 6), 45.10, -30.70
    ocean = Ocean(
        currents=(SteadyCurrent(set_deg=120.0, drift_kn=1.2),),
        sea_temp=_plain_sea(lat, lon, 14.0), pressure=_flat_pressure(t0, 1012.0), wind=_steady_wind(t0, 10.0, 15.0),
    )
    minutes = (28, 33, 25, 31, 35, 27, 30, 26, 34, 29, 32, 25, 30)
    legs, side, total = [], "starboard", 0.0
    for m in minutes:
        dur = min(m * MIN, 6 * H - total)
        if dur <= 0:
            break
        legs.append(Beat(twa_deg=45.0, stw_kn=5.5, tack_every_s=1e9, duration_s=dur, first_tack=side))
        side, total = ("port" if side == "starboard" else "starboard"), total + dur
    return Scenario(
        name="beat", start_utc=t0, duration_s=6 * H, start_lat=lat, start_lon=lon, helm=tuple(legs), ocean=ocean,
        sensors=realistic(stw_scale=0.94, heading_offset_deg=-3.0),
        description="Tacks every 25-35 min: the calibration is observable at every tack.",
    )


def tidal_box_realistic() -> Scenario:
    """The tidal box (``tidal_box``) read through the realistic sensor model."""
    box_ = tidal_box()
    return Scenario(**{**box_.__dict__, "name": "tidal_box_realistic",
                       "sensors": realistic(stw_scale=0.96, heading_offset_deg=-2.0)})


def jet_crossing() -> Scenario:
    """Across a jet rising from 0.3 to about 3.5 kn over 12 nm and falling over 8 nm; an almost perfect log."""
    t0, lat, lon = utc(2026, 6, 3, 4), 38.60, -50.30
    clat, clon = along(lat, lon, 90.0, 17.0)
    band = CurrentBand(clat, clon, set_deg=10.0, core_kn=3.45, core_width_nm=14.0, edge_width_nm=12.0,
                       far_edge_width_nm=8.0, warm_c=3.0)
    ocean = Ocean(
        currents=(SteadyCurrent(10.0, 0.3), band),
        sea_temp=_plain_sea(lat, lon, 18.0), pressure=_flat_pressure(t0, 1019.0), wind=_steady_wind(t0, 200.0, 12.0),
    )
    return Scenario(
        name="jet_crossing", start_utc=t0, duration_s=5.5 * H, start_lat=lat, start_lon=lon,
        helm=(Steer(90.0, 6.5, 5.5 * H),), ocean=ocean, sensors=realistic(stw_scale=1.0, heading_offset_deg=0.0),
        description="A current's edges crossed slowly and fast; the log and compass almost perfect.",
    )


def outage_leg() -> Scenario:
    """Three hours on one heading with a 30-minute GNSS outage (1:15-1:45 in); 1.0 kn current."""
    t0, lat, lon = utc(2026, 6, 4, 12), 43.30, -27.90
    ocean = Ocean(
        currents=(SteadyCurrent(210.0, 1.0),),
        sea_temp=_plain_sea(lat, lon, 15.5), pressure=_flat_pressure(t0, 1015.0), wind=_steady_wind(t0, 290.0, 12.0),
    )
    return Scenario(
        name="outage_leg", start_utc=t0, duration_s=3 * H, start_lat=lat, start_lon=lon,
        helm=(Steer(140.0, 5.5, 3 * H),), ocean=ocean,
        sensors=realistic(stw_scale=0.97, heading_offset_deg=1.5, gnss_outages=((t0 + 75 * MIN, t0 + 105 * MIN),)),
        description="A straight leg: the calibration is not observable; no fix for 30 min.",
    )


CURRENT_BENCH = ("ordinary_passage", "beat", "tidal_box_realistic", "jet_crossing", "outage_leg")

SCENARIOS = {
    "tacking_leg": tacking_leg,
    "tidal_box": tidal_box,
    "current_crossing": current_crossing,
    "gnss_outage": gnss_outage,
    "stuck_compass": stuck_compass,
    "front_crossing": front_crossing,
    "pressure_fall": pressure_fall,
    "steady_pressure_12h": steady_pressure_12h,
    "demo_passage": demo_passage,
    "ordinary_passage": ordinary_passage,
    "beat": beat,
    "tidal_box_realistic": tidal_box_realistic,
    "jet_crossing": jet_crossing,
    "outage_leg": outage_leg,
    "wind_against_current": lambda: wind_over_current("against"),
    "wind_with_current": lambda: wind_over_current("with"),
    "wind_no_current": lambda: wind_over_current("none"),
}
