"""How numbers read in the texts a person sees (alert texts, summaries, the status line).

One place for every figure written into words, so the same quantity reads the
same everywhere:

- positions in degrees and decimal minutes with hemisphere letters,
  ``40°56.2′N 032°20.8′W`` (the form of chart and GNSS displays; prime ′ for
  minutes);
- signed figures with a true minus sign (U+2212) and never a negative zero
  ("−0.0" is 0.0);
- an uncertainty too small to show at the figure's decimals reads "< 0.1", not
  "±0.0";
- times of day as ``08:40 UTC`` and spans as ``08:40–08:42 UTC`` (data time,
  never an ISO string inside a sentence); a span over midnight gives the dates;
- durations in seconds, minutes and hours a person reads at a glance;
- the calibration the right way round: what the instrument does ("reads
  4.9 % low", "reads 2.5° high") and the correction that fixes it.

Payload fields keep numbers; these helpers are for text only.
"""

from __future__ import annotations

import math
from datetime import datetime, timezone

MINUS = "\u2212"


def fixed(x: float, decimals: int = 1) -> str:
    """``x`` to ``decimals`` places, true minus sign, no negative zero."""
    text = f"{x:.{decimals}f}"
    if text.startswith("-"):
        if float(text) == 0.0:
            return text[1:]
        return MINUS + text[1:]
    return text


def signed(x: float, decimals: int = 1) -> str:
    """Like :func:`fixed` with an explicit plus sign; zero has no sign."""
    text = fixed(x, decimals)
    if text.startswith(MINUS) or float(text) == 0.0:
        return text
    return "+" + text


def plus_minus(sigma: float, decimals: int = 1, unit: str = "") -> str:
    """``±0.3 kn``; a sigma that rounds to zero reads ``±<0.1 kn``, never ``±0.0``. Halves round up (a
    payload's 0.5° reads ``±1°``: Python's format rounds an exact half to even, which made it ``±0``)."""
    suffix = f" {unit}" if unit else ""
    step = 10.0 ** -decimals
    if not math.isfinite(sigma):
        return f"±?{suffix}"
    if abs(sigma) < step / 2.0:
        return f"±<{step:.{decimals}f}{suffix}"
    return f"±{math.floor(abs(sigma) / step + 0.5) * step:.{decimals}f}{suffix}"


def _dm(value: float, width: int, pos: str, neg: str) -> str:
    hemi = pos if value >= 0 else neg
    tenths = round(abs(value) * 600.0)  # tenths of a minute, rounded once: 59.96′ becomes the next degree
    deg, rest = divmod(tenths, 600)
    return f"{deg:0{width}d}°{rest / 10.0:04.1f}′{hemi}"


def position(lat_deg: float, lon_deg: float) -> str:
    """``40°56.2′N 032°20.8′W``: degrees and decimal minutes (0.1′ ≈ 185 m) with hemisphere letters."""
    if not (math.isfinite(lat_deg) and math.isfinite(lon_deg)):
        return "position unknown"
    lon = lon_deg if -180.0 <= lon_deg <= 180.0 else ((lon_deg + 180.0) % 360.0) - 180.0
    return f"{_dm(lat_deg, 2, 'N', 'S')} {_dm(lon, 3, 'E', 'W')}"


def _utc(t_s: float) -> datetime:
    return datetime.fromtimestamp(t_s, tz=timezone.utc)


def clock(t_s: float) -> str:
    """``08:40 UTC``: data time of day, to the minute."""
    return _utc(t_s).strftime("%H:%M UTC")


def span(t0_s: float, t1_s: float) -> str:
    """``08:40–08:42 UTC``; ``2 Dec 23:50 – 3 Dec 00:10 UTC`` when the dates differ."""
    a, b = _utc(t0_s), _utc(t1_s)
    if a.date() == b.date():
        return f"{a:%H:%M}–{b:%H:%M} UTC"
    return f"{a.day} {a:%b %H:%M} – {b.day} {b:%b %H:%M} UTC"


def duration(seconds: float) -> str:
    """``45 s``, ``2 min 31 s``, ``14 min``, ``3 h 05 min``, ``2 d 4 h``."""
    s = max(0, round(seconds))
    if s < 60:
        return f"{s} s"
    if s < 600:
        m, r = divmod(s, 60)
        return f"{m} min {r} s" if r else f"{m} min"
    if s < 3600:
        return f"{round(s / 60)} min"
    if s < 86400:
        h, m = divmod(round(s / 60), 60)
        return f"{h} h {m:02d} min"
    d, h = divmod(round(s / 3600), 24)
    return f"{d} d {h} h"


def log_calibration(stw_scale: float) -> str:
    """What the speed log does, for a scale k with true STW = k × reading.

    The reading is 1/k of the truth, so it reads (1 − 1/k) low: k = 1.052 reads 4.9 % low.
    """
    if not (math.isfinite(stw_scale) and stw_scale > 0.0):
        return "log calibration unknown"
    error_pct = (1.0 / stw_scale - 1.0) * 100.0  # (reading − true) / true
    if abs(error_pct) < 0.05:
        return "log reads true"
    way = "low" if error_pct < 0 else "high"
    return f"log reads {abs(error_pct):.1f} % {way} (correction ×{stw_scale:.3f})"


def compass_calibration(heading_offset_deg: float) -> str:
    """What the compass does, for an offset d with true heading = reading + d."""
    if not math.isfinite(heading_offset_deg):
        return "compass calibration unknown"
    if abs(heading_offset_deg) < 0.05:
        return "compass reads true"
    way = "high" if heading_offset_deg < 0 else "low"
    return f"compass reads {abs(heading_offset_deg):.1f}° {way} (correction {signed(heading_offset_deg)}°)"


def calibration(stw_scale: float, heading_offset_deg: float) -> str:
    """``log reads 4.9 % low (correction ×1.052); compass reads 2.5° high (correction −2.5°)``."""
    return f"{log_calibration(stw_scale)}; {compass_calibration(heading_offset_deg)}"
