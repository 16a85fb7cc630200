"""The one loop: routing by kind, data-time ticks, status cadence, alerts, commands from other threads."""

from __future__ import annotations

import threading

from daemon.core.pipeline import Pipeline
from daemon.core.readings import RawLine, Reading
from estimators.base import Condition, EstimatorBase, Publication
from estimators.samples import Heading, Pressure
from tests.helpers import FakeAlerts, Keep


class Echo(EstimatorBase):
    """Publishes each heading it sees; counts ticks."""

    name = "echo"
    accepts = (Heading,)

    def __init__(self):
        self.ticks = []

    def step(self, sample, ctx):
        mean = ctx.history.mean_heading_deg(sample.t_s - 1.0, sample.t_s)
        return [Publication(sample.t_s, "echo", {"deg": sample.true_deg, "mean": mean})]

    def tick(self, t_s, ctx):
        self.ticks.append(t_s)
        return [Condition(t_s, "sensor_stale", "caution", active=t_s >= 1003)]


def reading(sample):
    return Reading("compass", sample, sample.t_s, "HDT")


def make():
    est, alerts, sink = Echo(), FakeAlerts(), Keep()
    return Pipeline([est], [sink], alerts, prefix="boat"), est, alerts, sink


def test_samples_reach_only_the_estimators_that_accept_them_and_payloads_start_with_time():
    # GIVEN a pipeline with one heading estimator
    pipe, est, alerts, sink = make()
    # WHEN a heading and a pressure arrive
    pipe.feed(reading(Heading(1000.5, 359.0)))
    pipe.feed(reading(Pressure(1000.7, 1012.0)))
    pipe.feed(reading(Heading(1000.9, 1.0)))
    # THEN only headings are echoed, with the full topic and time first
    echoes = [m for m in sink.messages if m.topic == "boat/echo"]
    assert [m.payload["deg"] for m in echoes] == [359.0, 1.0]
    assert list(echoes[0].payload)[0] == "time"
    assert echoes[0].payload["time"] == "1970-01-01T00:16:40.500Z"
    # the mean across north comes from the history, circular: 0, not 180
    assert abs(echoes[1].payload["mean"] % 360.0) < 1e-6 or abs(echoes[1].payload["mean"] - 360.0) < 1e-6


def test_ticks_once_per_data_second_and_status_every_ten_seconds():
    pipe, est, alerts, sink = make()
    for i in range(250):  # 25 s at 10 Hz
        pipe.feed(reading(Heading(1000.0 + i * 0.1, 90.0)))
    assert est.ticks == [float(t) for t in range(1001, 1025)]
    status = [m for m in sink.messages if m.kind == "status"]
    assert [round(m.t_s) for m in status] == [1000, 1010, 1020]
    assert status[-1].payload["sensors"]["heading"] < 1.0
    assert status[-1].retain
    # conditions go to the alert manager, not out as messages
    assert any(c.active for c in alerts.conditions) and not any(m.topic.endswith("sensor_stale") for m in sink.messages)


def test_a_long_gap_is_crossed_without_a_tick_for_every_second():
    pipe, est, alerts, sink = make()
    pipe.feed(reading(Heading(1000.0, 0.0)))
    pipe.feed(reading(Heading(1000.0 + 10 * 86400, 0.0)))  # ten days later
    assert len(est.ticks) < 1000


def test_raw_lines_go_to_the_sinks_and_time_never_runs_backwards():
    pipe, est, alerts, sink = make()
    pipe.feed(RawLine("gps", 1005.0, 1005.0, "$GPRMC,..."))
    pipe.feed(RawLine("gps", 1001.0, 1001.0, "$GPRMC,..."))
    assert len(sink.raws) == 2 and pipe.now_s == 1005.0


def test_acknowledgements_from_another_thread_are_handled_in_the_loop():
    pipe, est, alerts, sink = make()
    pipe.feed(reading(Heading(1000.0, 0.0)))
    t = threading.Thread(target=pipe.acknowledge, args=("pressure_fall",))
    t.start()
    t.join()
    assert alerts.acks == []  # not yet: only the loop touches the alert manager
    pipe.feed(reading(Heading(1000.2, 0.0)))
    assert alerts.acks == [("pressure_fall", 1000.0)]
    assert any(m.topic == "boat/alerts/pressure_fall" for m in sink.messages)


def test_an_acknowledgement_is_answered_with_whether_it_acknowledged_anything():
    # GIVEN a pipeline that has not seen data yet, and one that has
    pipe, est, alerts, sink = make()
    answers = []
    pipe.acknowledge("pressure_fall", lambda i, ok: answers.append((i, ok)))
    pipe.feed(RawLine("gps", 999.0, float("nan"), "$GPRMC,..."))  # no data time yet: nothing to acknowledge
    pipe.feed(reading(Heading(1000.0, 0.0)))
    # WHEN a known and an unknown id are acknowledged
    pipe.acknowledge("pressure_fall", lambda i, ok: answers.append((i, ok)))
    pipe.acknowledge("no_such_alert", lambda i, ok: answers.append((i, ok)))
    pipe.feed(reading(Heading(1000.2, 0.0)))
    # THEN only the one that changed an alert is answered True (issue 13 item 16: ack_accepted)
    assert answers == [("pressure_fall", False), ("pressure_fall", True), ("no_such_alert", False)]


def test_close_publishes_a_last_status_and_closes_sinks():
    pipe, est, alerts, sink = make()
    pipe.feed(reading(Heading(1000.0, 0.0)))
    pipe.close()
    assert sink.closed and sink.messages[-1].kind == "status"
