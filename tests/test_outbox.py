"""The outbox on its own: latest state per topic, an ordered bounded queue, a restart."""

from __future__ import annotations

import sqlite3

import pytest

from daemon.outlets.outbox import Outbox, Outgoing


def test_latest_state_is_an_upsert_per_topic(tmp_path):
    box = Outbox(tmp_path / "o.sqlite")
    # GIVEN three states on two topics
    box.keep_latest("b/current", b"1")
    box.keep_latest("b/position", b"p")
    box.keep_latest("b/current", b"2")
    # THEN only the latest of each topic is kept
    assert [(s.topic, s.payload) for s in box.latest_states()] == [("b/current", b"2"), ("b/position", b"p")]
    assert box.latest("b/current").payload == b"2"
    assert box.latest("b/none") is None


def test_queue_keeps_order_and_removes_by_seq(tmp_path):
    box = Outbox(tmp_path / "o.sqlite")
    seqs = [box.append("b/alerts/front", f"{i}".encode()) for i in range(5)]
    assert seqs == sorted(seqs) and len(set(seqs)) == 5
    box.remove(seqs[1])
    assert [q.payload for q in box.queued()] == [b"0", b"2", b"3", b"4"]
    assert [q.payload for q in box.queued(limit=2)] == [b"0", b"2"]
    assert [q.payload for q in box.queued(after_seq=seqs[2])] == [b"3", b"4"]


def test_full_queue_drops_the_oldest_and_counts(tmp_path):
    # GIVEN a queue bounded at 3
    box = Outbox(tmp_path / "o.sqlite", max_queued=3)
    for i in range(5):
        box.append("b/alerts/x", f"{i}".encode())
    # THEN the two oldest went, and were counted
    assert [q.payload for q in box.queued()] == [b"2", b"3", b"4"]
    assert box.dropped == 2
    assert box.queued_count() == 3


def test_store_sorts_states_from_queued(tmp_path):
    box = Outbox(tmp_path / "o.sqlite")
    seqs = box.store([Outgoing("b/current", b"s", 0, True),         # retained QoS 0: a state
                      Outgoing("b/alerts/front", b"a", 1, True),    # QoS 1: queued, and its latest kept
                      Outgoing("b/events", b"e", 0, False)])        # not retained: queued only
    assert seqs[0] is None and seqs[1] is not None and seqs[2] > seqs[1]
    assert [s.topic for s in box.latest_states()] == ["b/alerts/front", "b/current"]
    assert [(q.topic, q.qos, q.retain) for q in box.queued()] == [("b/alerts/front", 1, True), ("b/events", 0, False)]
    assert box.queued_topics() == {"b/alerts/front", "b/events"}
    # once the broker has the alert, only its latest state is left, to republish after a reconnect
    box.remove(seqs[1])
    assert box.queued_topics() == {"b/events"}
    assert box.latest("b/alerts/front") == Outgoing("b/alerts/front", b"a", 1, True)
    box.forget_latest("b/alerts/front")
    assert box.latest("b/alerts/front") is None


def test_everything_survives_a_reopen(tmp_path):
    path = tmp_path / "o.sqlite"
    box = Outbox(path, max_queued=2)
    box.keep_latest("b/pressure", b"1013")
    for i in range(3):
        box.append("b/alerts/a", f"{i}".encode())
    box.close()
    # WHEN offwatch starts again on the same file
    again = Outbox(path, max_queued=2)
    # THEN states, the queue (in order) and the drop count are all there
    assert again.latest("b/pressure").payload == b"1013"
    assert [q.payload for q in again.queued()] == [b"1", b"2"]
    assert again.dropped == 1
    # and new entries come after the old ones
    assert again.append("b/alerts/a", b"3") > again.queued()[0].seq


def test_file_uses_wal(tmp_path):
    path = tmp_path / "o.sqlite"
    box = Outbox(path)
    box.keep_latest("b/x", b"1")
    mode = sqlite3.connect(path).execute("PRAGMA journal_mode").fetchone()[0]
    assert mode == "wal"
    box.close()


def test_failed_batch_rolls_back(tmp_path):
    box = Outbox(tmp_path / "o.sqlite")
    with pytest.raises(RuntimeError):
        with box.batch():
            box.append("b/alerts/a", b"lost")
            raise RuntimeError("disk trouble")
    assert box.queued_count() == 0
    box.append("b/alerts/a", b"kept")  # the connection is usable after the rollback
    assert box.queued_count() == 1


def test_memory_outbox_without_a_file():
    box = Outbox(None, max_queued=1)
    box.append("b/a", b"1")
    box.append("b/a", b"2")
    assert [q.payload for q in box.queued()] == [b"2"] and box.dropped == 1


def test_bound_must_be_positive(tmp_path):
    with pytest.raises(ValueError):
        Outbox(tmp_path / "o.sqlite", max_queued=0)
