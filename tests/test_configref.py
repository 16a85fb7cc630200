"""``offwatch config``: the key reference comes from the parameter tables and matches what the
loader accepts, and the README carries it unchanged.

Outside reference: TOML v1.0.0 (the listing's defaults are written as TOML values, so a line of
it pasted into a config file reads back as the same value: checked with the standard library's
tomllib, which implements TOML 1.0).
"""

from __future__ import annotations

import dataclasses
import re
import tomllib

import pytest

from daemon.commands.cli import main
from daemon.commands.configref import markdown_lines, sections, text_lines
from daemon.core.config import build_config
from daemon.errors import ConfigError
from estimators.params import describe
from tests.shared import REPO

def _table(title: str, key: str, value) -> dict:
    if title != "inputs.NAME":
        return {title: {key: value}}
    # an input table is whole only with its kind's own key: a serial port with its device
    serial = {"kind": "serial", "device": "/dev/serial/by-id/usb-gps"}
    whole = {"kind": "tcp", "host": "192.168.4.1"} if key == "device" else serial
    return {"inputs": {"feed": {**whole, key: value}}}


def test_every_listed_key_is_accepted_with_its_listed_default():
    # GIVEN each 'key = default' line of the listing, read as TOML (tomllib)
    current = None
    seen = 0
    for line in text_lines():
        if m := re.fullmatch(r"\[(.+)\]", line):
            current = m.group(1)
            continue
        if current is None or not re.match(r"\w+ = ", line):
            continue
        key, _, rest = line.partition(" = ")
        value = tomllib.loads(f"v = {rest.split('  [')[0]}")["v"]
        # WHEN it is the whole config THEN the loader takes it and holds exactly that value
        cfg = build_config(_table(current, key, value))
        obj = cfg.inputs["feed"] if current == "inputs.NAME" else (
            getattr(cfg, current) if current in ("installation", "mqtt", "state") else cfg.section(current))
        got = getattr(obj, key)
        assert (list(got) if isinstance(got, tuple) else got) == value, (current, key)
        seen += 1
    assert seen == sum(len(describe(cls)) for cls in sections().values())


def test_the_listed_ranges_are_the_ones_the_loader_enforces():
    for title, cls in sections().items():
        for row in describe(cls):
            if row.get("hi") is None or isinstance(row["default"], bool):
                continue
            above = row["hi"] + (1 if isinstance(row["default"], int) else 1e-6 * max(1.0, abs(row["hi"])))
            with pytest.raises(ConfigError, match=rf"{row['name']} = .*expected at most"):
                build_config(_table(title, row["name"], above))


def test_the_readme_carries_the_reference_as_the_command_prints_it(capsys):
    assert main(["config", "--markdown"]) == 0
    printed = capsys.readouterr().out.rstrip("\n")
    assert printed == "\n".join(markdown_lines())
    readme = (REPO / "README.md").read_text(encoding="utf-8")
    block = readme.split("<!-- config-keys:start -->\n", 1)[1].split("\n<!-- config-keys:end -->", 1)[0]
    assert block == printed, "README out of date: paste `offwatch config --markdown` between the markers"


def test_check_names_the_key_and_says_valid_when_it_is(tmp_path, capsys):
    good, bad = tmp_path / "good.toml", tmp_path / "bad.toml"
    good.write_text('[mqtt]\nurl = "mqtt://127.0.0.1:1883"\n[inputs.gps]\nkind = "serial"\n'
                    'device = "/dev/serial/by-id/usb-gps"\n')
    bad.write_text("[pressure]\nearly_window_s = -5.0\n")
    assert main(["config", "--check", str(good)]) == 0
    assert "valid; 1 input(s), MQTT to mqtt://127.0.0.1:1883" in capsys.readouterr().out
    assert main(["config", "--check", str(bad)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "[pressure] early_window_s = -5.0: expected at least" in err[0]


def test_every_section_type_is_a_frozen_table_of_described_parameters():
    for cls in sections().values():
        assert dataclasses.is_dataclass(cls) and cls.__dataclass_params__.frozen
        assert all("unit" in f.metadata for f in dataclasses.fields(cls)), cls
