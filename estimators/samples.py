"""One small frozen dataclass per measurement kind: time first, units in the names.

``t_s`` is data time in UNIX seconds (UTC). Directions are degrees true unless
the name says otherwise; the daemon applies magnetic variation before a
heading reaches an estimator. NMEA never gets this far.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True, slots=True)
class Fix:
    """A valid GNSS fix. ``sog_kn``/``cog_deg`` are None where the sentence had none.

    ``gnss_time_s`` is the receiver's own time of the fix (UNIX s) where the
    sentence gave one: live, ``t_s`` is when it was received, so a receiver
    whose clock stops shows as ``gnss_time_s`` standing still.
    """

    t_s: float
    lat_deg: float
    lon_deg: float
    sog_kn: float | None = None
    cog_deg: float | None = None
    hdop: float | None = None
    gnss_time_s: float | None = None


@dataclass(frozen=True, slots=True)
class GroundVelocity:
    """Speed and course over ground without a position (VTG)."""

    t_s: float
    sog_kn: float
    cog_deg: float | None


@dataclass(frozen=True, slots=True)
class Heading:
    """Where the bow points, degrees true (variation already applied)."""

    t_s: float
    true_deg: float


@dataclass(frozen=True, slots=True)
class WaterSpeed:
    """Speed through water from the log, as the log reads it (uncalibrated)."""

    t_s: float
    speed_kn: float


@dataclass(frozen=True, slots=True)
class SeaTemperature:
    t_s: float
    temp_c: float


@dataclass(frozen=True, slots=True)
class AirTemperature:
    t_s: float
    temp_c: float


@dataclass(frozen=True, slots=True)
class Pressure:
    """Barometer reading at the sensor's height (not reduced to sea level)."""

    t_s: float
    station_hpa: float


@dataclass(frozen=True, slots=True)
class ApparentWind:
    """MWV relative: angle off the bow, 0..360 clockwise, as felt aboard."""

    t_s: float
    angle_deg: float
    speed_kn: float


@dataclass(frozen=True, slots=True)
class WaterWind:
    """Wind over water ("true wind" to a sailor), from MWV theoretical or MWD.

    ``from_true_deg`` is None when the sensor gave only an angle off the bow
    (MWV theoretical) and no heading was known to turn it into a direction;
    then ``angle_deg`` holds that angle.
    """

    t_s: float
    speed_kn: float
    from_true_deg: float | None = None
    angle_deg: float | None = None


@dataclass(frozen=True, slots=True)
class Depth:
    """Depth below the transducer plus the offset when the sentence gave one."""

    t_s: float
    depth_m: float


@dataclass(frozen=True, slots=True)
class Attitude:
    """Heel (roll, positive to starboard) and pitch (positive bow up), degrees."""

    t_s: float
    heel_deg: float | None = None
    pitch_deg: float | None = None


@dataclass(frozen=True, slots=True)
class Swell:
    """A swell the crew reports (not an instrument): period s, where it comes from, degrees true.

    ``period_s`` None: no swell reported any more (back to the configured one, or none).
    """

    t_s: float
    period_s: float | None
    from_deg: float | None


Sample = (
    Fix | GroundVelocity | Heading | WaterSpeed | SeaTemperature | AirTemperature
    | Pressure | ApparentWind | WaterWind | Depth | Attitude | Swell
)

# The name each kind goes by in status, staleness and priority settings.
KIND_NAMES: dict[type, str] = {
    Fix: "fix",
    GroundVelocity: "ground_velocity",
    Heading: "heading",
    WaterSpeed: "water_speed",
    SeaTemperature: "sea_temperature",
    AirTemperature: "air_temperature",
    Pressure: "pressure",
    ApparentWind: "apparent_wind",
    WaterWind: "water_wind",
    Depth: "depth",
    Attitude: "attitude",
    Swell: "swell",
}

# Kinds a person reports when something changes, not feeds: never stale, whatever their age.
REPORTED_KINDS = frozenset({"swell"})


def kind_of(sample: Sample) -> str:
    return KIND_NAMES[type(sample)]
