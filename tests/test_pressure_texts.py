"""The barometer as a crew reads it: which figure an alert uses, what its words are, and a barometer
step that no weather makes (a sensor fault, not a storm).

Synthetic barometer from tests/test_pressure.py (ISO 2533 standard atmosphere for the station
pressure, a semidiurnal tide written independently of the estimator's, seeded noise, 0.1 hPa steps).
Descriptor bands: the usual marine convention (from memory, as in the shipping forecasts).
"""

from __future__ import annotations

import re

import pytest

from estimators.pressure import PressureParams, descriptor
from tests.test_pressure import H, T0, barometer, first_raised, ramp


def _ids(conditions, alert_id):
    return [c for c in conditions if c.alert_id == alert_id]


@pytest.mark.parametrize("step_hpa", [-20.0, +20.0])
def test_a_barometer_step_no_atmosphere_makes_is_a_sensor_fault_not_weather(step_hpa):
    # GIVEN 5 h of steady weather, and from 4 h in a barometer that reads 20 hPa off (a sensor fault)
    conditions, pubs, est = barometer(lambda s: 1013.0 + (step_hpa if s >= 4 * H else 0.0), 7.0, seed=21,
                                      gusts=False)
    # THEN no weather alert at all from it: neither pressure_fall nor rapid_deepening
    assert _ids(conditions, "pressure_fall") == [] and _ids(conditions, "rapid_deepening") == []
    # AND it is flagged: counted, in the payload, and the barometer_fault caution says what happened
    assert est.counts["step_faults"] == 1
    fault = first_raised(conditions, "barometer_fault")
    assert fault is not None and fault.priority == "caution"
    sign = "+" if step_hpa > 0 else "\u2212"
    assert re.search(f"jumped \\{sign}20\\.[0-3] hPa" if sign == "+" else f"jumped {sign}20\\.[0-3] hPa", fault.text)
    assert "sensor fault" in fault.text
    late = [p.payload for p in pubs if p.t_s - T0 > 4.2 * H]
    hour_after = [p.payload for p in pubs if 4.2 * H < p.t_s - T0 < 5.0 * H]
    assert all(p["sensor_step_hpa"] == pytest.approx(step_hpa, abs=0.3) for p in hour_after)
    assert late[-1]["sensor_step_hpa"] is None  # no longer flagged after step_fault_hold_s
    # AND the filter was re-initialised on the new readings; the tendency goes on, steady (within the
    # tide's 3-hour swing at 45°: 0.58 hPa), never the 20 hPa jump
    assert late[-1]["msl_hpa"] == pytest.approx(1013.0 + step_hpa, abs=0.8)
    assert max(abs(p["tendency_3h_tide_corrected_hpa"]) for p in late) < 0.6
    assert max(abs(p["tendency_3h_hpa"]) for p in late) < 1.2


def test_a_real_lasting_fall_of_a_few_hpa_is_still_weather():
    # GIVEN a 4 hPa drop over 5 minutes that stays (a squall's pressure jump is a few hPa: weather)
    conditions, pubs, est = barometer(lambda s: 1013.0 - 4.0 * min(max(s - 2 * H, 0.0), 300.0) / 300.0, 4.0,
                                      seed=22, gusts=False)
    # THEN it is not called a sensor fault
    assert est.counts["step_faults"] == 0 and _ids(conditions, "barometer_fault") == []
    assert pubs[-1].payload["sensor_step_hpa"] is None


def test_the_fall_alert_says_which_figure_it_uses_and_its_words_agree_with_the_descriptor():
    # GIVEN a steady 2.4 hPa/h fall from 3 h in (7.2 hPa in 3 h by 6 h); the early rule off
    conditions, pubs, _ = barometer(ramp(3 * H, -2.4), 6.5, seed=23, params=PressureParams(early_rule=False))
    active = [c for c in _ids(conditions, "pressure_fall") if c.active]
    assert active
    for c in active:
        fig, which = c.values["fall_3h_hpa"], c.values["fall_3h_is"]
        # THEN the text names the figure, says whether it is as the barometer shows it or tide-corrected,
        assert f"fell {fig:.1f} hPa in the last 3 hours" in c.text
        assert ("as the barometer shows it" in c.text) == (which == "observed")
        assert ("with the daily pressure tide removed" in c.text.split("(")[0]) == (which == "tide_corrected")
        # AND its words are the descriptor's for that very figure
        assert f": {descriptor(-fig)}." in c.text
        # AND the figure is the larger fall of the two
        assert fig == pytest.approx(max(-c.values["observed_3h_hpa"], -c.values["tide_corrected_3h_hpa"]), abs=0.11)
    # AND the figures follow the fall while it lasts: the estimator tells the manager each new figure
    figs = [c.values["fall_3h_hpa"] for c in active]
    assert figs[-1] > figs[0] + 2.0 and len(set(figs)) > 10


def test_the_early_rule_says_it_is_a_rate_not_falling_quickly():
    # GIVEN 2.5 hPa/h from the start: an hour of readings shows it before any 3-hour figure
    conditions, _, _ = barometer(ramp(0.0, -2.5), 2.0, seed=7)
    c = first_raised(conditions, "pressure_fall")
    # THEN the text is a rate over the last hour, with its 3-hour bound, and no descriptor words
    assert c.text.startswith("Pressure falling at ") and "hPa/h over the last hour" in c.text
    assert "at least" in c.text and "no 3-hour figure yet" in c.text
    assert "quickly" not in c.text and "rapidly" not in c.text
    # AND no long floats in its values
    assert all(v is None or isinstance(v, str) or round(v, 2) == v for v in c.values.values())


def test_the_all_clear_reports_the_last_figure():
    conditions, _, _ = barometer(ramp(1 * H, -1.6, stop_s=4 * H), 8.0, seed=9)
    gone = [c for c in _ids(conditions, "pressure_fall") if not c.active]
    assert len(gone) == 1
    assert gone[0].text.startswith("Pressure fell quickly; now the barometer's 3-hour change is ")
    assert gone[0].values["observed_3h_hpa"] is not None
