"""The one way numbers read in texts (estimators/wording.py)."""

from __future__ import annotations

import pynmea2
import pytest

from estimators import wording


@pytest.mark.parametrize("sentence", [
    # GIVEN positions as an NMEA 0183 RMC gives them (ddmm.mmmm, hemisphere letters; NMEA 0183 v4.11 §RMC)
    "$GPRMC,084000.00,A,4056.2000,N,03220.8000,W,5.8,120.0,021226,,,A",
    "$GPRMC,084000.00,A,0130.0400,S,17959.9600,E,5.8,120.0,021226,,,A",
    "$GPRMC,084000.00,A,5959.9700,N,00000.0400,W,5.8,120.0,021226,,,A",
])
def test_position_reads_as_the_sentence_gives_it_checked_with_pynmea2(sentence):
    # WHEN pynmea2 (an independent parser, the oracle) turns it into decimal degrees
    msg = pynmea2.parse(sentence, check=False)
    text = wording.position(msg.latitude, msg.longitude)
    # THEN our text has the same degrees and minutes to 0.1′, and the hemisphere letters
    lat_deg, lat_min = int(msg.lat[:2]), float(msg.lat[2:])
    lon_deg, lon_min = int(msg.lon[:3]), float(msg.lon[3:])
    lat_t, lon_t = round(lat_deg * 600 + lat_min * 10), round(lon_deg * 600 + lon_min * 10)
    expect = (f"{lat_t // 600:02d}°{(lat_t % 600) / 10:04.1f}′{msg.lat_dir} "
              f"{lon_t // 600:03d}°{(lon_t % 600) / 10:04.1f}′{msg.lon_dir}")
    assert text == expect


def test_position_examples():
    assert wording.position(40.93667, -32.34667) == "40°56.2′N 032°20.8′W"
    assert wording.position(59.9999, 0.0) == "60°00.0′N 000°00.0′E"  # 59.994′ rounds up to the next degree
    assert wording.position(-0.5, 180.0) == "00°30.0′S 180°00.0′E"
    assert wording.position(10.0, 200.0) == "10°00.0′N 160°00.0′W"
    assert wording.position(float("nan"), 0.0) == "position unknown"


def test_no_negative_zero_and_a_true_minus():
    assert wording.fixed(-0.004, 2) == "0.00"
    assert wording.fixed(-0.04, 1) == "0.0"
    assert wording.fixed(-2.5) == "\u22122.5"
    assert wording.signed(0.04) == "0.0"
    assert wording.signed(1.26) == "+1.3"
    assert wording.signed(-1.26) == "\u22121.3"


def test_a_sigma_below_the_shown_decimals_is_not_plus_minus_zero():
    assert wording.plus_minus(0.05, 1, "kn") == "±0.1 kn"  # 0.05 rounds half-up in words: shown
    assert wording.plus_minus(0.04, 1, "kn") == "±<0.1 kn"
    assert wording.plus_minus(0.34, 1, "kn") == "±0.3 kn"
    assert wording.plus_minus(0.5, 0) == "±1"    # an exact half (a payload's 0.5°) is shown, not "±0"
    assert wording.plus_minus(0.25, 1, "kn") == "±0.3 kn"


def test_times_spans_and_durations():
    t = 1_796_200_800.0  # 2026-12-02 08:40:00 UTC
    assert wording.clock(t) == "08:40 UTC"
    assert wording.span(t, t + 150) == "08:40–08:42 UTC"
    assert wording.span(t + 15 * 3600, t + 17 * 3600) == "2 Dec 23:40 – 3 Dec 01:40 UTC"
    assert [wording.duration(s) for s in (5.4, 151, 600, 3 * 3600 + 300, 2 * 86400 + 4 * 3600)] == \
        ["5 s", "2 min 31 s", "10 min", "3 h 05 min", "2 d 4 h"]


def test_calibration_in_words_the_right_way_round():
    # GIVEN true STW = k × reading and true heading = reading + d
    # WHEN the log under-reads (k > 1) and the compass over-reads (d < 0)
    text = wording.calibration(1.052, -2.5)
    # THEN it says so, with the correction that fixes each: 1/1.052 = 0.9506, 4.9 % low
    assert text == "log reads 4.9 % low (correction ×1.052); compass reads 2.5° high (correction \u22122.5°)"
    assert wording.calibration(0.95, 3.0) == \
        "log reads 5.3 % high (correction ×0.950); compass reads 3.0° low (correction +3.0°)"
    assert wording.calibration(1.0, 0.0) == "log reads true; compass reads true"


def test_no_text_writes_positions_or_times_its_own_way():
    """One position format and no ISO times inside texts: a source check over the estimators and the
    alert machinery (payload fields keep ISO times and decimal degrees; texts go through wording)."""
    import re
    from pathlib import Path

    root = Path(__file__).resolve().parents[1]
    files = [*root.glob("estimators/*.py"), *root.glob("daemon/core/*.py"), root / "daemon/commands/summary.py"]
    own_position = re.compile(r":\.[3-6]f\}°")  # e.g. f"{lat:.4f}°N"
    iso_in_text = re.compile(r"f\"[^\"]*\{iso_utc\(")  # an ISO stamp inside an f-string
    offenders = [f"{p.name}:{i}" for p in files if p.name != "wording.py"
                 for i, line in enumerate(p.read_text(encoding="utf-8").splitlines(), 1)
                 if own_position.search(line) or iso_in_text.search(line)]
    assert offenders == []
