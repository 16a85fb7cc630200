"""Putting the parts together from a Config, the same way for run, replay and demo."""

from __future__ import annotations

import logging
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import date, datetime, timezone
from typing import Any

from daemon import RELEASE_DATE
from daemon.core.alerts import AlertManager
from daemon.core.config import Config
from daemon.intake.counters import Counters
from daemon.intake.ingest import Ingest
from daemon.intake.magvar import VariationProvider
from daemon.core.pipeline import Pipeline
from daemon.intake.priority import PrioritySelector
from daemon.core.readings import Sink
from estimators.current import Calibration, CurrentEstimator
from estimators.fronts import FrontDetector
from estimators.instruments import InstrumentReadings
from estimators.integrity import HeadingIntegrity
from estimators.position import PositionEstimator
from estimators.pressure import PressureTendency
from estimators.samples import KIND_NAMES
from estimators.sea_state import SeaStateEstimator
from estimators.staleness import StalenessWatch

log = logging.getLogger(__name__)


def build_estimators(cfg: Config, calibration: Calibration | None = None) -> list[Any]:
    """The plug-ins, in the order they step (a later one may read an earlier one's output).

    A new estimator is one more line here and a section in the config.
    """
    inst = cfg.installation
    if calibration is None:
        calibration = initial_calibration(cfg)
    return [
        HeadingIntegrity(cfg.section("integrity")),  # first: a distrust applies before the others see the fix
        CurrentEstimator(cfg.section("current"), calibration),
        PositionEstimator(cfg.section("position")),
        FrontDetector(cfg.section("front")),
        PressureTendency(cfg.section("pressure"), inst.barometer_height_m),
        # after current: reads its calibration and set/drift; the hull's leeway rule is [current]'s
        SeaStateEstimator(cfg.section("sea_state"), cfg.section("current")),
        StalenessWatch(cfg.section("staleness")),
        InstrumentReadings(),
    ]


def initial_calibration(cfg: Config) -> Calibration | None:
    """The installation's stated log scale and compass offset, when they differ from none."""
    inst = cfg.installation
    if inst.stw_scale == 1.0 and inst.heading_offset_deg == 0.0:
        return None
    return Calibration.from_dict({"stw_scale": inst.stw_scale, "heading_offset_deg": inst.heading_offset_deg})


@dataclass
class Parts:
    pipeline: Pipeline
    counters: Counters
    variation: VariationProvider
    make_ingest: Callable[..., Ingest]
    current: CurrentEstimator
    extras: dict[str, Any] = field(default_factory=dict)


def not_before_utc(cfg: Config) -> float:
    """The week-rollover reference: the configured date, or this release's date.

    Old logs genuinely dated more than ~18.6 years before it (1024 weeks less a
    year) would be moved forward: replay them with an earlier gnss_not_before.
    """
    d = date.fromisoformat(cfg.installation.gnss_not_before or RELEASE_DATE)
    return datetime(d.year, d.month, d.day, tzinfo=timezone.utc).timestamp()


def build(cfg: Config, sinks: list[Sink], *, live: bool, calibration: Calibration | None = None,
          alert_snapshot: dict | None = None, extra_status: Callable[[], dict] | None = None) -> Parts:
    counters = Counters()
    inst = cfg.installation
    variation = VariationProvider(mode=inst.variation_source, fixed_east_deg=inst.variation_fixed_deg)
    nb = not_before_utc(cfg)
    allow = {name: c.allow_no_checksum for name, c in cfg.inputs.items()}

    def make_ingest(source: str, allow_no_checksum: bool | None = None) -> Ingest:
        return Ingest(source, counters=counters, variation=variation, live=live,
                      allow_no_checksum=allow.get(source, False) if allow_no_checksum is None else allow_no_checksum,
                      heading_sensor=inst.heading_sensor, not_before_utc=nb)

    estimators = build_estimators(cfg, calibration)
    params = cfg.section("alerts")
    prefix = cfg.mqtt.prefix
    alerts = (AlertManager.restore(params, alert_snapshot, prefix=prefix) if alert_snapshot
              else AlertManager(params, prefix=prefix))
    # one table says when a feed has gone silent: for the sensor_stale caution and for falling back
    staleness = cfg.section("staleness")
    selector = PrioritySelector(cfg.priority, {k: staleness.interval_s(k) for k in KIND_NAMES.values()})
    pipeline = Pipeline(estimators, sinks, alerts, prefix=prefix, selector=selector, counters=counters,
                        extra_status=extra_status)
    current = next(e for e in estimators if isinstance(e, CurrentEstimator))
    return Parts(pipeline, counters, variation, make_ingest, current)
