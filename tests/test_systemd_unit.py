"""The systemd unit and the sample config that ship in systemd/.

Key names and meanings from systemd's manual pages systemd.service(5),
systemd.exec(5) and systemd.unit(5) (systemd 252).
"""

from __future__ import annotations

import shutil
import subprocess
from collections import defaultdict
from pathlib import Path

import pytest

UNIT = Path(__file__).resolve().parents[1] / "systemd" / "offwatch.service"
SAMPLE = UNIT.with_name("offwatch.toml")


def parse_unit(text: str) -> dict[str, dict[str, list[str]]]:
    """Sections -> key -> every value given (a key may repeat, as SystemCallFilter= does)."""
    out: dict[str, dict[str, list[str]]] = defaultdict(lambda: defaultdict(list))
    section = None
    for raw in text.splitlines():
        line = raw.strip()
        if not line or line[0] in "#;":
            continue
        if line.startswith("[") and line.endswith("]"):
            section = line[1:-1]
            continue
        assert section is not None, f"key outside a section: {line}"
        key, sep, value = line.partition("=")
        assert sep, f"not a key=value line: {line}"
        out[section][key.strip()].append(value.strip())
    return out


@pytest.fixture(scope="module")
def unit():
    return parse_unit(UNIT.read_text())


def one(unit, section: str, key: str) -> str:
    values = unit[section][key]
    assert values, f"[{section}] {key}= is missing"
    return values[-1]


def test_service_is_notify_with_a_watchdog_and_restarts(unit):
    assert one(unit, "Service", "Type") == "notify"
    assert one(unit, "Service", "WatchdogSec") == "30"
    assert one(unit, "Service", "Restart") == "on-failure"
    exec_start = one(unit, "Service", "ExecStart").split()
    assert exec_start[0].endswith("/venv/bin/offwatch") and exec_start[1] == "run"
    assert exec_start[2:] == ["--config", "/etc/offwatch/offwatch.toml"]
    assert one(unit, "Install", "WantedBy") == "multi-user.target"


def test_dedicated_user_in_the_serial_group_with_a_state_directory(unit):
    assert one(unit, "Service", "User") == "offwatch"
    assert "dialout" in one(unit, "Service", "SupplementaryGroups").split()
    assert one(unit, "Service", "StateDirectory") == "offwatch"


def test_hardening_that_keeps_serial_ports_visible(unit):
    service = unit["Service"]
    for key in ("NoNewPrivileges", "ProtectHome", "PrivateTmp", "ProtectKernelTunables",
                "ProtectKernelModules", "ProtectKernelLogs", "ProtectControlGroups"):
        assert one(unit, "Service", key) == "yes", key
    assert one(unit, "Service", "ProtectSystem") == "strict"
    assert set(one(unit, "Service", "RestrictAddressFamilies").split()) == {"AF_UNIX", "AF_INET", "AF_INET6"}
    # PrivateDevices= hides /dev/ttyUSB* and /dev/serial/by-id; DeviceAllow= misses late USB adapters
    assert "PrivateDevices" not in service
    assert "DeviceAllow" not in service
    assert "DevicePolicy" not in service


def test_start_limits_sit_in_the_unit_section(unit):
    # systemd.unit(5): StartLimitIntervalSec= and StartLimitBurst= belong to [Unit]
    assert "StartLimitIntervalSec" not in unit["Service"]
    assert "StartLimitBurst" in unit["Unit"]


@pytest.mark.skipif(shutil.which("systemd-analyze") is None, reason="systemd-analyze is not installed")
def test_systemd_analyze_verify_accepts_the_unit(tmp_path):
    # GIVEN the unit with ExecStart pointing at an executable that exists here
    text = UNIT.read_text().replace("/opt/offwatch/venv/bin/offwatch", shutil.which("true") or "/bin/true")
    copy = tmp_path / "offwatch.service"
    copy.write_text(text)
    result = subprocess.run(["systemd-analyze", "verify", str(copy)], capture_output=True, text=True, timeout=60)
    # THEN no unknown key, bad value or misplaced setting is reported
    complaints = [ln for ln in (result.stdout + result.stderr).splitlines() if "offwatch.service" in ln]
    assert complaints == [] and result.returncode == 0, result.stdout + result.stderr


def test_sample_config_loads():
    from daemon.core.config import load_config

    cfg = load_config(SAMPLE)
    assert cfg.mqtt.url.startswith("mqtt://")
    assert all(c.device.startswith("/dev/serial/by-id/") for c in cfg.inputs.values() if c.kind == "serial")


def test_documentation_points_at_files_that_exist_where_install_puts_the_code(unit):
    # systemd.unit(5): Documentation= takes space-separated URIs (http, https, file, info, man)
    install = (UNIT.parent / "INSTALL.md").read_text()
    uris = one(unit, "Unit", "Documentation").split()
    assert uris
    for uri in uris:
        assert uri.startswith("file:///opt/offwatch/src/"), uri
        # INSTALL.md puts the code in /opt/offwatch/src: the file is the repository's own
        assert (UNIT.parents[1] / uri.removeprefix("file:///opt/offwatch/src/")).is_file(), uri
    assert "git clone" in install and "/opt/offwatch/src" in install and "not on PyPI" in install
    assert "pip install /opt/offwatch/src" in install


def test_a_config_without_inputs_suggests_a_stable_serial_name(tmp_path):
    from argparse import Namespace

    from daemon.commands.service import run_command
    from daemon.errors import ConfigError

    cfg = tmp_path / "empty.toml"
    cfg.write_text("[installation]\nbarometer_height_m = 2.0\n")
    with pytest.raises(ConfigError) as e:
        run_command(Namespace(config=str(cfg), mqtt=None))
    assert "/dev/serial/by-id/" in str(e.value) and "ttyUSB" not in str(e.value)
