"""The split that the design rests on: estimators are pure, the daemon never loads plotting code."""

from __future__ import annotations

import json
import pkgutil
import subprocess
import sys

import daemon
import estimators

IO_MODULES = ("socket", "sqlite3", "serial", "paho", "daemon", "matplotlib", "asyncio", "http", "urllib.request")


def _modules_after_import(names: list[str]) -> set[str]:
    code = ("import importlib, json, sys\n"
            f"for n in {names!r}: importlib.import_module(n)\n"
            "print(json.dumps(sorted(sys.modules)))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    return set(json.loads(out.stdout))


def _all(pkg) -> list[str]:
    return [f"{pkg.__name__}.{m.name}" for m in pkgutil.walk_packages(pkg.__path__) if not m.name.startswith("_")]


def test_estimators_bring_no_io_module_along():
    loaded = _modules_after_import(_all(estimators))
    bad = sorted(m for m in loaded if any(m == io or m.startswith(io + ".") for io in IO_MODULES))
    assert bad == []


def test_the_daemon_never_loads_plotting_code():
    names = [n for n in _all(daemon) if not n.startswith("daemon.bench")]
    loaded = _modules_after_import(names)
    assert not any(m == "matplotlib" or m.startswith("matplotlib.") for m in loaded)
