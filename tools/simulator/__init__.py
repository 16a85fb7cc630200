"""A sample-level simulator with ground truth: invented boats on invented water.

    from tools.simulator import simulate, scenarios
    run = simulate(scenarios.tacking_leg(), seed=1)
    run.samples        # estimators.samples dataclasses, in time order, as the sensors report them
    run.truth          # numpy structured array, fields TRUTH_FIELDS, one row a second
    run.truth_at(t_s)  # TruthRow interpolated at any time
    run.events         # fronts crossed, band edges, GNSS outages, leg changes

``nmea_writer`` turns a run into NMEA 0183 lines and its truth into CSV (``read_truth_csv``
reads one back); ``python -m tools.simulator`` writes the demo passage. Neither ``daemon`` nor
``estimators`` imports it.
"""

from . import scenarios
from .boat import TRUTH_FIELDS, Beat, HelmModel, Steer, Waypoint, box, tacks
from .ocean import (
    CurrentBand, Front, Ocean, Patch, PressureField, SeaTemperatureField, SteadyCurrent, TidalStream, WindField,
)
from .run import Scenario, SimEvent, SimRun, TruthRow, simulate
from .nmea_writer import read_truth_csv
from .sensors import SensorSpec

__all__ = [
    "scenarios", "simulate", "Scenario", "SimRun", "SimEvent", "TruthRow", "TRUTH_FIELDS", "SensorSpec",
    "HelmModel", "Steer", "Waypoint", "Beat", "box", "tacks", "Ocean", "SteadyCurrent", "TidalStream",
    "CurrentBand", "Front", "Patch", "SeaTemperatureField", "PressureField", "WindField", "read_truth_csv",
]
