"""Plausibility limits: one table read by the NMEA parser and by the estimators alike.

A value outside its range is no measurement of a boat at sea: the parser drops
it (counted ``implausible``), an estimator given one directly counts a fault.
Each range is the physical record rounded outward, so a real extreme is never
thrown away; where a figure is quoted from memory it says so.

``lo <= x <= hi`` unless the name says ``_MAX`` (then ``0 <= x < max``). Pure
numbers only: nothing here reads a clock, a file or a socket.
"""

from __future__ import annotations

# Speeds, knots.
SOG_MAX_KN = 60.0  # faster than any small boat's passage; above it a GNSS glitch (common practice)
STW_MAX_KN = 40.0  # a displacement or planing log on a small boat; the paddle wheel tops out below this
WIND_MAX_KN = 250.0  # above the strongest gust on record (113 m/s, about 220 kn; from memory)

# Pressure, hPa (station pressure from the barometer).
# Lowest sea-level pressure on record about 870 hPa (typhoon Tip 1979), highest about
# 1084 hPa (Siberia 1968); both WMO archive of weather extremes, from memory; rounded out.
PRESSURE_HPA = (870.0, 1085.0)

# Temperatures, degrees Celsius.
SEA_TEMP_C = (-3.0, 40.0)  # sea water freezes near -1.9 C at salinity 35; no open sea above ~35 C (from memory)
AIR_TEMP_C = (-60.0, 60.0)  # beyond the records at sea level, rounded out (from memory)

# Depth, metres.
DEPTH_MAX_M = 12000.0  # deeper than any ocean (Challenger Deep about 10 935 m, from memory)

# Angles, degrees.
ATTITUDE_MAX_DEG = 90.0  # heel or pitch beyond this is a capsize or a sensor fault
DIRECTION_DEG = (0.0, 360.0)  # a direction; 360 is read as 0
VARIATION_MAX_DEG = 180.0  # magnetic variation or deviation, east positive
LAT_MAX_DEG = 90.0
LON_MAX_DEG = 180.0
HDOP_MAX = 50.0  # above it (99.9 and the like) a receiver means "unknown"

# Data time, UNIX seconds: from the GPS epoch (1980-01-06, the earliest date a GNSS
# receiver can state) to 2100-01-01. A time outside is a broken clock, not a date.
DATA_TIME_S = (315964800.0, 4102444800.0)


def within(x: float, lo_hi: tuple[float, float]) -> bool:
    """``lo <= x <= hi``; False for NaN."""
    return lo_hi[0] <= x <= lo_hi[1]
