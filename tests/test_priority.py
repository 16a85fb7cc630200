"""Source priority per sample kind: fall-back on staleness, return, first-seen default."""

from __future__ import annotations

import logging

import pytest

from daemon.errors import ConfigError
from daemon.intake.priority import PrioritySelector
from daemon.core.readings import Reading
from estimators.samples import Fix, Heading, Pressure


def fix(source: str, t_s: float) -> Reading:
    return Reading(source, Fix(t_s, 50.0, -4.0), recv_utc=t_s, sentence="RMC")


def test_configured_order_falls_back_when_stale_and_returns(caplog):
    caplog.set_level(logging.INFO, logger="daemon.intake.priority")
    sel = PrioritySelector({"fix": ["gps_mast", "gps_chart"]}, {"fix": 5.0})
    # GIVEN both receivers at 1 Hz
    for t in range(0, 10):
        assert sel.accept(fix("gps_mast", t)) is True
        assert sel.accept(fix("gps_chart", t + 0.5)) is False
    # WHEN the preferred one falls silent (last at t=9): within 5 s the other is still refused
    assert sel.accept(fix("gps_chart", 13.5)) is False
    # THEN once it is more than 5 s old, the second takes over
    assert sel.accept(fix("gps_chart", 14.5)) is True
    assert sel.active("fix") == "gps_chart"
    assert sel.accept(fix("gps_chart", 15.5)) is True
    # WHEN the preferred one is heard again, it takes back over at once
    assert sel.accept(fix("gps_mast", 16.0)) is True
    assert sel.accept(fix("gps_chart", 16.5)) is False
    snap = sel.snapshot()
    assert snap["switches"] == {"fix": 2}
    assert snap["active"] == {"fix": "gps_mast"}
    assert snap["refused"]["fix"]["gps_chart"] == 12
    switch_lines = [r.getMessage() for r in caplog.records if "now from" in r.getMessage() or "back to" in r.getMessage()]
    assert len(switch_lines) == 2  # one line per switch, not per reading
    assert "gps_chart" in switch_lines[0] and "gps_mast" in switch_lines[1]


def test_without_order_the_first_source_seen_is_preferred():
    sel = PrioritySelector()
    accepted = []
    for t in range(20):
        for source in ("gnss_b", "gnss_a"):  # b heard first, a interleaved
            if sel.accept(fix(source, t + (0.3 if source == "gnss_a" else 0.0))):
                accepted.append(source)
    assert set(accepted) == {"gnss_b"}
    assert sel.snapshot()["switches"] == {}


def test_kinds_are_chosen_independently():
    sel = PrioritySelector({"heading": ["compass"]})
    assert sel.accept(Reading("gps", Heading(0.0, 10.0), 0.0)) is True  # only heading source so far
    assert sel.accept(Reading("compass", Heading(0.5, 11.0), 0.5)) is True  # preferred takes over
    assert sel.accept(Reading("gps", Heading(1.0, 10.0), 1.0)) is False
    assert sel.accept(fix("gps", 1.0)) is True  # fixes from gps are unaffected


def test_default_staleness_differs_per_kind():
    sel = PrioritySelector({"pressure": ["baro_a", "baro_b"]})
    assert sel.accept(Reading("baro_a", Pressure(0.0, 1013.0), 0.0))
    # 30 s later: stale for a fix, still fresh for pressure (60 s default)
    assert not sel.accept(Reading("baro_b", Pressure(30.0, 1013.1), 30.0))
    assert sel.accept(Reading("baro_b", Pressure(61.0, 1013.1), 61.0))


def test_bad_config_names_the_key():
    with pytest.raises(ConfigError, match="priority.gnss"):
        PrioritySelector({"gnss": ["a"]})
    with pytest.raises(ConfigError, match=r"priority.stale_s.fix"):
        PrioritySelector({}, {"fix": -1})
