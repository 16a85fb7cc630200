"""Replay inputs: format told by magic bytes, gzip equals plain, files merged in time order, errors."""

from __future__ import annotations

import gzip
import io
import shutil

import pytest

from daemon.errors import InputError
from daemon.core.readings import RawLine
from daemon.intake.replayfiles import ProgressBar, detect_format, item_time, iter_replay, source_names
from tests.helpers import nmea_checksum


def tagged(t_s: float, body: str) -> str:
    """A TAG-block line (NMEA 0183 v4.10 TAG block: \\c:<unix s>*hh\\) in front of a sentence."""
    tag = f"c:{int(t_s)}"
    return f"\\{tag}*{nmea_checksum(tag)}\\${body}*{nmea_checksum(body)}\r\n"


class LineIngest:
    """A stand-in for daemon.intake.ingest.Ingest that frames lines and reads the TAG c: time.

    It lets these tests check what replayfiles does (chunks, merging, names) apart from parsing.
    """

    def __init__(self, source: str) -> None:
        self.source = source
        self.buf = b""
        self.timed: list[tuple[str, float, float]] = []

    def _line(self, text: str) -> RawLine:
        t_s = float(text.split("c:")[1].split("*")[0])
        return RawLine(self.source, t_s, t_s, text)

    def feed(self, data: bytes, recv_utc):
        self.buf += data
        *lines, self.buf = self.buf.split(b"\n")
        return [self._line(ln.decode().rstrip("\r")) for ln in lines if ln.strip()]

    def feed_timed_line(self, text: str, t_s: float, recv_utc: float):
        self.timed.append((text, t_s, recv_utc))
        return [RawLine(self.source, t_s, recv_utc, text)]

    def flush(self):
        rest, self.buf = self.buf, b""
        return [self._line(rest.decode())] if rest.strip() else []


def passage(t0: float, n: int, step: float, talker: str) -> str:
    return "".join(tagged(t0 + i * step, f"{talker}MTW,{15 + i * 0.01:.2f},C") for i in range(n))


def items_of(paths, **kw):
    made: dict[str, LineIngest] = {}

    def make(source: str) -> LineIngest:
        made[source] = LineIngest(source)
        return made[source]

    return list(iter_replay(paths, make, **kw)), made


def test_gzip_and_plain_give_the_same_items_whatever_the_name(tmp_path):
    text = passage(1_777_870_000, 20_000, 1.0, "II")  # ~900 KB: many 64 KiB chunks
    plain = tmp_path / "leg.nmea"
    plain.write_text(text)
    packed = tmp_path / "leg-packed.nmea"  # gzip without a .gz name: told by the magic bytes
    packed.write_bytes(gzip.compress(text.encode()))
    assert detect_format(plain) == "nmea" and detect_format(packed) == "gzip"
    a, _ = items_of([plain])
    b, _ = items_of([packed])
    assert len(a) == 20_000
    assert [(i.t_s, i.text) for i in a] == [(i.t_s, i.text) for i in b]
    assert {i.source for i in a} == {"leg"}


def test_a_last_line_without_ending_is_flushed(tmp_path):
    path = tmp_path / "cut.nmea.gz"
    path.write_bytes(gzip.compress((passage(100, 3, 1.0, "II").rstrip("\r\n")).encode()))
    items, made = items_of([path])
    assert [i.t_s for i in items] == [100.0, 101.0, 102.0]
    assert list(made) == ["cut"]  # ".gz" and the last suffix removed


def test_two_files_are_merged_in_time_order_with_progress(tmp_path):
    gps = tmp_path / "gps.nmea"
    gps.write_text(passage(1000, 300, 1.0, "GP"))          # 1000, 1001, ...
    log = tmp_path / "log.nmea.gz"
    log.write_bytes(gzip.compress(passage(1000.5, 150, 2.0, "VW").encode()))  # 1000.5 -> 1000 (int c:)
    calls: list[tuple[int, int]] = []
    items, _ = items_of([gps, log], progress=lambda d, t: calls.append((d, t)))
    times = [item_time(i) for i in items]
    assert len(items) == 450
    assert times == sorted(times)
    assert {i.source for i in items} == {"gps", "log"}
    total = gps.stat().st_size + log.stat().st_size
    assert calls[-1] == (total, total)
    assert all(t == total for _, t in calls)
    assert [d for d, _ in calls] == sorted(d for d, _ in calls)


def test_missing_or_unreadable_file_is_one_clear_input_error(tmp_path):
    good = tmp_path / "good.nmea"
    good.write_text(passage(0, 2, 1.0, "II"))
    with pytest.raises(InputError, match=r"nowhere\.nmea not found"):
        iter_replay([good, tmp_path / "nowhere.nmea"], LineIngest)  # before any item
    with pytest.raises(InputError, match="is a directory"):
        iter_replay([tmp_path], LineIngest)
    broken = tmp_path / "broken.gz"
    broken.write_bytes(b"\x1f\x8b" + b"\x00" * 40)
    with pytest.raises(InputError, match="broken.gz"):
        list(iter_replay([broken], LineIngest))


def test_a_recording_replays_each_stored_source_with_its_stored_times(tmp_path):
    from daemon.outlets.recording.writer import RecordingWriter

    db = tmp_path / "passage-copy"  # no suffix: told by the SQLite header
    writer = RecordingWriter(db, now_utc=1000.0)
    stored = [RawLine("gps", 1000.0 + i, 1000.2 + i, f"$GPZDA,{i}*00") for i in range(5)]
    stored += [RawLine("compass", 1000.5 + i, 1000.6 + i, f"$HCHDG,{i}*00") for i in range(5)]
    stored.sort(key=lambda r: r.t_s)
    for line in stored:
        writer.add_raw(line)
    writer.commit(final=True)
    writer.close()
    assert detect_format(db) == "sqlite"
    calls: list[tuple[int, int]] = []
    items, made = items_of([db], progress=lambda d, t: calls.append((d, t)))
    size = db.stat().st_size
    assert calls[-1] == (size, size) and len(calls) > 2  # progress along the way, whole at the end
    assert sorted(made) == ["compass", "gps"]  # one Ingest per stored source
    assert [(i.source, i.t_s, i.text) for i in items] == [(r.source, r.t_s, r.text) for r in stored]
    assert made["gps"].timed[0][2] == pytest.approx(1000.2, abs=1e-3)  # receive time kept


def test_source_names_are_unique_stems():
    assert source_names(["a/leg.nmea", "b/leg.nmea.gz", "c/leg.txt", "d/mast"]) == ["leg", "leg-2", "leg-3", "mast"]


class FakeTty(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_progress_bar_draws_on_a_tty_only():
    clock = iter([0.0, 10.0, 10.0])
    out = FakeTty()
    bar = ProgressBar(out, clock=lambda: next(clock))
    bar.count(50_000)
    bar.update(250, 1000)  # a quarter in 10 s: 30 s left
    assert "25.0 %" in out.getvalue() and "5000 sentences/s" in out.getvalue() and "0:30 left" in out.getvalue()
    bar.close()
    assert out.getvalue().endswith("\n")
    quiet = io.StringIO()
    bar = ProgressBar(quiet)
    bar.count(10)
    bar.update(1, 2)
    bar.close()
    assert quiet.getvalue() == ""


def test_iter_replay_counts_sentences_for_a_progress_bar(tmp_path):
    path = tmp_path / "leg.nmea"
    path.write_text(passage(0, 100, 1.0, "II"))
    bar = ProgressBar(io.StringIO())
    list(iter_replay([path], LineIngest, progress=bar.update))
    assert bar.sentences == 100 and bar.done == bar.total == path.stat().st_size


def real_ingest_factory():
    from daemon.intake.counters import Counters
    from daemon.intake.ingest import Ingest
    from daemon.intake.magvar import VariationProvider

    counters, variation = Counters(), VariationProvider("sentence")
    return lambda source: Ingest(source, counters=counters, variation=variation, live=False)


def test_a_real_capture_gzipped_replays_exactly_as_plain(tmp_path):
    from tests.shared import shared_path

    # Source: a real GNSS/sounder recording (see the captures' SOURCES.md), copied, never edited.
    capture = shared_path("real-captures", "sounder-survey-43min-dpt-mtw.nmea")
    plain = tmp_path / capture.name
    shutil.copyfile(capture, plain)
    packed = tmp_path / "survey.gz"
    packed.write_bytes(gzip.compress(capture.read_bytes()))
    a = list(iter_replay([plain], real_ingest_factory()))
    b = list(iter_replay([packed], real_ingest_factory()))
    assert len(a) > 10_000  # raw lines and readings
    key = lambda i: (type(i).__name__, item_time(i), getattr(i, "text", None), getattr(i, "sample", None))
    assert [key(i) for i in a] == [key(i) for i in b]
    times = [item_time(i) for i in a]
    assert times == sorted(times)
