"""sensor_stale: a caution while a feed that was present has fallen silent.

Theory of operation. For every sample kind the watch remembers the data time
of the newest sample (``last[kind]``, UNIX s). A kind counts as *present* once
one sample of it has arrived, and as *stale* at data time ``t`` when
``t - last[kind] > interval[kind]``, the longest gap expected between two
samples of a healthy feed (parameters, s). On each ``tick`` the caution
``sensor_stale`` is active while at least one present kind is stale, with the
stale kinds, their ages and their intervals as values, and inactive once every
present kind is fresh again. A kind never seen is not missed: a boat without a
barometer is not told so every second. With ``forget_after_s`` > 0 a kind
silent for longer than that is taken as switched off and no longer counted.

"Now" is the tick's data time; the daemon ticks with the wall clock when live,
so a feed that stops while all others are silent too is still noticed.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from estimators.base import CAUTION, Condition, Context, EstimatorBase, Output
from estimators.params import param
from estimators.samples import KIND_NAMES, Sample, kind_of

ALERT_ID = "sensor_stale"

# What to check when a kind goes silent: the instrument and its feed, never the helm.
_CHECK = {
    "fix": "check the GNSS receiver, its antenna and its feed",
    "ground_velocity": "check the GNSS receiver's course and speed output",
    "heading": "check the compass feed and its wiring",
    "water_speed": "check the speed log (a fouled paddlewheel reads nothing) and its feed",
    "sea_temperature": "check the water temperature sensor and its feed",
    "air_temperature": "check the air temperature sensor and its feed",
    "pressure": "check the barometer and its feed",
    "apparent_wind": "check the wind instrument and its feed",
    "water_wind": "check the wind instrument's true wind output and the heading it needs",
    "depth": "check the depth sounder and its feed",
    "attitude": "check the attitude sensor and its feed",
}

_WHAT = {
    "fix": "GNSS fix", "ground_velocity": "course and speed over ground", "heading": "heading",
    "water_speed": "speed through water", "sea_temperature": "sea temperature",
    "air_temperature": "air temperature", "pressure": "pressure", "apparent_wind": "apparent wind",
    "water_wind": "true wind", "depth": "depth", "attitude": "heel and pitch",
}


@dataclass(frozen=True)
class StalenessParams:
    """The [staleness] section: per kind the longest expected gap between samples, s."""

    fix_s: float = param(5.0, "s", 1.0, 3600.0, "GNSS fix (RMC/GGA)")
    ground_velocity_s: float = param(30.0, "s", 1.0, 3600.0, "course and speed over ground (VTG)")
    heading_s: float = param(5.0, "s", 0.5, 3600.0, "heading (HDG/HDM/HDT/THS)")
    water_speed_s: float = param(10.0, "s", 1.0, 3600.0, "speed through water (VHW/VBW)")
    sea_temperature_s: float = param(60.0, "s", 1.0, 3600.0, "sea temperature (MTW, XDR C)")
    air_temperature_s: float = param(30.0, "s", 1.0, 3600.0, "air temperature (MDA, XDR C)")
    pressure_s: float = param(60.0, "s", 1.0, 3600.0, "barometric pressure (MDA, XDR P)")
    apparent_wind_s: float = param(30.0, "s", 1.0, 3600.0, "apparent wind (MWV relative)")
    water_wind_s: float = param(30.0, "s", 1.0, 3600.0, "true wind (MWV theoretical, MWD)")
    depth_s: float = param(30.0, "s", 1.0, 3600.0, "depth (DPT/DBT)")
    attitude_s: float = param(30.0, "s", 1.0, 3600.0, "heel and pitch")
    forget_after_s: float = param(0.0, "s", 0.0, 604800.0,
                                  "a kind silent this long is taken as switched off and no longer counted; 0: never")

    def interval_s(self, kind: str) -> float:
        return getattr(self, f"{kind}_s")


class StalenessWatch(EstimatorBase):
    """Watches every sample kind's age; publishes only the ``sensor_stale`` condition."""

    name = "staleness"
    accepts = tuple(KIND_NAMES)
    sees_distrusted = True  # a frozen compass still speaks: one failure, one alert (heading_suspect)

    def __init__(self, params: StalenessParams | None = None) -> None:
        self.params = params or StalenessParams()
        self._last: dict[str, float] = {}
        self._active = False

    def step(self, sample: Sample, ctx: Context) -> Sequence[Output]:
        kind = kind_of(sample)
        if sample.t_s > self._last.get(kind, float("-inf")):
            self._last[kind] = sample.t_s
        return ()

    def tick(self, t_s: float, ctx: Context) -> Sequence[Output]:
        stale = self.stale_kinds(t_s)
        if not stale:
            if not self._active:
                return ()
            self._active = False
            return (Condition(t_s, ALERT_ID, CAUTION, False, "Every feed seen is fresh again.", {"feeds": []}),)
        self._active = True
        return (self._condition(t_s, stale),)

    def stale_kinds(self, t_s: float) -> dict[str, float]:
        """Kind -> age (s) for every present kind silent beyond its interval, in KIND_NAMES order."""
        forget = self.params.forget_after_s
        out = {}
        for kind in KIND_NAMES.values():
            last = self._last.get(kind)
            if last is None:
                continue
            age = t_s - last
            if age > self.params.interval_s(kind) and not (forget > 0.0 and age > forget):
                out[kind] = age
        return out

    def _condition(self, t_s: float, stale: dict[str, float]) -> Condition:
        sentences = [
            f"No {_WHAT[k]} for {age:.0f} s (expected every {self.params.interval_s(k):g} s): {_CHECK[k]}."
            for k, age in stale.items()
        ]
        values = {
            "feeds": list(stale),
            "age_s": {k: round(age, 1) for k, age in stale.items()},
            "expected_s": {k: self.params.interval_s(k) for k in stale},
        }
        return Condition(t_s, ALERT_ID, CAUTION, True, " ".join(sentences), values)
