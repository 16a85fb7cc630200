"""Shared fixtures: a Mosquitto broker of the test's own on a free loopback port, the demo
passage replayed once, a short simulated passage. Helpers live in ``tests/helpers.py``."""

from __future__ import annotations

import os
from collections.abc import Iterator
from pathlib import Path

import pytest

from tests.helpers import MOSQUITTO, PREFIX, Mosquitto


@pytest.fixture
def mosquitto_broker(tmp_path: Path) -> Iterator[Mosquitto]:
    if not Path(MOSQUITTO).exists():
        if os.environ.get("CI") == "true":
            pytest.fail("mosquitto is not installed; under CI .ci/run installs it")
        pytest.skip("mosquitto is not installed (apt install mosquitto)")
    workdir = tmp_path / "mosquitto"
    workdir.mkdir()
    broker = Mosquitto(workdir)
    broker.start()
    yield broker
    broker.stop()


@pytest.fixture
def mosquitto(mosquitto_broker: Mosquitto) -> Iterator[Mosquitto]:
    """The broker; unpack as ``host, port = mosquitto``, or call ``mosquitto.restart()``."""
    yield mosquitto_broker


class DemoReplay:
    """The demo passage replayed once for the whole session (about a minute)."""

    def __init__(self, tmp: Path) -> None:
        from daemon.commands.demo import demo_files
        from daemon.outlets.jsonl import encode_line
        from daemon.core.config import load_config
        from daemon.commands.replay import run_replay

        files, cfg = demo_files()
        self.path = Path(files[0])
        from tests.helpers import Keep

        keep = Keep()
        self.summary = run_replay(files, load_config(cfg), extra_sinks=[keep], progress=False)
        self.messages = keep.messages
        self.lines = [encode_line(m) for m in self.messages]


@pytest.fixture(scope="session")
def demo_replay(tmp_path_factory) -> DemoReplay:
    """The committed demo passage through the whole pipeline, with the demo's own config."""
    return DemoReplay(tmp_path_factory.mktemp("demo"))


@pytest.fixture(scope="module")
def short_passage(tmp_path_factory) -> dict:
    """A short simulated passage (30 min; invented boat and water): a 3-kn current, a +3 °C front, a
    12 hPa/h pressure fall and a 40-s GNSS outage, so it makes every state topic, an event and several
    alert changes. The NMEA file, a config for it (prefix ``PREFIX``) and its start time."""
    from tools.simulator import (Front, Ocean, PressureField, Scenario, SeaTemperatureField, SensorSpec, Steer,
                                  SteadyCurrent, WindField, simulate)
    from tools.simulator.nmea_writer import WriterOptions, write_nmea
    from tools.simulator.scenarios import MIN, along, utc

    t0, lat, lon = utc(2026, 6, 1, 6), 43.3, -30.7
    front = Front(*along(lat, lon, 90.0, 1.6), along_deg=0.0, delta_c=3.0, width_nm=0.3)
    ocean = Ocean(currents=(SteadyCurrent(30.0, 3.0),), sea_temp=SeaTemperatureField(15.0, lat, lon, fronts=(front,)),
                  pressure=PressureField(((t0, 1015.0), (t0 + 60 * MIN, 1003.0))),
                  wind=WindField(((t0, 220.0, 12.0),)))
    scenario = Scenario(
        name="mqtt_end_to_end", start_utc=t0, duration_s=30 * MIN, start_lat=lat, start_lon=lon,
        helm=(Steer(90.0, 6.0, 8 * MIN), Steer(180.0, 6.0, 8 * MIN), Steer(90.0, 6.0, 14 * MIN)), ocean=ocean,
        sensors=SensorSpec(heading_hz=1.0, gnss_outages=((t0 + 4 * MIN, t0 + 4 * MIN + 40),)))
    d = tmp_path_factory.mktemp("passage")
    nmea = d / "short.nmea"
    write_nmea(simulate(scenario, 7), nmea, WriterOptions())
    cfg = d / "replay.toml"
    # the early pressure-fall rule over its shortest window (15 min) so half an hour shows it;
    # gnss_lost counts as gone 5 s after fixes return
    cfg.write_text(f'[mqtt]\nprefix = "{PREFIX}"\n\n[pressure]\nearly_window_s = 900.0\n\n'
                   "[alerts]\nclear_after_by_id = { gnss_lost = 5.0 }\n")
    return {"nmea": nmea, "cfg": cfg, "t0": t0}
