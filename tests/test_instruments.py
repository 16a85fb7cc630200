"""The instruments topic: the newest reading of each instrument, as a display shows it, with its age."""

from __future__ import annotations

from estimators.instruments import InstrumentReadings
from estimators.runner import run
from estimators.samples import Depth, Heading, WaterSpeed, WaterWind


def published(samples):
    return [o.payload for _, outs in run(InstrumentReadings(), samples) for o in outs]


def test_each_publication_shows_the_newest_reading_rounded_as_a_display_does():
    # GIVEN several readings a second; the display figures of a compass card (0.1 deg), a log (0.01 kn),
    # a sounder (0.1 m) and a wind instrument (1 deg, 0.1 kn): common practice
    samples = [Heading(100.1, 118.24), WaterSpeed(100.2, 5.416), Heading(100.6, 118.26),
               Depth(100.7, 12.34), WaterWind(100.8, 13.06, 41.6),
               Heading(101.3, 120.04), WaterSpeed(101.4, 5.301), Heading(102.2, 121.0)]
    pubs = published(samples)
    # THEN the first (at 101 s) shows the newest of each, never an earlier heading of the same second
    assert pubs[0] == {"heading_deg": 118.3, "heading_age_s": 0.4, "stw_kn": 5.42, "stw_age_s": 0.8,
                       "depth_m": 12.3, "depth_age_s": 0.3, "wind_from_deg": 42.0, "wind_kn": 13.1,
                       "wind_age_s": 0.2}
    # and the next (at 102 s) the readings that changed since, the others older by a second
    assert pubs[1]["heading_deg"] == 120.0 and pubs[1]["stw_kn"] == 5.3 and pubs[1]["depth_age_s"] == 1.3


def test_a_late_reading_does_not_replace_a_newer_one():
    pubs = published([Heading(100.5, 10.0), WaterSpeed(100.6, 5.0), Heading(100.4, 200.0), WaterSpeed(101.2, 5.0)])
    assert pubs[0]["heading_deg"] == 10.0
