"""One small frozen dataclass per measurement kind (``sample_type``): time first, units in the names.

``t_s`` is data time in UNIX seconds (UTC). Directions are degrees true unless
the name says otherwise; the daemon applies magnetic variation before a
heading reaches an estimator. NMEA never gets this far.
"""

from __future__ import annotations

from dataclasses import MISSING, dataclass, fields


def sample_type(cls: type) -> type:
    """``cls`` as a frozen dataclass with slots, its ``__init__`` setting each field through the
    field's slot descriptor instead of ``object.__setattr__``.

    Why: about 36 000 samples are made an hour of data, and a frozen dataclass's own ``__init__``
    looks ``object.__setattr__`` up and calls it for every field: a ``Fix`` (seven fields) took about
    12 300 machine instructions to make that way, 7 500 through the slots (callgrind, a loop of
    100 000). Everything else is the dataclass's:
    still frozen (setting a field raises ``FrozenInstanceError``), the same signature, defaults,
    equality, hash and repr. The source is written out and compiled once per class, as
    ``dataclasses`` itself makes ``__init__``.
    """
    cls = dataclass(frozen=True, slots=True)(cls)
    names = [f.name for f in fields(cls)]
    if any(f.default_factory is not MISSING or not f.init for f in fields(cls)) or hasattr(cls, "__post_init__"):
        raise TypeError(f"{cls.__name__}: sample_type takes plain fields only")
    scope = {f"_set_{n}": cls.__dict__[n].__set__ for n in names}
    scope.update({f"_default_{f.name}": f.default for f in fields(cls) if f.default is not MISSING})
    params = ", ".join(n if f"_default_{n}" not in scope else f"{n}=_default_{n}" for n in names)
    body = "".join(f"    _set_{n}(self, {n})\n" for n in names)
    exec(f"def __init__(self, {params}):\n{body}", scope)  # noqa: S102 -- our own text, from field names
    init = scope["__init__"]
    init.__qualname__ = f"{cls.__qualname__}.__init__"
    init.__annotations__ = {**{f.name: f.type for f in fields(cls)}, "return": None}  # as the dataclass's
    cls.__init__ = init
    return cls


@sample_type
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


@sample_type
class GroundVelocity:
    """Speed and course over ground without a position (VTG)."""

    t_s: float
    sog_kn: float
    cog_deg: float | None


@sample_type
class Heading:
    """Where the bow points, degrees true (variation already applied)."""

    t_s: float
    true_deg: float


@sample_type
class WaterSpeed:
    """Speed through water from the log, as the log reads it (uncalibrated)."""

    t_s: float
    speed_kn: float


@sample_type
class SeaTemperature:
    t_s: float
    temp_c: float


@sample_type
class AirTemperature:
    t_s: float
    temp_c: float


@sample_type
class Pressure:
    """Barometer reading at the sensor's height (not reduced to sea level)."""

    t_s: float
    station_hpa: float


@sample_type
class ApparentWind:
    """MWV relative: angle off the bow, 0..360 clockwise, as felt aboard."""

    t_s: float
    angle_deg: float
    speed_kn: float


@sample_type
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


@sample_type
class Depth:
    """Depth below the transducer plus the offset when the sentence gave one."""

    t_s: float
    depth_m: float


@sample_type
class Attitude:
    """Heel (roll, positive to starboard) and pitch (positive bow up), degrees."""

    t_s: float
    heel_deg: float | None = None
    pitch_deg: float | None = None


@sample_type
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
