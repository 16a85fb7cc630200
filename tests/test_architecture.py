"""The split that the design rests on: estimators are pure, the daemon never loads plotting code."""

from __future__ import annotations

import json
import pkgutil
import re
import subprocess
import sys
from pathlib import Path

import daemon
import estimators

# Loaded by anything the estimators import (scipy.stats itself pulls in socket, so that one is
# checked in the estimators' own source below instead).
IO_MODULES = ("sqlite3", "serial", "paho", "daemon", "matplotlib", "asyncio", "http.client", "urllib.request")
# Never imported by the estimators' own code.
FORBIDDEN_IN_SOURCE = ("socket", "sqlite3", "serial", "paho", "daemon", "matplotlib", "asyncio", "threading",
                       "time", "subprocess", "os", "io", "pathlib")


def _modules_after_import(names: list[str]) -> set[str]:
    code = ("import importlib, json, sys\n"
            f"for n in {names!r}: importlib.import_module(n)\n"
            "print(json.dumps(sorted(sys.modules)))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    return set(json.loads(out.stdout))


def _all(pkg) -> list[str]:
    return [m.name for m in pkgutil.walk_packages(pkg.__path__, pkg.__name__ + ".")
            if not m.name.rsplit(".", 1)[-1].startswith("_")]


def test_estimators_bring_no_io_module_along():
    loaded = _modules_after_import(_all(estimators))
    bad = sorted(m for m in loaded if any(m == io or m.startswith(io + ".") for io in IO_MODULES))
    assert bad == []


def test_estimators_source_imports_nothing_that_does_io():
    import ast
    from pathlib import Path

    bad = []
    for path in Path(estimators.__path__[0]).rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text())):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.module:
                names = [node.module]
            bad += [f"{path.name}: {n}" for n in names if n.split(".")[0] in FORBIDDEN_IN_SOURCE]
    assert bad == []


def test_the_daemon_never_loads_plotting_code():
    loaded = _modules_after_import(_all(daemon))
    assert not any(m == "matplotlib" or m.startswith("matplotlib.") for m in loaded)


def test_the_daemon_and_estimators_never_load_the_tools():
    # tools/ (simulator, benchmarks) is not installed: nothing that ships may need it
    loaded = _modules_after_import(_all(daemon) + _all(estimators))
    assert sorted(m for m in loaded if m == "tools" or m.startswith("tools.")) == []


def test_the_daemon_is_in_rooms():
    # the tree shows the architecture: no module left loose beside the rooms
    from pathlib import Path

    loose = sorted(p.name for p in Path(daemon.__path__[0]).glob("*.py")
                   if p.name not in ("__init__.py", "__main__.py", "errors.py"))
    assert loose == []


TESTS = Path(__file__).resolve().parent


def _test_sources() -> dict[str, str]:
    return {p.name: p.read_text(encoding="utf-8") for p in sorted(TESTS.glob("*.py"))}


def test_no_test_module_imports_another_or_the_conftest():
    # shared helpers live in tests/helpers.py, tests/shared.py and tests/synth.py; fixtures in conftest.py
    importing = re.compile(r"^\s*(from|import)\s+tests\.(test_\w+|conftest)\b", re.M)
    bad = sorted(f"{name}: {m.group(0).strip()}" for name, text in _test_sources().items()
                 for m in importing.finditer(text))
    assert bad == []


def test_no_test_asserts_on_the_wall_clock():
    # timing figures belong in tools/bench and the README; a wait in a test is only a limit to give up
    clock = re.compile(r"^\s*assert\b.*\b(monotonic|perf_counter|time)\(\)", re.M)
    elapsed = re.compile(r"^\s*assert\b.*\b\w*(elapsed|took|wall)\w*\s*<\s*[0-9.]+", re.M)
    bad = sorted(f"{name}: {m.group(0).strip()}" for name, text in _test_sources().items()
                 for pattern in (clock, elapsed) for m in pattern.finditer(text))
    assert bad == []
