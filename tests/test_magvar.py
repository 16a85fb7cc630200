"""Magnetic variation: the World Magnetic Model against its official test values, caching, modes."""

from __future__ import annotations

import calendar

import pytest

from daemon.intake.magvar import VariationProvider, decimal_year, model_declination_deg
from tests.shared import shared_path


def _wmm2025_rows() -> list[tuple[float, ...]]:
    path = shared_path("reference", "wmm2025-test-values.txt")
    rows = []
    for line in path.read_text().splitlines():
        if line.strip() and not line.lstrip().startswith("#"):
            rows.append(tuple(float(f) for f in line.split()))
    return rows


def test_declination_matches_the_official_wmm2025_test_values():
    # Source: NOAA NCEI / BGS WMM2025 test values (100 rows: decimal year,
    # altitude km, geodetic lat, lon, declination deg, ...); published to 0.01 deg.
    rows = _wmm2025_rows()
    assert len(rows) == 100
    worst = 0.0
    for year, alt_km, lat, lon, dec, *_ in rows:
        got = model_declination_deg(lat, lon, year, alt_km)
        worst = max(worst, abs(got - dec))
        assert got == pytest.approx(dec, abs=0.01), (year, alt_km, lat, lon)
    assert worst <= 0.01


def test_decimal_year_follows_the_calendar():
    # 2024 is a leap year: 2 July 00:00 starts day 183 of 366 -> exactly mid-year.
    assert decimal_year(calendar.timegm((2024, 7, 2, 0, 0, 0))) == pytest.approx(2024.5, abs=1e-12)
    # 2027 has 365 days: half of it ends 2 July 12:00.
    assert decimal_year(calendar.timegm((2027, 7, 2, 12, 0, 0))) == pytest.approx(2027.5, abs=1e-12)
    assert decimal_year(calendar.timegm((2026, 1, 1, 0, 0, 0))) == 2026.0


def test_model_mode_at_sea_level_matches_a_test_value_row():
    # Source: NOAA NCEI / BGS WMM2025 test values, row "2027.5, 0 km, 13 S, 59 W, -17.49".
    t_s = calendar.timegm((2027, 7, 2, 12, 0, 0))  # 2027.5
    var = VariationProvider("model")
    assert var.east_deg(t_s) is None  # no position yet
    var.note_position(-13.0, -59.0, t_s)
    assert var.east_deg(t_s) == pytest.approx(-17.49, abs=0.01)


def test_model_is_cached_until_the_boat_moves_10_km_or_a_day_passes():
    t0 = calendar.timegm((2026, 5, 4, 6, 0, 0))
    var = VariationProvider("model")
    var.note_position(50.0, -4.0, t0)
    first = var.east_deg(t0)
    # GIVEN a move of about 5.6 km north (0.05 deg of latitude) an hour later
    var.note_position(50.05, -4.0, t0 + 3600)
    # THEN the cached value is returned without a new evaluation
    assert var.east_deg(t0 + 3600) == first
    assert var.model_evaluations == 1
    # WHEN the boat is about 22 km from the cached point (0.2 deg of latitude)
    var.note_position(50.2, -4.0, t0 + 7200)
    moved = var.east_deg(t0 + 7200)
    assert var.model_evaluations == 2
    assert moved != first
    # WHEN more than a day has passed at the same place
    var.east_deg(t0 + 7200 + 86400 + 1)
    assert var.model_evaluations == 3


def test_sentence_mode_prefers_the_sentence_and_falls_back_to_the_model():
    t0 = calendar.timegm((2026, 5, 4, 6, 0, 0))
    var = VariationProvider("sentence")
    assert var.east_deg(t0) is None
    var.note_position(50.0, -4.0, t0)
    from_model = var.east_deg(t0)
    assert from_model == pytest.approx(model_declination_deg(50.0, -4.0, decimal_year(t0)))
    var.note_sentence_variation(-7.5, t0 + 1)
    assert var.east_deg(t0 + 2) == -7.5
    var.note_sentence_variation(float("nan"), t0 + 3)  # a garbled field changes nothing
    assert var.east_deg(t0 + 4) == -7.5


def test_fixed_mode_ignores_sentences_and_position():
    var = VariationProvider("fixed", fixed_east_deg=3.25)
    var.note_sentence_variation(-10.0, 0.0)
    var.note_position(10.0, 10.0, 0.0)
    assert var.east_deg(1.0) == 3.25


def test_unknown_mode_is_refused():
    with pytest.raises(ValueError, match="variation mode"):
        VariationProvider("guess")
