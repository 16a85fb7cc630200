"""Benchmark (not a test): how long the MQTT sink takes to come back after a broker restart.

Run: python -m tools.bench.mqtt_reconnect [rounds]

Each round stops the test's own Mosquitto, queues 20 alert changes, starts it
again on the same port and measures (wall clock, monotonic):
  reconnect: from the broker answering again to the sink's CONNACK;
  delivered: from the broker answering again to the last PUBACK (outbox empty);
  outage: from the sink seeing the connection lost to its CONNACK.
The figures depend on paho's back-off (reconnect_delay_set(1, 5)): the first
retry comes 1 s after the loss, then 2, 4, 5 s.
"""

from __future__ import annotations

import statistics
import sys
import tempfile
import time
from pathlib import Path

from daemon.core.config import MqttSettings
from daemon.outlets.mqtt import MqttSink
from daemon.core.readings import Message
from tests.helpers import Mosquitto


def wait(cond, timeout_s: float = 30.0) -> None:
    deadline = time.monotonic() + timeout_s
    while not cond():
        if time.monotonic() > deadline:
            raise TimeoutError
        time.sleep(0.005)


def main(rounds: int = 5, down_s: float = 0.5) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        broker = Mosquitto(Path(tmp))
        broker.start()
        sink = MqttSink(MqttSettings(url=f"mqtt://{broker.host}:{broker.port}", prefix="bench",
                                     client_id="offwatch-bench"), Path(tmp) / "outbox.sqlite")
        wait(lambda: sink.connected)
        reconnect, delivered, outage = [], [], []
        for r in range(rounds):
            broker.stop()
            wait(lambda: not sink.connected)
            for n in range(20):
                sink.message(Message(float(n), "bench/alerts/x", {"n": n, "round": r}, retain=True, qos=1,
                                     kind="alert"))
            time.sleep(down_s)
            broker.start()
            up = time.monotonic()
            wait(lambda: sink.connected and sink.connected_at is not None and sink.connected_at > up)
            reconnect.append(sink.connected_at - up)
            outage.append(sink.connected_at - sink.disconnected_at)
            wait(lambda: sink.pending() == 0)
            delivered.append(time.monotonic() - up)
        sink.close()
        broker.stop()
    print(f"broker down {down_s:.1f} s per round, {rounds} rounds, 20 alert changes queued each")
    print(f"reconnect after the broker answers: median {statistics.median(reconnect):.2f} s, "
          f"max {max(reconnect):.2f} s")
    print(f"connection loss to reconnect (outage included): median {statistics.median(outage):.2f} s, "
          f"max {max(outage):.2f} s")
    print(f"all delivered after the broker answers: median {statistics.median(delivered):.2f} s, "
          f"max {max(delivered):.2f} s")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 5)
