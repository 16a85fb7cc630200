"""A full disk while recording (issue 13 item 11): every gap marked, nothing hidden, and said.

The disk fills in two ways here: SQLite's own ``PRAGMA max_page_count`` (the
very error a full disk gives, SQLITE_FULL "database or disk is full", raised
and lifted at will inside one process), and a real file-size limit
(RLIMIT_FSIZE, POSIX setrlimit(2)) on a ``replay --record`` subprocess, under
which the kernel refuses every write past the limit with EFBIG.
"""

from __future__ import annotations

import os
import re
import resource
import sqlite3
import subprocess
import sys
from pathlib import Path
from types import SimpleNamespace

import pytest

from daemon.core.readings import Message, RawLine
from daemon.errors import OutputError
from daemon.outlets.recording.reading import Gap, iter_messages, iter_raw, read_meta, recording_gaps
from daemon.outlets.recording.recorder import Recorder
from daemon.outlets.recording.writer import RecordingWriter

REPO = Path(__file__).resolve().parents[1]
T0 = 1_780_000_000.0


def lines(first: int, n: int, noisy: bool = False) -> list[RawLine]:
    """Lines numbered from ``first``, one a second; ``noisy`` ones do not compress (they fill pages)."""
    pad = (lambda: "," + os.urandom(100).hex()) if noisy else (lambda: "")
    return [RawLine("gps", T0 + i, T0 + i, f"$GPXXX,{i}{pad()}") for i in range(first, first + n)]


def fill_disk(writer: RecordingWriter) -> None:
    pages = writer.conn.execute("PRAGMA page_count").fetchone()[0]
    writer.conn.execute(f"PRAGMA max_page_count = {pages}")


def free_disk(writer: RecordingWriter) -> None:
    writer.conn.execute("PRAGMA max_page_count = 1073741823")


def test_a_full_disk_mid_recording_leaves_a_marked_gap_and_a_hole_in_the_numbering(tmp_path):
    path = tmp_path / "passage.sqlite"
    writer = RecordingWriter(path)
    before, during, after = lines(0, 50), lines(50, 300, noisy=True) + lines(350, 200, noisy=True), lines(550, 20)
    # GIVEN 50 lines kept
    for line in before:
        writer.add_raw(line)
    writer.commit()
    # WHEN the disk is full for two commits (300 and then 200 lines), and then has room again
    fill_disk(writer)
    for batch in (during[:300], during[300:]):
        for line in batch:
            writer.add_raw(line)
        with pytest.raises(OutputError, match="disk is full"):
            writer.commit()
    free_disk(writer)
    for line in after:
        writer.add_raw(line)
    writer.commit()
    writer.close()
    # THEN what was kept reads back in order, and the two failed commits make one gap, marked with
    # the numbers, data times and reason of the 500 lost lines
    assert list(iter_raw(path)) == before + after
    assert recording_gaps(path) == [Gap("raw", 50, 500, T0 + 50, T0 + 549, "database or disk is full")]
    # AND the block numbering skips them, so the hole shows even to a reader that ignores the gap table
    with sqlite3.connect(path) as db:
        blocks = db.execute("SELECT seq_first, n_lines FROM raw_block ORDER BY seq_first").fetchall()
    assert blocks[-1][0] == 550 and sum(n for _, n in blocks) == 70


def test_a_hole_without_a_gap_row_is_still_found(tmp_path):
    path = tmp_path / "p.sqlite"
    writer = RecordingWriter(path)
    for line in lines(0, 10):
        writer.add_raw(line)
    writer.commit()
    fill_disk(writer)
    for line in lines(10, 300, noisy=True):
        writer.add_raw(line)
    with pytest.raises(OutputError):
        writer.commit()
    free_disk(writer)
    for line in lines(310, 5):
        writer.add_raw(line)
    writer.close()
    # GIVEN the gap row is gone (a file cut short, or edited)
    with sqlite3.connect(path) as db:
        db.execute("DELETE FROM gap")
    # THEN the hole in the numbering is reported all the same, with the data times around it
    (gap,) = recording_gaps(path)
    assert (gap.stream, gap.seq_first, gap.n_lost, gap.t_first, gap.t_last) == ("raw", 10, 300, T0 + 9, T0 + 310)
    assert "no gap row" in gap.reason


def test_lost_messages_are_a_gap_of_their_own_stream(tmp_path):
    path = tmp_path / "m.sqlite"
    writer = RecordingWriter(path)
    msg = lambda i: Message(T0 + i, "offwatch/position", {"n": i, "pad": os.urandom(80).hex()}, True)  # noqa: E731
    writer.add_message(msg(0))
    writer.commit()
    fill_disk(writer)
    for i in range(1, 301):
        writer.add_message(msg(i))
    with pytest.raises(OutputError):
        writer.commit()
    free_disk(writer)
    writer.add_message(msg(301))
    writer.close()
    assert [m.payload["n"] for m in iter_messages(path)] == [0, 301]
    assert [(g.stream, g.seq_first, g.n_lost) for g in recording_gaps(path)] == [("message", 1, 300)]


def test_a_full_queue_is_a_marked_gap_too(tmp_path):
    # GIVEN run's recorder (a full queue drops) with its writer held up inside a commit
    import threading
    hold, held = threading.Event(), threading.Event()

    def slow_commit(_stats):
        held.set()
        hold.wait(10)

    path = tmp_path / "q.sqlite"
    rec = Recorder(path, queue_size=100, commit_interval_s=0.05, on_commit=slow_commit)
    rec.raw(lines(0, 1)[0])
    assert held.wait(10)
    # WHEN 1000 lines are offered meanwhile
    for line in lines(1, 1000):
        rec.raw(line)
    hold.set()
    rec.close()
    # THEN the dropped ones are one gap in the file, "queue full", and every line is either kept or in it
    stats = rec.stats
    (gap,) = recording_gaps(path)
    assert gap.reason == "queue full" and gap.n_lost == stats.dropped == stats.lost_raw > 0
    assert len(list(iter_raw(path))) + gap.n_lost == 1001


def test_a_version_1_recording_is_read_and_upgraded_when_appended_to(tmp_path):
    # GIVEN a recording as version 1 wrote it (no gap table)
    path = tmp_path / "old.sqlite"
    writer = RecordingWriter(path)
    for line in lines(0, 5):
        writer.add_raw(line)
    writer.close()
    with sqlite3.connect(path) as db:
        db.execute("DROP TABLE gap")
        db.execute("UPDATE meta SET value = '1' WHERE key = 'schema_version'")
    # THEN it reads as before, with no gaps
    assert list(iter_raw(path)) == lines(0, 5) and recording_gaps(path) == []
    # AND appending to it adds the gap table and says version 2
    writer = RecordingWriter(path)
    writer.add_raw(lines(5, 1)[0])
    writer.close()
    assert read_meta(path)["schema_version"] == 2
    assert list(iter_raw(path)) == lines(0, 6)


def _limit_file_size(limit_bytes: int):
    def apply() -> None:
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit_bytes, resource.RLIM_INFINITY))
    return apply


def test_replay_record_on_a_full_disk_exits_non_zero_and_says_what_was_not_kept(tmp_path):
    # GIVEN half an hour of passage and a file-size limit well below what its recording needs
    from tools.simulator import (Ocean, PressureField, Scenario, SeaTemperatureField, SensorSpec, Steer,
                                  SteadyCurrent, WindField, simulate)
    from tools.simulator.nmea_writer import WriterOptions, write_nmea
    from tools.simulator.scenarios import MIN, utc
    t0 = utc(2026, 6, 2, 8)
    ocean = Ocean(currents=(SteadyCurrent(30.0, 1.0),), sea_temp=SeaTemperatureField(15.0, 43.0, -30.0),
                  pressure=PressureField(((t0, 1015.0),)), wind=WindField(((t0, 220.0, 12.0),)))
    scenario = Scenario(name="full_disk", start_utc=t0, duration_s=30 * MIN, start_lat=43.0, start_lon=-30.0,
                        helm=(Steer(90.0, 6.0, 30 * MIN),), ocean=ocean, sensors=SensorSpec(heading_hz=1.0))
    nmea = tmp_path / "half_hour.nmea"
    write_nmea(simulate(scenario, 3), nmea, WriterOptions())
    record = tmp_path / "rec" / "half_hour.sqlite"
    record.parent.mkdir()
    # WHEN it is replayed with --record under RLIMIT_FSIZE (Python ignores SIGXFSZ: writes fail with EFBIG),
    # paced (half an hour in 6 s) so the recorder commits many times, the first ones before the disk is full
    done = subprocess.run([sys.executable, "-m", "daemon", "replay", str(nmea), "--record", str(record), "--quiet",
                           "--speed", "300"],
                          cwd=REPO, capture_output=True, text=True, timeout=300,
                          preexec_fn=_limit_file_size(160 * 1024))
    # THEN it still ends, with exit status 3 and one line saying how much was not kept, and when
    assert done.returncode == 3, (done.returncode, done.stderr[-2000:])
    said = [ln for ln in done.stderr.splitlines() if ln.startswith("offwatch: recording")]
    # (when: as every text says it, the date and the span of data time in UTC, never an ISO stamp)
    assert said and "not kept" in said[0] and re.search(r"data time 2 Jun 2026 0\d:\d\d–0\d:\d\d UTC", said[0]), \
        done.stderr[-2000:]
    # AND what is in the file reads back, and everything it lacks is accounted as lost
    kept = len(list(iter_raw(record)))
    total = sum(1 for _ in nmea.open())
    lost = int(said[0].split(".sqlite: ")[1].split(" lines")[0])
    assert 0 < kept < total and kept + lost == total


def test_run_raises_recording_fault_while_lines_are_lost_and_clears_it_after():
    from daemon.commands.service import RecordingWatch, recording_health

    def stats(**kw):
        base = dict(lost_raw=0, lost_messages=0, failing=False, loss_t_first=None, loss_t_last=None,
                    last_error="", gaps=0, gaps_unwritten=0, path="r.sqlite", write_errors=0, dropped=0)
        return SimpleNamespace(**{**base, **kw})

    watch = RecordingWatch(hold_s=60.0)
    # GIVEN a healthy recorder: nothing to say
    assert watch.judge(stats(), T0, 0.0) is None
    # WHEN commits fail (a full disk)
    failing = stats(lost_raw=120, failing=True, loss_t_first=T0, loss_t_last=T0 + 1, gaps=1, gaps_unwritten=1,
                    last_error="recording r.sqlite: commit failed: database or disk is full")
    cond = watch.judge(failing, T0 + 2, 1.0)
    # THEN a caution says what was lost, since when and why, and what to check
    assert (cond.alert_id, cond.priority, cond.active) == ("recording_fault", "caution", True)
    assert "120 lines and messages not kept since" in cond.text and "disk is full" in cond.text
    assert recording_health(failing)["ok"] is False and recording_health(failing)["lost_lines"] == 120
    # AND once commits work again it holds 60 s more (of the monotonic clock), then clears once
    recovered = stats(lost_raw=120, loss_t_first=T0, loss_t_last=T0 + 1, gaps=1)
    assert watch.judge(recovered, T0 + 30, 30.0).active
    assert watch.judge(recovered, T0 + 62, 62.0).active is False
    assert watch.judge(recovered, T0 + 63, 63.0) is None
