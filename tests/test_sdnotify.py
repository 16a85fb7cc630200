"""sd_notify, checked against a datagram socket of the test's own.

Expected wire format from systemd's sd_notify(3) manual page: newline-separated
KEY=VALUE assignments in one datagram; '@' at the start of NOTIFY_SOCKET means
the abstract namespace; WATCHDOG_USEC in microseconds, ping at half of it.
"""

from __future__ import annotations

import os
import socket
import threading
import uuid

import pytest

from daemon.outlets.sdnotify import Notifier


@pytest.fixture
def listener(tmp_path):
    sock = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM)
    path = tmp_path / "notify.sock"
    sock.bind(str(path))
    sock.settimeout(2.0)
    yield str(path), sock
    sock.close()


def received(sock: socket.socket) -> list[str]:
    return sock.recv(4096).decode().split("\n")


def test_ready_status_watchdog_stopping_reach_the_socket(listener):
    # GIVEN a notify socket named in the environment
    path, sock = listener
    n = Notifier({"NOTIFY_SOCKET": path})
    # WHEN the service goes through its life
    assert n.ready("watching 3 inputs")
    assert received(sock) == ["READY=1", "STATUS=watching 3 inputs"]
    n.status("broker\nlost")
    assert received(sock) == ["STATUS=broker lost"]  # a newline would start a new assignment
    n.watchdog()
    assert received(sock) == ["WATCHDOG=1"]
    n.stopping()
    # THEN each datagram carries exactly the assignments of sd_notify(3)
    assert received(sock) == ["STOPPING=1"]
    n.close()


def test_abstract_namespace_socket():
    # GIVEN an abstract socket ('@' in NOTIFY_SOCKET stands for the leading NUL byte)
    name = f"offwatch-test-{uuid.uuid4().hex}"
    sock = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM)
    sock.bind(b"\0" + name.encode())
    sock.settimeout(2.0)
    try:
        n = Notifier({"NOTIFY_SOCKET": "@" + name})
        # WHEN READY is sent THEN it arrives on the abstract socket
        assert n.ready()
        assert received(sock) == ["READY=1"]
    finally:
        sock.close()


def test_no_socket_is_a_no_op():
    n = Notifier({})
    assert not n.enabled
    assert n.ready() is False and n.watchdog() is False and n.sent == 0
    assert n.watchdog_interval_s is None


def test_a_vanished_socket_is_not_fatal(tmp_path):
    n = Notifier({"NOTIFY_SOCKET": str(tmp_path / "gone.sock")})
    assert n.ready() is False  # logged once, never raised
    assert n.watchdog() is False


def test_a_manager_that_does_not_read_never_stalls_the_sender(listener):
    # GIVEN a notify socket nobody reads (its queue holds net.unix.max_dgram_qlen datagrams, 10 by default)
    path, sock = listener
    n = Notifier({"NOTIFY_SOCKET": path})
    results: list[bool] = []
    # WHEN the service sends far more than the queue holds
    sender = threading.Thread(target=lambda: results.extend(n.status(f"figure {i}") for i in range(500)))
    sender.start()
    sender.join(timeout=30)  # a blocking send would hang here for ever
    # THEN every send returned, the ones that found the queue full dropped (not raised)
    assert not sender.is_alive()
    assert len(results) == 500 and results[0] is True and results[-1] is False
    # AND what was queued is intact, in order
    assert received(sock) == ["STATUS=figure 0"]
    n.close()


def test_watchdog_interval_is_half_of_watchdog_usec():
    # WatchdogSec=30 gives WATCHDOG_USEC=30000000: ping every 15 s
    assert Notifier({"WATCHDOG_USEC": "30000000"}).watchdog_interval_s == pytest.approx(15.0)
    assert Notifier({"WATCHDOG_USEC": "30000000", "WATCHDOG_PID": str(os.getpid())}).watchdog_interval_s == 15.0
    # meant for another process, or nonsense: no watchdog
    assert Notifier({"WATCHDOG_USEC": "30000000", "WATCHDOG_PID": str(os.getpid() + 1)}).watchdog_interval_s is None
    assert Notifier({"WATCHDOG_USEC": "soon"}).watchdog_interval_s is None
    assert Notifier({"WATCHDOG_USEC": "0"}).watchdog_interval_s is None


def test_keepalive_pings_at_half_interval_and_only_when_healthy(listener):
    path, sock = listener
    n = Notifier({"NOTIFY_SOCKET": path, "WATCHDOG_USEC": "10000000"})  # 10 s: ping every 5 s
    # GIVEN explicit monotonic times
    assert n.keepalive(True, now_s=100.0)
    assert received(sock) == ["WATCHDOG=1"]
    assert not n.keepalive(True, now_s=104.9)   # too soon
    assert not n.keepalive(False, now_s=106.0)  # unhealthy: let systemd restart us
    assert n.keepalive(True, now_s=106.0)
    assert received(sock) == ["WATCHDOG=1"]
    assert n.sent == 2
