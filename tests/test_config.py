"""The config: defaults need no file; every mistake is one line naming the key and the fix."""

from __future__ import annotations

import subprocess
import sys

import pytest

from daemon.core.config import build_config, load_config
from daemon.errors import ConfigError


def test_defaults_need_no_file():
    cfg = load_config(None)
    assert cfg.installation.heading_sensor == "auto"
    assert cfg.mqtt.prefix == "offwatch"
    assert cfg.inputs == {}


def test_a_full_config_is_read_and_typed(tmp_path):
    p = tmp_path / "boat.toml"
    p.write_text("""
[installation]
barometer_height_m = 3
variation_source = "model"
[inputs.gps]
kind = "serial"
device = "/dev/ttyUSB0"
baud = 38400
[inputs.mux]
kind = "tcp"
host = "127.0.0.1"
port = 10110
[priority]
fix = ["gps", "mux"]
[mqtt]
url = "mqtt://127.0.0.1:1883"
prefix = "fleet/tern"
""")
    cfg = load_config(p)
    assert cfg.installation.barometer_height_m == 3.0 and isinstance(cfg.installation.barometer_height_m, float)
    assert cfg.inputs["gps"].baud == 38400
    assert cfg.priority == {"fix": ["gps", "mux"]}
    assert cfg.mqtt.prefix == "fleet/tern"


@pytest.mark.parametrize("table, words", [
    ({"installation": {"barometer_hieght_m": 2}}, ["[installation]", "barometer_hieght_m", "barometer_height_m"]),
    ({"installation": {"barometer_height_m": "two"}}, ["barometer_height_m", "expected a number"]),
    ({"installation": {"variation_source": "guess"}}, ["variation_source", "'model'"]),
    ({"installation": {"stw_scale": 3.0}}, ["stw_scale", "at most 1.5"]),
    ({"inputs": {"gps": {"kind": "serial"}}}, ["[inputs.gps]", "device"]),
    ({"inputs": {"gps": {"kind": "serial", "device": "/dev/x", "baud": "fast"}}}, ["baud", "whole number"]),
    ({"priority": {"compass": ["a"]}}, ["[priority]", "compass", "heading"]),
    ({"wibble": {}}, ["[wibble]", "installation"]),
    ({"installation": {"gnss_not_before": "last spring"}}, ["gnss_not_before", "ISO date"]),
])
def test_each_mistake_names_the_key_and_what_is_expected(table, words):
    with pytest.raises(ConfigError) as err:
        build_config(table, "boat.toml")
    msg = str(err.value)
    assert "\n" not in msg
    for w in words:
        assert w in msg


def test_missing_and_broken_files_are_one_line_and_nonzero_exit(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text("[installation\nx=")
    for path, words in ((tmp_path / "none.toml", "not found"), (bad, "not valid TOML")):
        r = subprocess.run([sys.executable, "-m", "daemon", "replay", "x.nmea", "--config", str(path)],
                           capture_output=True, text=True)
        assert r.returncode != 0
        assert words in r.stderr
        assert len(r.stderr.strip().splitlines()) == 1


def test_effective_config_hides_the_password():
    cfg = build_config({"mqtt": {"password": "hunter2"}})
    assert cfg.effective()["mqtt"]["password"] == "***"
