"""Magnetic variation (declination), east positive, for turning magnetic headings true.

Three ways to know it, chosen by configuration:

- ``"sentence"``: the latest variation an instrument sent (RMC, HDG fields).
  Until one has, and once a position is known, the World Magnetic Model value
  for that position is used instead, so a compass-only heading is still true.
- ``"fixed"``: one value for the whole passage (from the chart's compass rose).
- ``"model"``: the World Magnetic Model (WMM, NOAA NCEI and BGS) at the latest
  position and the date of the heading, computed with pygeomag.

The model is evaluated at sea level and cached: a new value is computed only
when the boat has moved more than ``recompute_km`` from where the cached one
was computed, or its date differs by more than ``recompute_s``. Variation
changes by well under 0.1 degree over 10 km almost everywhere outside the polar
regions, so per heading this costs a distance check, not a model evaluation.
"""

from __future__ import annotations

import calendar
import datetime as dt
import logging
import math

from pygeomag import GeoMag

log = logging.getLogger(__name__)

MODES = ("sentence", "fixed", "model")
EARTH_RADIUS_KM = 6371.0088  # IUGG mean radius

# Coefficient sets shipped with pygeomag: first year each one is meant for.
# Dates outside 2010-2030 use the nearest set, extrapolated (logged once).
_MODEL_EPOCHS = (2010, 2015, 2020, 2025)
_MODEL_LAST_YEAR = 2030


def decimal_year(t_s: float) -> float:
    """UNIX seconds (UTC) to a decimal year, e.g. 2025-07-02T12:00Z -> 2025.5."""
    year = dt.datetime.fromtimestamp(t_s, dt.timezone.utc).year
    start = calendar.timegm((year, 1, 1, 0, 0, 0))
    end = calendar.timegm((year + 1, 1, 1, 0, 0, 0))
    return year + (t_s - start) / (end - start)


class _Models:
    """One pygeomag GeoMag per coefficient set, loaded on first use."""

    def __init__(self) -> None:
        self._by_epoch: dict[int, GeoMag] = {}
        self._warned_outside = False

    def declination_deg(self, lat_deg: float, lon_deg: float, year: float, alt_km: float) -> float:
        epoch = max([e for e in _MODEL_EPOCHS if e <= year] or [_MODEL_EPOCHS[0]])
        outside = year < _MODEL_EPOCHS[0] or year >= _MODEL_LAST_YEAR
        if outside and not self._warned_outside:
            log.warning("magnetic model: %.1f is outside 2010-2030; extrapolating WMM-%d", year, epoch)
            self._warned_outside = True
        model = self._by_epoch.get(epoch)
        if model is None:
            model = self._by_epoch[epoch] = GeoMag(base_year=epoch)
        lon = (lon_deg + 180.0) % 360.0 - 180.0
        result = model.calculate(glat=lat_deg, glon=lon, alt=alt_km, time=year,
                                 allow_date_outside_lifespan=True)
        return float(result.d)


_MODELS = _Models()


def model_declination_deg(lat_deg: float, lon_deg: float, year: float, alt_km: float = 0.0) -> float:
    """WMM declination, degrees east positive, at a geodetic position, decimal year and altitude (km)."""
    return _MODELS.declination_deg(lat_deg, lon_deg, year, alt_km)


def distance_km(lat1: float, lon1: float, lat2: float, lon2: float) -> float:
    """Great-circle distance on a sphere (haversine), km; ample for a cache test."""
    p1, p2 = math.radians(lat1), math.radians(lat2)
    dp, dl = p2 - p1, math.radians(lon2 - lon1)
    h = math.sin(dp / 2) ** 2 + math.cos(p1) * math.cos(p2) * math.sin(dl / 2) ** 2
    return 2.0 * EARTH_RADIUS_KM * math.asin(min(1.0, math.sqrt(h)))


class VariationProvider:
    """The variation to apply to magnetic headings, degrees east positive.

    ``mode="sentence"`` returns the latest value an instrument sent; when no
    sentence has given one yet and a position is known it falls back to the
    World Magnetic Model at that position. ``mode="fixed"`` returns
    ``fixed_east_deg``. ``mode="model"`` always uses the model. ``east_deg``
    returns None only when nothing is known (sentence/model mode, no sentence
    value, no position yet).
    """

    def __init__(self, mode: str = "sentence", fixed_east_deg: float = 0.0, *,
                 recompute_km: float = 10.0, recompute_s: float = 86400.0) -> None:
        if mode not in MODES:
            raise ValueError(f"variation mode {mode!r}: expected one of {', '.join(MODES)}")
        self.mode = mode
        self.fixed_east_deg = float(fixed_east_deg)
        self.recompute_km = recompute_km
        self.recompute_s = recompute_s
        self._sentence: float | None = None
        self._position: tuple[float, float] | None = None
        # (lat, lon, t_s, declination) of the last model evaluation
        self._cached: tuple[float, float, float, float] | None = None
        self.model_evaluations = 0

    def note_sentence_variation(self, east_deg: float, t_s: float) -> None:
        """A variation from a sentence (RMC, HDG), degrees east positive, at data time ``t_s``."""
        if math.isfinite(east_deg):
            self._sentence = float(east_deg)

    def note_position(self, lat_deg: float, lon_deg: float, t_s: float) -> None:
        """The latest GNSS position, degrees, at data time ``t_s``."""
        if math.isfinite(lat_deg) and math.isfinite(lon_deg) and abs(lat_deg) <= 90.0:
            self._position = (float(lat_deg), float(lon_deg))

    def east_deg(self, t_s: float) -> float | None:
        """Variation at data time ``t_s``, degrees east positive, or None when unknown."""
        if self.mode == "fixed":
            return self.fixed_east_deg
        if self.mode == "sentence" and self._sentence is not None:
            return self._sentence
        return self._model_east_deg(t_s)

    def _model_east_deg(self, t_s: float) -> float | None:
        if self._position is None:
            return None
        lat, lon = self._position
        cached = self._cached
        if cached is not None:
            c_lat, c_lon, c_t, c_dec = cached
            if (abs(t_s - c_t) <= self.recompute_s
                    and distance_km(lat, lon, c_lat, c_lon) <= self.recompute_km):
                return c_dec
        dec = model_declination_deg(lat, lon, decimal_year(t_s))
        self.model_evaluations += 1
        self._cached = (lat, lon, t_s, dec)
        return dec
