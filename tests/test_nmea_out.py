"""Set and drift back to the instruments: NMEA 0183 over TCP.

Checked against: pynmea2 (PyPI) as an outside parser of VDR, whose field
table names the layout (degrees true, T, degrees magnetic, M, current speed,
N); NMEA 0183 v3.01/v4.10 framing as remembered (checksum: XOR of the
characters between '$' and '*', two hex digits; at most 82 characters with CR
LF; the reserved characters kept out of fields). ALR (NMEA 0183 v3.01, from
memory: time, alarm number, condition A/V, acknowledged A/V, text) is not in
pynmea2: its fields are split by hand and the checksum computed here. The
magnetic set: magnetic = true - variation (east positive), the navigator's
rule "variation west, magnetic best" (common practice).
"""

from __future__ import annotations

import socket
import threading
import time
from pathlib import Path

import pynmea2
import pytest

from daemon.core.config import load_config
from daemon.core.readings import Message
from daemon.errors import ConfigError
from daemon.outlets.nmea_tcp import NmeaOutParams, NmeaTcpSink, alr, clean_text, vdr
from tests.helpers import Keep, free_port, nmea_checksum, wait_until

PREFIX = "offwatch"


def current(t: float, set_deg: float, drift: float, quality: str = "valid") -> Message:
    return Message(t, f"{PREFIX}/current", {"time": "", "set_deg": set_deg, "drift_kn": drift, "quality": quality},
                   retain=True)


def position(t: float, lat: float, lon: float) -> Message:
    return Message(t, f"{PREFIX}/position", {"time": "", "lat": lat, "lon": lon, "source": "gnss"}, retain=True)


def alert(t: float, aid: str, state: str, text: str) -> Message:
    return Message(t, f"{PREFIX}/alerts/{aid}", {"time": "", "id": aid, "priority": "warning", "state": state,
                                                  "text": text}, retain=True, qos=1, kind="alert")


class Reader:
    """A TCP client that keeps every line it receives."""

    def __init__(self, port: int) -> None:
        self.sock = socket.create_connection(("127.0.0.1", port), timeout=5.0)
        self.data = b""
        self.thread = threading.Thread(target=self._run, daemon=True)
        self.thread.start()

    def _run(self) -> None:
        while True:
            try:
                chunk = self.sock.recv(65536)
            except OSError:
                return
            if not chunk:
                return
            self.data += chunk

    def lines(self) -> list[str]:
        return [x for x in self.data.decode("ascii").split("\r\n")[:-1]]

    def close(self) -> None:
        self.sock.close()


@pytest.fixture
def sink():
    s = NmeaTcpSink(NmeaOutParams(enabled=True, port=free_port(), alerts=True, client_buffer_bytes=2048,
                                  stall_s=600.0))
    yield s
    s.close()


def test_vdr_fields_read_back_with_pynmea2():
    line = vdr("II", 47.3, 4.21, -9.5)
    assert line.endswith("\r\n") and len(line) <= 82
    msg = pynmea2.parse(line.strip(), check=True)  # check=True: pynmea2 verifies the checksum
    assert isinstance(msg, pynmea2.types.talker.VDR)
    assert msg.deg_t == pytest.approx(47.3) and msg.true == "T"
    assert msg.deg_m == pytest.approx(56.8) and msg.magnetic == "M"  # variation 9.5 W: magnetic is larger
    assert msg.current == pytest.approx(4.21) and msg.unit_kn == "N"
    unknown = pynmea2.parse(vdr("II", 359.96, 0.5, None).strip(), check=True)
    assert unknown.deg_m is None and unknown.deg_t == pytest.approx(0.0)  # 359.96 rounds to 360.0 = 0.0


def test_alr_stays_within_82_characters_without_reserved_characters():
    text = "No GNSS fix for 10 s near 40.9021°N 32.1260°W; check the receiver, its antenna* and $cable!~^\\"
    line = alr("II", 1777884009.0, 4, True, False, text)
    assert len(line) <= 82 and line.endswith("\r\n")
    body, cs = line[1:-2].split("*")
    assert cs == nmea_checksum(body)
    talker_kind, hhmmss, number, cond, ack, desc = body.split(",")
    assert (talker_kind, hhmmss, number, cond, ack) == ("IIALR", "084009.00", "004", "A", "V")
    assert not set(desc) & set("$*,!\\^~") and desc.startswith("No GNSS fix for 10 s near 40.9021 deg")
    assert clean_text("a,b\r\nc") == "a b c"


def test_a_client_receives_vdr_at_most_once_a_data_second_and_only_when_known(sink):
    client = Reader(sink.port)
    assert wait_until(lambda: sink.stats.clients == 1)
    sink.message(position(0.0, 40.9, -32.3))
    sink.message(current(1.0, 200.0, 0.5, quality="converging"))  # not yet trusted: nothing sent
    for i in range(10):
        sink.message(current(10.0 + 0.5 * i, 47.0, 4.2))  # 2 Hz of data: 1 Hz out
    assert wait_until(lambda: len(client.lines()) >= 5)
    time.sleep(0.2)
    lines = client.lines()
    assert len(lines) == 5
    parsed = [pynmea2.parse(x, check=True) for x in lines]
    assert all(p.deg_t == pytest.approx(47.0) and p.current == pytest.approx(4.2) for p in parsed)
    # the World Magnetic Model near 40.9 N 32.3 W in 1970 gives a westerly variation: magnetic > true
    assert all(p.deg_m > p.deg_t for p in parsed)
    client.close()


def test_alerts_go_out_as_alr_on_each_change(sink):
    client = Reader(sink.port)
    assert wait_until(lambda: sink.stats.clients == 1)
    sink.message(alert(100.0, "gnss_lost", "active", "No GNSS fix for 10 s."))
    sink.message(alert(160.0, "gnss_lost", "acknowledged", "No GNSS fix for 70 s."))
    sink.message(alert(200.0, "gnss_lost", "cleared", "GNSS fixes are back."))
    assert wait_until(lambda: len(client.lines()) >= 3)
    states = [tuple(x.split("*")[0].split(",")[2:5]) for x in client.lines()]
    assert states == [("004", "A", "V"), ("004", "A", "A"), ("004", "V", "A")]
    client.close()


def test_a_client_that_never_reads_cannot_stall_or_grow_the_service(sink):
    stuck = socket.socket()
    stuck.setsockopt(socket.SOL_SOCKET, socket.SO_RCVBUF, 1024)
    stuck.connect(("127.0.0.1", sink.port))
    reader = Reader(sink.port)
    assert wait_until(lambda: sink.stats.clients == 2)
    n = 3000
    for i in range(n):
        sink.message(current(float(i), 47.0, 4.2))  # never waits, whatever the clients do
        if i % 20 == 0:
            time.sleep(0.01)  # a burst far faster than the 1 Hz a live current gives
    me = reader.sock.getsockname()[1]

    def reader_accounted() -> bool:
        lost = next(c["dropped"] for c in sink.client_snapshot() if c["port"] == me)
        return len(reader.lines()) + lost + sink.stats.dropped_queue == n

    assert wait_until(reader_accounted, 20)  # every sentence received or counted as lost
    assert len(reader.lines()) > n // 2  # the reading client gets most of them
    stuck_port = stuck.getsockname()[1]
    stuck_info = next(c for c in sink.client_snapshot() if c["port"] == stuck_port)
    assert stuck_info["dropped"] > n // 2  # the stuck client lost what did not fit, counted
    assert all(c["buffered"] <= 2048 for c in sink.client_snapshot())  # bounded, whatever the client does
    for line in reader.lines()[-20:]:
        pynmea2.parse(line, check=True)
    stuck.close()
    reader.close()


def test_many_clients_and_one_too_many(tmp_path):
    s = NmeaTcpSink(NmeaOutParams(enabled=True, port=free_port(), max_clients=3))
    try:
        readers = [Reader(s.port) for _ in range(3)]
        assert wait_until(lambda: s.stats.clients == 3)
        extra = socket.create_connection(("127.0.0.1", s.port), timeout=5.0)
        assert wait_until(lambda: s.stats.refused == 1)
        assert extra.recv(10) == b""  # closed at once
        s.message(current(5.0, 120.0, 1.0))
        assert wait_until(lambda: all(len(r.lines()) == 1 for r in readers))
        for r in readers:
            r.close()
        extra.close()
    finally:
        s.close()


def test_it_binds_to_loopback_unless_told_and_names_a_busy_port():
    p = NmeaOutParams()
    assert p.bind == "127.0.0.1" and p.port == 10110 and not p.enabled
    busy = socket.create_server(("127.0.0.1", 0))
    try:
        with pytest.raises(ConfigError, match=r"\[nmea_out\].*port"):
            NmeaTcpSink(NmeaOutParams(enabled=True, port=busy.getsockname()[1]))
    finally:
        busy.close()
    with pytest.raises(ConfigError, match="talker"):
        NmeaOutParams(talker="ii1")


def test_a_live_replay_sends_the_current_it_publishes(demo_slice, tmp_path: Path):
    from daemon.commands.replay import run_replay

    port = free_port()
    toml = tmp_path / "out.toml"
    toml.write_text(Path(demo_slice["config"]).read_text(encoding="utf-8")
                    + f"\n[nmea_out]\nenabled = true\nport = {port}\nsend_converging = true\n", encoding="utf-8")
    cfg = load_config(str(toml))
    keep = Keep()
    done = threading.Event()
    worker = threading.Thread(target=lambda: (run_replay([str(demo_slice["nmea"])], cfg, extra_sinks=[keep],
                                                         progress=False, speed=400.0), done.set()), daemon=True)
    worker.start()
    assert wait_until(lambda: _connect(port) is not None, 10)
    reader = Reader(port)
    worker.join(timeout=120)
    assert done.is_set()
    lines = reader.lines()
    reader.close()
    vdrs = [pynmea2.parse(x, check=True) for x in lines]
    # 40 minutes at 400 x: a VDR each data second once the current is estimated (the slice starts with
    # no calibration, so its current stays 'converging': sent here because the config asks for it)
    assert len(vdrs) > 100
    published = {(m.payload["set_deg"], m.payload["drift_kn"]) for m in keep.messages
                 if m.topic.endswith("/current") and m.payload.get("quality") in ("valid", "degraded", "converging")}
    for v in vdrs:
        assert any(abs(v.deg_t - s) < 0.06 and abs(v.current - d) < 0.006 for s, d in published)
    # in the stream, 4 kn toward about 047 (recorded_runs/README.md)
    assert any(v.current > 3.0 and 20 < v.deg_t < 80 for v in vdrs)


def _connect(port: int):
    try:
        socket.create_connection(("127.0.0.1", port), timeout=0.5).close()
        return True
    except OSError:
        return None
