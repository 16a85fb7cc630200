"""The crew's acknowledgements are inputs: a recording keeps them and its replay repeats them, so the
replay's alerts (and every other message) are the run's, acknowledged alerts included.

Check values: the alert states as interface.md and the trade's bridge alert management define them
(an acknowledged warning stays listed while its condition holds; a caution is never acknowledged).
"""

from __future__ import annotations

import pytest

from daemon.core.assembly import build
from daemon.core.config import load_config
from daemon.core.readings import Acknowledgement, RawLine
from daemon.intake.acks import ACK_SOURCE, ack_items, replayed, valid_alert_id
from daemon.intake.replayfiles import item_time, iter_replay
from daemon.outlets.recording.reading import iter_raw
from daemon.outlets.recording.recorder import Recorder
from daemon.outlets.recording.tag_nmea import export_tag_nmea
from tests.helpers import Keep


def run_with_acks(short_passage, sinks, acks_at: dict[float, str]) -> list[tuple[str, bool]]:
    """The short passage through a pipeline; at each data time in ``acks_at`` a display acknowledges that
    id, as the MQTT thread would. Returns the answers (id, acknowledged)."""
    parts = build(load_config(short_passage["cfg"]), sinks, live=False)
    answers: list[tuple[str, bool]] = []
    due = sorted(acks_at.items())
    for item in iter_replay([short_passage["nmea"]], parts.make_ingest):
        while due and item_time(item) >= short_passage["t0"] + due[0][0]:
            parts.pipeline.acknowledge(due.pop(0)[1], lambda i, ok: answers.append((i, ok)))
        parts.pipeline.feed(item)
    parts.pipeline.close()
    return answers


def replay(db, short_passage) -> Keep:
    keep = Keep()
    parts = build(load_config(short_passage["cfg"]), [keep], live=False)
    for item in iter_replay([db], parts.make_ingest):
        parts.pipeline.feed(item)
    parts.pipeline.close()
    return keep


def states(keep: Keep, alert_id: str) -> list[str]:
    return [m.payload["state"] for m in keep.messages if m.topic.endswith("/alerts/" + alert_id)]


def test_a_recording_replays_the_crews_acknowledgement_to_the_same_messages(short_passage, tmp_path):
    # GIVEN the short passage (a 40-s GNSS outage from minute 4: gnss_lost, a warning) run with a
    # recorder, a display acknowledging gnss_lost 30 s into the outage, and a caution and an unknown id
    # acknowledged too (both refused: they change nothing)
    db = tmp_path / "acked.sqlite"
    first = Keep()
    answers = run_with_acks(short_passage, [first, Recorder.open_file(db)],
                            {4 * 60 + 30: "gnss_lost", 4 * 60 + 31: "front", 4 * 60 + 32: "no_such_alert"})
    assert answers == [("gnss_lost", True), ("front", False), ("no_such_alert", False)]
    assert "acknowledged" in states(first, "gnss_lost")
    # WHEN the recording is replayed, with no display and no broker
    again = replay(db, short_passage)
    # THEN the replay publishes what the run did, message for message, the acknowledgement included
    assert [(m.t_s, m.topic, m.payload) for m in again.messages] == \
        [(m.t_s, m.topic, m.payload) for m in first.messages]
    assert states(again, "gnss_lost") == states(first, "gnss_lost")
    # AND only the acknowledgement that changed something was kept, as a line of its own source
    kept = [line.text for line in iter_raw(db) if line.source == ACK_SOURCE]
    assert kept == ['{"id":"gnss_lost"}']


def test_without_the_acknowledgement_the_replay_differs(short_passage, tmp_path):
    # the check above could fail: a run without the ack lists gnss_lost as rectified, not acknowledged
    db = tmp_path / "plain.sqlite"
    first = Keep()
    run_with_acks(short_passage, [first, Recorder.open_file(db)], {})
    assert "acknowledged" not in states(replay(db, short_passage), "gnss_lost")


def test_a_tag_export_leaves_the_acknowledgement_out(short_passage, tmp_path):
    db, out = tmp_path / "acked.sqlite", tmp_path / "out.nmea"
    run_with_acks(short_passage, [Keep(), Recorder.open_file(db)], {4 * 60 + 30: "gnss_lost"})
    export_tag_nmea(db, out)
    assert "gnss_lost" not in out.read_text(encoding="utf-8")


@pytest.mark.parametrize("text", ['{"id":"gnss_lost","x":1}', '{"id":""}', '{"id":"a#"}', '["gnss_lost"]',
                                  "{not json", '{"id":"' + "a" * 200 + '"}', "[" * 3000 + "]" * 3000])
def test_a_recorded_acknowledgement_that_no_longer_parses_is_counted_and_acknowledges_nothing(text):
    # a recording is data too: a damaged line (hand-edited, or from another version) is never fatal
    items = replayed(RawLine(ACK_SOURCE, 100.0, 100.0, text))
    assert len(items) == 1 and isinstance(items[0], RawLine) and items[0].counts == (("unparseable", 1),)


def test_a_recorded_acknowledgement_round_trips():
    line, ack = ack_items("pressure_fall", 123.0)
    assert replayed(line) == [line, ack] and ack == Acknowledgement(ACK_SOURCE, 123.0, "pressure_fall")
    assert valid_alert_id("pressure_fall") and not valid_alert_id("x\n") and not valid_alert_id(7)
