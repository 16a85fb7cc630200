"""End to end through ``offwatch replay``: determinism, the recording round trip, the JSONL of the
interface, and every shared real capture.

The outside references are named beside each check: the interface document
(``interface.md``: the JSONL line, topics, payload fields, units, enumerations),
ISO 8601 (time stamps with ``Z``), the NMEA 0183 v4.10 TAG block (``c:`` as
UNIX time; offwatch writes milliseconds), the shared captures' SOURCES.md, and
the trade's convention that a current's set is the direction it flows toward.
"""

from __future__ import annotations

import dataclasses
import json
import logging
import re
import subprocess
import sys
from pathlib import Path

import pytest

from daemon.core.config import load_config
from daemon.outlets.jsonl import encode_line
from daemon.outlets.recording.tag_nmea import export_tag_nmea, parse_tag_line
from daemon.commands.replay import run_replay
from tools.simulator import scenarios, simulate
from tools.simulator.nmea_writer import WriterOptions, write_nmea
from tests.helpers import Keep as Collect, interface_problems
from tests.shared import REPO, SHARED, shared_path

UNDER_WAY = ("real-captures", "under-way-94min-hdg-hdt-rmc.nmea")
BERTH = ("real-captures", "berth-13min-mda-pressure.nmea")
DEAD_LOG = ("real-captures", "robustness", "nmea-reader", "two-gps-dead-log-garbage-truncated.nmea")

# --------------------------------------------------------------------------- helpers


def cli(*args: str, timeout: float = 120.0) -> subprocess.CompletedProcess:
    """``python -m daemon ARGS`` from the repository root, as a user would type ``offwatch ARGS``."""
    return subprocess.run([sys.executable, "-m", "daemon", *args], cwd=REPO, capture_output=True, text=True,
                          timeout=timeout)


def cli_parallel(*argvs: tuple[str, ...], timeout: float = 180.0) -> list[int]:
    """Several CLI runs at once (two cores): their exit statuses, in order."""
    procs = [subprocess.Popen([sys.executable, "-m", "daemon", *a], cwd=REPO, stdout=subprocess.DEVNULL,
                              stderr=subprocess.PIPE, text=True) for a in argvs]
    return [p.wait(timeout=timeout) for p in procs]


def read_jsonl(path: Path) -> list[dict]:
    return [json.loads(line) for line in path.read_text(encoding="utf-8").splitlines()]


def topic_payloads(messages: list[dict], name: str) -> list[dict]:
    return [m["payload"] for m in messages if m["topic"] == f"offwatch/{name}"]


# --------------------------------------------------------------------------- a short simulated passage


def short_passage_scenario():
    """Twenty minutes of the simulator's gnss_outage boat with a 2-minute dropout 8 min in (invented);
    the compass at 2 Hz, as in the demo passage, to keep the file short."""
    sc = scenarios.gnss_outage()
    t0 = sc.start_utc
    sensors = dataclasses.replace(sc.sensors, gnss_outages=((t0 + 480.0, t0 + 600.0),), heading_hz=2.0)
    return dataclasses.replace(sc, name="short_passage", duration_s=20 * 60.0, sensors=sensors)


@pytest.fixture(scope="module")
def sim_file(tmp_path_factory) -> Path:
    """The short passage as TAG-block NMEA, with one bad checksum, one truncated line and line noise."""
    sc = short_passage_scenario()
    t0 = sc.start_utc
    opt = WriterOptions(malformed=((t0 + 300.0, "bad_checksum"), (t0 + 700.0, "truncated"),
                                   (t0 + 900.0, "garbage")))
    path = tmp_path_factory.mktemp("sim") / "passage.nmea"
    write_nmea(simulate(sc, seed=11), path, opt)
    return path


# --------------------------------------------------------------------------- 1. determinism


@pytest.fixture(scope="module")
def under_way_twice(tmp_path_factory) -> tuple[Path, Path]:
    """The 94-min real capture replayed twice by the CLI, both at once."""
    src = shared_path(*UNDER_WAY)
    d = tmp_path_factory.mktemp("underway")
    a, b = d / "a.jsonl", d / "b.jsonl"
    codes = cli_parallel(("replay", str(src), "--jsonl", str(a), "--quiet"),
                         ("replay", str(src), "--jsonl", str(b), "--quiet"))
    assert codes == [0, 0]
    return a, b


def test_real_capture_replays_byte_identical_twice(under_way_twice):
    # GIVEN the real 94-min under-way capture (SOURCES.md), replayed twice through the CLI
    a, b = under_way_twice
    # THEN both JSONL files are the same, byte for byte (interface.md: replay is deterministic)
    assert a.stat().st_size > 1_000_000
    assert a.read_bytes() == b.read_bytes()


def test_real_capture_jsonl_keeps_the_interface_and_counts_every_sentence(under_way_twice):
    a, _ = under_way_twice
    lines = a.read_text(encoding="utf-8").splitlines()
    assert interface_problems(lines) == []
    msgs = [json.loads(x) for x in lines]
    # SOURCES.md: 42 719 sentences, no bad checksums; RMC 5023 (all with a fix while logging)
    totals = topic_payloads(msgs, "status")[-1]["inputs"]["under-way-94min-hdg-hdt-rmc"]["totals"]
    line_kinds = ("good", "bad_checksum", "no_checksum", "unparseable", "unknown", "proprietary", "ais",
                  "not_sentence")
    assert sum(totals[k] for k in line_kinds) == 42719
    assert totals["bad_checksum"] == 0
    positions = topic_payloads(msgs, "position")
    # SOURCES.md: about 37.8 N 122.3 W; 19:34:30-21:08:50 UTC on 2019-12-29
    assert all(abs(p["lat"] - 37.8) < 0.3 and abs(p["lon"] + 122.3) < 0.3 for p in positions)
    assert positions[0]["time"].startswith("2019-12-29T19:34") and positions[-1]["time"].startswith("2019-12-29T21:0")
    # no log through the water in this capture (SOURCES.md): the current can never be estimated
    assert {p["quality"] for p in topic_payloads(msgs, "current")} == {"unavailable"}


@pytest.fixture(scope="module")
def sim_runs(sim_file, tmp_path_factory) -> dict[str, Path]:
    """The short passage through the CLI: twice at once (once with --record), then the recording and its
    TAG-block export (under the same file name: the source name is the file's stem), both at once."""
    d = tmp_path_factory.mktemp("simruns")
    out = {k: d / f"{k}.jsonl" for k in ("plain", "recorded", "from_db", "from_export")}
    out["db"], out["exported"] = d / "passage.sqlite", d / "export" / sim_file.name
    assert cli_parallel(("replay", str(sim_file), "--jsonl", str(out["plain"]), "--quiet"),
                        ("replay", str(sim_file), "--record", str(out["db"]), "--jsonl", str(out["recorded"]),
                         "--quiet")) == [0, 0]
    out["exported"].parent.mkdir()
    out["n_exported"] = export_tag_nmea(out["db"], out["exported"])
    assert cli_parallel(("replay", str(out["db"]), "--jsonl", str(out["from_db"]), "--quiet"),
                        ("replay", str(out["exported"]), "--jsonl", str(out["from_export"]), "--quiet")) == [0, 0]
    return out


def test_simulated_tag_file_replays_byte_identical_twice(sim_runs):
    # GIVEN a simulated TAG-block passage replayed twice by the CLI (once also recording)
    a, b = sim_runs["plain"], sim_runs["recorded"]
    # THEN the JSONL is the same byte for byte (interface.md), and keeps the interface's format
    assert a.stat().st_size > 100_000
    assert a.read_bytes() == b.read_bytes()
    assert interface_problems(a.read_text(encoding="utf-8").splitlines()) == []


def test_recording_replays_to_the_same_jsonl_and_exports_back_to_the_file(sim_file, sim_runs):
    # GIVEN the passage replayed with --record DB --jsonl A
    a = sim_runs["recorded"]
    # WHEN the recording is replayed (B), and exported as TAG-block NMEA and replayed (C)
    b, c = sim_runs["from_db"], sim_runs["from_export"]
    # THEN B is A byte for byte (interface.md, --record), and so is C
    assert a.read_bytes() == b.read_bytes()
    assert a.read_bytes() == c.read_bytes()
    # AND the export is the original file line for line: a line with a TAG block as it was; the one line
    # whose TAG block the line noise ate gets one (NMEA 0183 v4.10 TAG block, c: in ms, s: the source)
    original = sim_file.read_bytes().decode("utf-8").split("\r\n")[:-1]
    back = sim_runs["exported"].read_bytes().decode("utf-8").split("\r\n")[:-1]
    assert len(back) == len(original) == sim_runs["n_exported"]
    differ = [(o, x) for o, x in zip(original, back) if o != x]
    assert len(differ) == 1
    o, x = differ[0]
    assert not o.startswith("\\") and x.endswith(o)
    tag = parse_tag_line(x)
    assert tag.source == "passage" and tag.text == o
    # AND the spoiled lines were counted the same way all three times
    for path in (a, b, c):
        totals = topic_payloads(read_jsonl(path), "status")[-1]["inputs"]["passage"]["totals"]
        assert (totals["bad_checksum"], totals["no_checksum"], totals["not_sentence"]) == (1, 1, 1)


def _differences(x, y, path=""):
    if isinstance(x, dict) and isinstance(y, dict):
        out = []
        for k in sorted(set(x) | set(y)):
            out += _differences(x.get(k), y.get(k), f"{path}/{k}")
        return out
    return [] if x == y else [(path, x, y)]


def test_plain_capture_round_trip_differs_only_by_the_millisecond_of_tag_times(tmp_path):
    # GIVEN a plain NMEA capture (no TAG blocks: times spread between fixes, finer than 1 ms)
    src = shared_path(*BERTH)
    cfg = load_config(None)
    db, a, b, c = tmp_path / "berth.sqlite", tmp_path / "a.jsonl", tmp_path / "b.jsonl", tmp_path / "c.jsonl"
    run_replay([str(src)], cfg, jsonl=str(a), record=str(db), progress=False)
    run_replay([str(db)], cfg, jsonl=str(b), progress=False)
    exported = tmp_path / "export" / src.name
    exported.parent.mkdir()
    export_tag_nmea(db, exported)
    run_replay([str(exported)], cfg, jsonl=str(c), progress=False)
    # THEN the recording replays byte for byte (interface.md)
    assert a.read_bytes() == b.read_bytes()
    # AND the TAG-block export carries each line's time to the millisecond (c: in ms, as offwatch writes
    # it; NMEA 0183 v4.10 TAG blocks have no finer unit): what differs is the status's last_seen times,
    # by at most half a millisecond; every other field and every other message is the same
    A, C = read_jsonl(a), read_jsonl(c)
    assert [m["topic"] for m in A] == [m["topic"] for m in C]
    diffs = [d for x, y in zip(A, C) for d in _differences(x, y)]
    assert {path.rsplit("/", 1)[-1] for path, _, _ in diffs} <= {"last_seen"}
    assert all(abs(x - y) <= 0.0005 + 1e-9 for _, x, y in diffs)


# --------------------------------------------------------------------------- 5. every real capture


def _capture_files() -> list[str]:
    root = SHARED / "real-captures"
    if not root.is_dir():
        return ["(absent)"]
    return sorted(str(p.relative_to(root)) for p in root.rglob("*")
                  if p.is_file() and p.suffix in (".nmea", ".log", ".gz") and "LICENSES" not in p.parts
                  and p.name != UNDER_WAY[1])  # the long one goes through the CLI above


LINE_OUTCOMES = ("good", "bad_checksum", "no_checksum", "unparseable", "unknown", "proprietary", "ais",
                 "not_sentence")  # one per line (daemon/intake/counters.py); implausible/empty/no_variation sit beside good


def _is_text(data: bytes) -> bool:
    """Printable ASCII, tabs and line endings only (no binary receiver protocol mixed in)."""
    return all(32 <= b < 127 or b in (9, 10, 13) for b in data)


@pytest.mark.parametrize("name", _capture_files())
def test_every_real_capture_replays_with_counters_and_interface_lines(name):
    path = shared_path("real-captures", *name.split("/"))
    logging.getLogger("daemon").setLevel(logging.WARNING)
    sink = Collect()
    # WHEN the capture is replayed in-process (the very pipeline the CLI runs)
    summary = run_replay([str(path)], load_config(None), progress=False, extra_sinks=[sink])
    # THEN the counters are there, for the file's one source, and the last status publishes them
    snap = summary.counters.snapshot()
    assert list(snap) == [path.name[:-3].rsplit(".", 1)[0] if path.name.endswith(".gz") else path.stem]
    (source, counts), = snap.items()
    assert summary.raw_lines > 0
    # every line the framer passed has exactly one outcome (daemon/intake/counters.py)
    assert sum(counts["totals"][k] for k in LINE_OUTCOMES) == summary.raw_lines
    if _is_text(path.read_bytes()):
        # an independent count: the file's non-empty lines (CR LF, LF or CR endings), each either read or
        # dropped whole by the framer (a tab is no NMEA 0183 character: printable ASCII only)
        physical = [x for x in re.split(rb"\r\n|\r|\n", path.read_bytes()) if x.strip()]
        dropped = counts["framer"]["bad_bytes"] + counts["framer"]["overlong"]
        assert summary.raw_lines + dropped == len(physical)
        assert counts["framer"]["bad_bytes"] == sum(b"\t" in x for x in physical)
    status = [m for m in sink.messages if m.topic == "offwatch/status"]
    assert status and status[-1].payload["inputs"][source]["totals"] == counts["totals"]
    # AND every message is an interface.md JSONL line, in data-time order
    assert interface_problems([encode_line(m) for m in sink.messages]) == []


def test_dead_log_capture_never_reports_a_drift_of_a_knot_and_raises_log_suspect():
    # GIVEN the capture whose log reads 0.00 kn through the water while SOG is 5 kn (SOURCES.md)
    sink = Collect()
    run_replay([str(shared_path(*DEAD_LOG))], load_config(None), progress=False, extra_sinks=[sink])
    msgs = [json.loads(encode_line(m)) for m in sink.messages]
    drifts = [p["drift_kn"] for p in topic_payloads(msgs, "current") if p["drift_kn"] is not None]
    # THEN no current of 1 kn or more is ever published (a dead log would fake a 5 kn one)
    assert all(d < 1.0 for d in drifts), max(drifts)
    # AND log_suspect is raised, saying what was seen
    suspect = topic_payloads(msgs, "alerts/log_suspect")
    assert suspect and suspect[0]["state"] == "active"
    assert "log" in suspect[0]["text"].lower()
    # the first piece is under way 19:01:05-19:01:51 (SOURCES.md): raised within it
    assert "2020-05-10T19:01:05" <= suspect[0]["since"] <= "2020-05-10T19:01:52"


@pytest.mark.parametrize("name", ["robustness/marine-api/instrument-cycles-at-berth.nmea",
                                  "robustness/marine-api/handheld-route-cr-endings.nmea",
                                  "robustness/gpsd/quectel-l76k-binary.log"])
def test_a_few_captures_through_the_command_line(name, tmp_path):
    path = shared_path("real-captures", *name.split("/"))
    out = tmp_path / "out.jsonl"
    r = cli("replay", str(path), "--jsonl", str(out))
    assert r.returncode == 0, r.stderr
    # the summary says what was read (a person's account of the replay)
    assert "lines read" in r.stdout and "Input counters:" in r.stdout
    assert "Traceback" not in r.stderr
    lines = out.read_text(encoding="utf-8").splitlines()
    assert lines and interface_problems(lines) == []


def test_a_logger_gap_raises_no_gnss_alert_when_the_fixes_resume():
    # GIVEN the capture's two pieces, 19:01:05-19:01:51 and 21:23:40-21:23:44 (SOURCES.md), both with fixes
    sink = Collect()
    run_replay([str(shared_path(*DEAD_LOG))], load_config(None), progress=False, extra_sinks=[sink])
    msgs = [json.loads(encode_line(m)) for m in sink.messages]
    second_piece = "2020-05-10T21:23:40"
    # THEN the second piece starts from a fix: no dead reckoning, no "GNSS lost" while fixes arrive
    first = [p for p in topic_payloads(msgs, "position") if p["time"] >= second_piece][0]
    assert first["source"] == "gnss"
    assert not [p for p in topic_payloads(msgs, "alerts/gnss_lost") if p["time"] >= second_piece]
