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

One failure, one alert: a kind whose silence has an alert of its own is left
to that alert (``OWN_ALERT``: the GNSS fix has ``gnss_lost``, which says how
long the fix has been missing), and so is the course and speed over ground
while the fix is missing too (the same receiver, as a rule). The text says
what is late and by how much: "Heading late by 3 s (none for 8 s; expected at
least every 5 s)".

"Now" is the tick's data time; the daemon ticks with the wall clock when live,
so a feed that stops while all others are silent too is still noticed.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from estimators import wording
from estimators.base import CAUTION, Condition, Context, EstimatorBase, Output
from estimators.params import param
from estimators.samples import KIND_NAMES, REPORTED_KINDS, Sample

ALERT_ID = "sensor_stale"
_NEVER = float("-inf")  # the newest time of a kind not seen yet

# Kinds whose silence another alert reports (its own text says how long): left out here.
OWN_ALERT = {"fix": "gnss_lost"}
# Kinds left out while the kind named is missing too: VTG stops with the fix when the receiver stops.
FOLDED_WITH = {"ground_velocity": "fix"}

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
        if kind in REPORTED_KINDS:  # a crew's report is a state, said once: its age is no silence
            return math.inf
        return getattr(self, f"{kind}_s")


class StalenessWatch(EstimatorBase):
    """Watches every sample kind's age; publishes only the ``sensor_stale`` condition."""

    name = "staleness"
    accepts = tuple(KIND_NAMES)
    sees_distrusted = True  # a frozen compass still speaks: one failure, one alert (heading_suspect)

    def __init__(self, params: StalenessParams | None = None) -> None:
        self.params = params or StalenessParams()
        # every kind's interval, in KIND_NAMES order (the params are frozen): read each tick, looked up once
        self._intervals = {kind: self.params.interval_s(kind) for kind in KIND_NAMES.values()}
        self._last: dict[str, float] = {}
        self._active = False
        self._longest: dict[str, float] = {}  # this episode's longest silence per kind, s

    def step(self, sample: Sample, ctx: Context) -> Sequence[Output]:
        kind = KIND_NAMES[type(sample)]  # kind_of, without the call: every sample comes here
        if sample.t_s > self._last.get(kind, _NEVER):  # False for NaN: never stored
            self._last[kind] = sample.t_s
        return ()

    def tick(self, t_s: float, ctx: Context) -> Sequence[Output]:
        stale = self.stale_kinds(t_s)
        if not stale:
            if not self._active:
                return ()
            self._active = False
            return (self._closing(t_s),)
        self._active = True
        for kind, age in stale.items():
            self._longest[kind] = max(age, self._longest.get(kind, 0.0))
        return (self._condition(t_s, stale),)

    def _closing(self, t_s: float) -> Condition:
        """The all-clear with the last figures: which feeds were silent, for how long at most."""
        longest, self._longest = self._longest, {}
        parts = [f"{_WHAT[k]} silent up to {wording.duration(age)}" for k, age in longest.items()]
        text = ("; ".join(parts) + "; every feed fresh again") if parts else "Every feed fresh again"
        return Condition(t_s, ALERT_ID, CAUTION, False, text[0].upper() + text[1:],
                         {"feeds": [], "longest_s": {k: round(a) for k, a in longest.items()}})

    def stale_kinds(self, t_s: float) -> dict[str, float]:
        """Kind -> age (s) for every present kind silent beyond its interval that no other alert
        reports (see ``OWN_ALERT``), in KIND_NAMES order."""
        silent = self.silent_kinds(t_s)
        return {k: age for k, age in silent.items()
                if k not in OWN_ALERT and FOLDED_WITH.get(k) not in silent}

    def silent_kinds(self, t_s: float) -> dict[str, float]:
        """Kind -> age (s) for every present kind silent beyond its interval, in KIND_NAMES order."""
        forget = self.params.forget_after_s
        out = {}
        for kind, interval in self._intervals.items():
            last = self._last.get(kind)
            if last is None:
                continue
            age = t_s - last
            if age > interval and not (forget > 0.0 and age > forget):
                out[kind] = age
        return out

    def _condition(self, t_s: float, stale: dict[str, float]) -> Condition:
        sentences = []
        for k, age in stale.items():
            interval = self.params.interval_s(k)
            late = wording.duration(max(1.0, age - interval))
            what = _WHAT[k][0].upper() + _WHAT[k][1:]
            sentences.append(f"{what} late by {late} (none for {wording.duration(age)}; expected at least every "
                             f"{wording.duration(interval)}): {_CHECK[k]}.")
        values = {
            "feeds": list(stale),
            "age_s": {k: round(age, 1) for k, age in stale.items()},
            "expected_s": {k: self.params.interval_s(k) for k in stale},
        }
        return Condition(t_s, ALERT_ID, CAUTION, True, " ".join(sentences), values)
