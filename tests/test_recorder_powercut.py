"""A writer killed at random moments never corrupts the recording and never loses a committed line.

The writer runs in a subprocess and is killed with SIGKILL 25 times, at
seeded random moments (some during start-up and schema creation, most while
lines stream in, commits run every 20 ms and small blocks merge every 2 s of
data). Each run appends to the same file. After each kill the file must pass
``PRAGMA integrity_check``, hold every line the killed writer reported as
committed, hold them gap-free and in order, and keep alert rows and alert
messages in step (they share transactions).

SIGKILL loses no page the kernel already has, so this proves the
transaction and WAL handling of the writer; surviving a real power cut
further rests on ``synchronous=FULL`` (checked in test_recorder.py).
"""

from __future__ import annotations

import os
import random
import signal
import sqlite3
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest

from daemon.outlets.recording.reading import iter_messages, iter_raw

REPO = Path(__file__).resolve().parents[1]

WRITER = r"""
import sys, time
from daemon.core.readings import Message, RawLine
from daemon.outlets.recording.recorder import Recorder

path, start = sys.argv[1], int(sys.argv[2])

def report(stats):
    print(f"{stats.raw_lines} {stats.dropped}", flush=True)  # one write: unbuffered, print writes each piece

rec = Recorder(path, commit_interval_s=0.02, block_span_s=2.0, queue_size=200000, on_commit=report)
print("open", flush=True)
i = start
while True:
    t = 1777000000 + i * 0.04
    rec.raw(RawLine("gnss" if i % 2 else "log", t, t, f"$GPTXT,{i:08d}"))
    if i % 10 == 0:
        rec.message(Message(t, "offwatch/alerts/front", {"id": "front", "priority": "caution",
                    "state": "active", "text": f"line {i}", "since": "x"}, True, 1, "alert"))
    i += 1
    if i % 40 == 0:
        time.sleep(0.001)
"""

KILLS = 25


def run_and_kill(path: Path, start: int, rng: random.Random, early: bool) -> list[str]:
    """Start a writer appending from line ``start``, SIGKILL it at a random moment; its printed lines."""
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    child = subprocess.Popen([sys.executable, "-c", WRITER, str(path), str(start)], cwd=REPO, env=env,
                             stdout=subprocess.PIPE, text=True)
    printed: list[str] = []
    opened = threading.Event()

    def read() -> None:
        for line in child.stdout:
            if not line.endswith("\n"):
                break  # the kill cut the child's last write short: not a report
            printed.append(line.strip())
            if line.startswith("open"):
                opened.set()

    reader = threading.Thread(target=read, daemon=True)
    reader.start()
    if early:
        time.sleep(rng.uniform(0.0, 0.12))  # start-up, schema creation or the first commits
    else:
        assert opened.wait(20), "the writer did not start"
        # under way: a few hundred lines committed (however loaded the machine), then a random moment
        deadline = time.monotonic() + 20
        while time.monotonic() < deadline and not any(p[0].isdigit() and int(p.split()[0]) >= 200
                                                      for p in list(printed) if p):
            time.sleep(0.01)
        time.sleep(rng.uniform(0.0, 0.12))
    child.send_signal(signal.SIGKILL)
    child.wait(20)
    reader.join(20)
    return printed


@pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="needs SIGKILL")
def test_sigkill_at_random_moments_keeps_the_file_sound_and_committed_lines(tmp_path):
    rng = random.Random(20260504)
    path = tmp_path / "powercut.sqlite"
    kept = 0
    for kill in range(KILLS):
        # GIVEN the recording as the previous run left it; WHEN a writer appends and is killed
        printed = run_and_kill(path, kept, rng, early=kill % 5 == 0)
        reports = [tuple(map(int, p.split())) for p in printed if p and p[0].isdigit()]
        committed = kept + (reports[-1][0] if reports else 0)
        assert all(dropped == 0 for _, dropped in reports)
        if not path.exists():
            continue  # killed before the file was made
        # THEN the file is sound ...
        conn = sqlite3.connect(path)
        assert conn.execute("PRAGMA integrity_check").fetchall() == [("ok",)]
        # ... the blocks follow each other without gap or overlap ...
        blocks = conn.execute("SELECT seq_first, n_lines FROM raw_block ORDER BY seq_first").fetchall()
        assert all(a[0] + a[1] == b[0] for a, b in zip(blocks, blocks[1:]))
        alert_rows = [r[0] for r in conn.execute("SELECT text FROM alert ORDER BY id")]
        conn.close()
        # ... every line is there once, in order, at least all that were reported committed ...
        texts = [line.text for line in iter_raw(path)]
        assert texts == [f"$GPTXT,{j:08d}" for j in range(len(texts))]
        assert len(texts) >= committed >= kept
        # ... and the alert table agrees with the alert messages of the same transactions
        alert_msgs = [m.payload["text"] for m in iter_messages(path) if m.kind == "alert"]
        assert alert_rows == alert_msgs
        assert all(int(text.split()[1]) < len(texts) for text in alert_rows)
        kept = len(texts)
    # AND the runs did write and merge: many lines, merged lzma blocks among them
    conn = sqlite3.connect(path)
    codecs = {r[0] for r in conn.execute("SELECT codec FROM raw_block")}
    conn.close()
    assert kept > 1000
    # AND the recording the kills left replays (interface.md: a recording is a replayable file)
    done = subprocess.run([sys.executable, "-m", "daemon", "replay", str(path), "--quiet"], cwd=REPO,
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr[-2000:]
    assert "lzma" in codecs
