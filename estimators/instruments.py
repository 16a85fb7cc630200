"""instruments: the latest heading, speed through water, depth and true wind, with their ages.

Theory of operation. Nothing is estimated here: a display at the chart table
needs the readings themselves beside the derived figures (the current makes
sense only next to the heading and the log it came from). For each kind the
newest sample's value and data time are kept; once per data second in which
something new arrived, one publication carries every value with its age in
seconds at that moment (``<name>_age_s``), or null where that kind was never
seen. Values are as the instruments give them: the heading in degrees true
(variation applied by the daemon), the speed through water as the log reads
it (uncalibrated; the calibration is in ``current``), depth below the surface
or the transducer as the sounder gives it, and the wind over water (the
sailor's true wind) as the wind instrument reports it.
"""

from __future__ import annotations

from collections.abc import Sequence

from estimators.base import Context, EstimatorBase, Output, Publication
from estimators.samples import Depth, Heading, Sample, WaterSpeed, WaterWind

TOPIC = "instruments"
PUBLISH_EVERY_S = 1.0  # the interface's "<= 1 Hz"


class InstrumentReadings(EstimatorBase):
    name = "instruments"
    accepts = (Heading, WaterSpeed, Depth, WaterWind)
    sees_distrusted = True  # the display shows what the instruments say; an alert says when not to believe it

    def __init__(self) -> None:
        # name -> (time, the newest sample): its display figures are made when published, at most once a
        # second, not for each of the several samples a second brings
        self._latest: dict[str, tuple[float, Sample]] = {}
        self._fresh = False
        self._last_pub_s = float("-inf")

    def step(self, sample: Sample, ctx: Context) -> Sequence[Output]:
        if isinstance(sample, Heading):
            self._keep("heading", sample)
        elif isinstance(sample, WaterSpeed):
            self._keep("stw", sample)
        elif isinstance(sample, Depth):
            self._keep("depth", sample)
        elif isinstance(sample, WaterWind) and sample.from_true_deg is not None:
            self._keep("wind", sample)
        return ()

    def tick(self, t_s: float, ctx: Context) -> Sequence[Output]:
        if not self._fresh or t_s - self._last_pub_s < PUBLISH_EVERY_S:
            return ()
        self._fresh = False
        self._last_pub_s = t_s
        payload: dict[str, float | None] = {}
        for name, (seen_s, sample) in self._latest.items():
            payload.update(_figures(sample))
            payload[f"{name}_age_s"] = round(max(0.0, t_s - seen_s), 1)
        return (Publication(t_s, TOPIC, payload),)

    def _keep(self, name: str, sample: Sample) -> None:
        kept = self._latest.get(name)
        if kept is None or sample.t_s >= kept[0]:
            self._latest[name] = (sample.t_s, sample)
            self._fresh = True


def _figures(sample: Sample) -> dict[str, float | None]:
    """A kept sample's display figures, rounded as a display shows them."""
    if isinstance(sample, Heading):
        return {"heading_deg": round(sample.true_deg, 1)}
    if isinstance(sample, WaterSpeed):
        return {"stw_kn": round(sample.speed_kn, 2)}
    if isinstance(sample, Depth):
        return {"depth_m": round(sample.depth_m, 1)}
    return {"wind_from_deg": round(sample.from_true_deg, 0), "wind_kn": round(sample.speed_kn, 1)}
