"""The broker probe and the embedded demo broker.

CONNECT/CONNACK bytes from the MQTT 3.1.1 standard (OASIS, 2014), sections
2.2.3 (remaining length), 3.1 and 3.2.
"""

from __future__ import annotations

import socket
import threading
import uuid

import paho.mqtt.client as paho
import pytest
from paho.mqtt.enums import CallbackAPIVersion

from daemon.outlets.broker import EmbeddedBroker, connect_packet, remaining_length, broker_answers
from tests.helpers import free_port


def test_remaining_length_examples_of_the_standard():
    # MQTT 3.1.1 table 2.4: 0 -> 0x00, 127 -> 0x7F, 128 -> 0x80 0x01, 16383 -> 0xFF 0x7F, 16384 -> 0x80 0x80 0x01
    assert remaining_length(0) == b"\x00"
    assert remaining_length(127) == b"\x7f"
    assert remaining_length(128) == b"\x80\x01"
    assert remaining_length(16_383) == b"\xff\x7f"
    assert remaining_length(16_384) == b"\x80\x80\x01"


def test_connect_packet_layout():
    pkt = connect_packet("ab", keepalive_s=10)
    # fixed header 0x10, remaining length 14; "MQTT", level 4, clean session, keep alive 10, client id "ab"
    assert pkt == b"\x10\x0e\x00\x04MQTT\x04\x02\x00\x0a\x00\x02ab"


def test_probe_sees_mosquitto(mosquitto):
    host, port = mosquitto
    assert broker_answers(host, port)


def test_probe_refuses_a_closed_port_and_a_non_mqtt_server():
    assert not broker_answers("127.0.0.1", free_port(), timeout=0.5)
    # GIVEN a TCP server that answers with something else (an NMEA talker, say)
    srv = socket.socket()
    srv.bind(("127.0.0.1", 0))
    srv.listen(1)

    def talk() -> None:
        conn, _ = srv.accept()
        conn.recv(100)
        conn.sendall(b"$GPRMC,,V,,,,,,,,,,N*53\r\n")
        conn.close()

    t = threading.Thread(target=talk, daemon=True)
    t.start()
    try:
        # THEN an open port alone does not count as a broker
        assert not broker_answers("127.0.0.1", srv.getsockname()[1], timeout=1.0)
    finally:
        t.join(2)
        srv.close()


def test_probe_gives_up_on_a_silent_server():
    srv = socket.socket()
    srv.bind(("127.0.0.1", 0))
    srv.listen(1)  # accepts (in the backlog) but never answers
    try:
        # it returns (False) rather than waiting for ever; how soon is a figure of tools/bench/handoffs.py
        assert not broker_answers("127.0.0.1", srv.getsockname()[1], timeout=0.3)
    finally:
        srv.close()


@pytest.fixture
def embedded():
    pytest.importorskip("amqtt")
    broker = EmbeddedBroker("127.0.0.1", 0).start()
    yield broker
    broker.stop()


def test_embedded_broker_carries_paho_mqtt311(embedded):
    # GIVEN the demo broker on a free loopback port
    assert embedded.port > 0
    assert broker_answers(embedded.host, embedded.port)
    got: list[tuple[str, bytes, bool]] = []
    arrived = threading.Event()
    publisher = paho.Client(CallbackAPIVersion.VERSION2, client_id=f"p-{uuid.uuid4().hex[:6]}",
                            protocol=paho.MQTTv311)
    publisher.connect(embedded.host, embedded.port)
    publisher.loop_start()
    # a retained state before anyone subscribes
    publisher.publish("demo/current", b'{"drift_kn":0.5}', qos=1, retain=True).wait_for_publish(5)
    sub = paho.Client(CallbackAPIVersion.VERSION2, client_id=f"s-{uuid.uuid4().hex[:6]}", protocol=paho.MQTTv311)
    subscribed = threading.Event()
    sub.on_connect = lambda c, u, f, r, p: c.subscribe("demo/#", qos=1)
    sub.on_subscribe = lambda *a: subscribed.set()

    def keep(c, u, msg):
        got.append((msg.topic, msg.payload, bool(msg.retain)))
        if len(got) >= 2:
            arrived.set()

    sub.on_message = keep
    sub.connect(embedded.host, embedded.port)
    sub.loop_start()
    try:
        assert subscribed.wait(5)
        # WHEN an alert is published after the subscription
        publisher.publish("demo/alerts/front", b'{"id":"front"}', qos=1).wait_for_publish(5)
        # THEN the subscriber has the retained state (flagged retained) and the live alert
        assert arrived.wait(5)
        assert ("demo/current", b'{"drift_kn":0.5}', True) in got
        assert ("demo/alerts/front", b'{"id":"front"}', False) in got
    finally:
        for c in (publisher, sub):
            c.disconnect()
            c.loop_stop()


def test_embedded_broker_stops_and_frees_the_port(embedded):
    host, port = embedded.host, embedded.port
    embedded.stop()
    assert not broker_answers(host, port, timeout=0.5)
    # the same port can be served again
    again = EmbeddedBroker(host, port).start()
    try:
        assert broker_answers(host, port)
    finally:
        again.stop()
