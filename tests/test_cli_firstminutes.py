"""A newcomer's first minutes with the command line: replay of things that are not passages, an
unknown option, the summary a person reads, the log's time stamps."""

from __future__ import annotations

import os
import re
import subprocess
import sys

from daemon.commands.summary import SummarySink
from daemon.core.readings import Message
from tests.shared import REPO


def cli(*args: str, env: dict | None = None) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "daemon", *args], cwd=REPO, capture_output=True, text=True,
                          timeout=120, env={**os.environ, "COLUMNS": "80", **(env or {})})


def one_error(r: subprocess.CompletedProcess) -> str:
    lines = [x for x in r.stderr.splitlines() if x.strip()]
    assert r.returncode != 0 and len(lines) == 1, r.stderr
    return lines[0]


def test_replay_of_what_is_not_a_passage_is_an_error_that_says_what_it_is(tmp_path):
    empty = tmp_path / "empty.nmea"
    empty.write_bytes(b"")
    text = tmp_path / "notes.txt"
    text.write_text("fair winds\nno sentences here\n")
    binary = tmp_path / "program"
    binary.write_bytes(bytes(range(256)) * 64 + b"$GPRMC" + bytes(64))  # a program's bytes, one stray '$'
    assert "is empty" in one_error(cli("replay", str(empty)))
    assert "is a directory" in one_error(cli("replay", str(tmp_path)))
    assert "not found" in one_error(cli("replay", str(tmp_path / "nothing.nmea")))
    assert "binary data, not NMEA 0183 text" in one_error(cli("replay", str(binary)))
    assert "not one NMEA 0183 sentence" in one_error(cli("replay", str(text)))
    assert "binary data" in one_error(cli("replay", sys.executable))


def test_an_unknown_option_is_one_line():
    line = one_error(cli("replay", "--bogus", "x.nmea"))
    assert "unrecognized arguments: --bogus" in line and "--help" in line
    assert "unrecognized" in one_error(cli("--frob"))


def test_log_lines_carry_a_utc_time_except_under_journald():
    code = ("import logging; from daemon.commands.cli import setup_logging; "
            "setup_logging(logging.INFO); logging.getLogger('offwatch.x').info('hello')")

    def logged(env: dict) -> str:
        return subprocess.run([sys.executable, "-c", code], cwd=REPO, capture_output=True, text=True, timeout=60,
                              env=env).stderr.strip()
    plain = {k: v for k, v in os.environ.items() if k != "JOURNAL_STREAM"}
    # a terminal or a file: the line has its own time, UTC (ISO 8601 with Z)
    assert re.fullmatch(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ INFO offwatch.x: hello", logged(plain))
    # under journald (systemd sets JOURNAL_STREAM) the journal stamps it
    assert logged({**plain, "JOURNAL_STREAM": "8:1234"}) == "INFO offwatch.x: hello"


def test_the_summary_never_prints_none_nor_a_negative_zero_nor_iso_times():
    sink = SummarySink()
    t = 1_777_867_200.0  # 2026-05-04 04:00 UTC
    sink.raw_lines = 10
    sink.message(Message(t, "offwatch/position", {"time": "x", "lat": 40.93667, "lon": -32.34667, "source": "gnss",
                                                  "sigma_m": 4.5, "hdop": None}, kind="state", retain=True))
    sink.message(Message(t + 60, "offwatch/sea_temperature", {"time": "x", "temp_c": 15.3,
                                                              "gradient_c_per_nm": -0.001}, kind="state", retain=True))
    sink.message(Message(t + 90, "offwatch/current", {"time": "x", "set_deg": None, "drift_kn": None,
                                                      "quality": "converging", "stw_scale": 1.052,
                                                      "heading_offset_deg": -2.5}, kind="state", retain=True))
    sink.message(Message(t + 95, "offwatch/events", {"kind": "front_crossing", "lat": 40.9373, "lon": -32.3472,
                                                     "delta_c": 3.3, "gradient_c_per_nm": 5.6}, kind="event", retain=False))
    sink.message(Message(t + 99, "offwatch/alerts/x", {"id": {"evil": 1}, "priority": "warning",
                                                       "state": "\x1b[2Jactive"}, kind="alert", retain=True))
    text = "\n".join(sink.lines())
    assert "None" not in text and "-0.00" not in text and "2026-05-04T" not in text
    assert "\x1b" not in text  # received data never reaches a terminal raw
    assert "Passage 4 May 2026 04:00–04:01 UTC" in text
    assert "Last position: 40°56.2′N 032°20.8′W, source=gnss" in text
    assert "04:01 front crossing at 40°56.2′N 032°20.8′W: +3.3 °C, steepest 5.6 °C/nm" in text
    # the calibration in words the right way round: true STW = 1.052 x log, true heading = compass - 2.5
    assert "Calibration: log reads 4.9 % low (correction ×1.052); compass reads 2.5° high (correction −2.5°)." \
        in text
    assert "Alert   04:01 warning  ?" in text
