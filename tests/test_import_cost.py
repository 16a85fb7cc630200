"""Import only what runs: the service does not load scipy.stats or filterpy.

Both cost about 45 MB of resident memory and a second at start on the build
machine (figures in the README, measured by ``python -m tools.bench.startup``);
the service uses neither. The smoother (reports) still uses filterpy.
A config is checked, and a bad one refused, before numpy and the filters are
loaded: the parameter tables are plain dataclasses (figures from
``python -m tools.bench.live``).
"""

from __future__ import annotations

import json
import subprocess
import sys

import pytest
from scipy.stats import chi2

from estimators.fusion import chi2_quantile

SERVICE_MODULES = ["daemon.commands.service", "daemon.commands.replay", "daemon.commands.cli"]


def test_the_service_loads_neither_scipy_stats_nor_filterpy():
    code = ("import importlib, json, sys\n"
            f"for n in {SERVICE_MODULES!r}: importlib.import_module(n)\n"
            "print(json.dumps(sorted(sys.modules)))")
    loaded = set(json.loads(subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                                           check=True).stdout))
    heavy = sorted(m for m in loaded if m.split(".")[0] == "filterpy" or m.startswith("scipy.stats"))
    assert heavy == []


NUMERIC = ("numpy", "scipy", "filterpy")
BAD_KEY = "q_curent"  # misspelt q_current: the [current] table is the one whose filter needs numpy


def _cli_in_a_fresh_process(args: list[str]) -> tuple[int, str, str, list[str]]:
    """Run the command line in a new interpreter: its status, output, errors and the modules it loaded."""
    code = ("import json, sys\n"
            "from daemon.commands.cli import main\n"
            f"status = main({args!r})\n"
            "print(json.dumps([status, sorted(sys.modules)]))")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    *out, last = done.stdout.splitlines()
    status, loaded = json.loads(last)
    return status, "\n".join(out), done.stderr, sorted(m for m in loaded if m.split(".")[0] in NUMERIC)


@pytest.mark.parametrize("command", [["config", "--check"], ["run", "--config"]])
@pytest.mark.parametrize("section", ["current", "sea_state", "mqtt"])
def test_a_bad_config_is_refused_before_numpy_is_loaded(tmp_path, command, section):
    cfg = tmp_path / "bad.toml"
    cfg.write_text(f'[inputs.mux]\nkind = "tcp"\nhost = "127.0.0.1"\n\n[{section}]\n{BAD_KEY} = 0.01\n',
                   encoding="utf-8")
    status, _, errors, numeric = _cli_in_a_fresh_process([*command, str(cfg)])
    assert status == 2 and BAD_KEY in errors  # refused, naming the key
    assert numeric == []


def test_a_valid_config_is_checked_without_numpy(tmp_path):
    cfg = tmp_path / "good.toml"
    cfg.write_text('[inputs.mux]\nkind = "tcp"\nhost = "127.0.0.1"\n\n[current]\nlog_sigma_kn = 0.2\n',
                   encoding="utf-8")
    status, out, _, numeric = _cli_in_a_fresh_process(["config", "--check", str(cfg)])
    assert status == 0 and "valid" in out
    assert numeric == []


@pytest.mark.parametrize("p", [0.5, 0.9, 0.95, 0.99, 0.9973, 0.999, 1e-6])
@pytest.mark.parametrize("dof", [1, 2])
def test_the_1_and_2_dof_chi_square_quantiles_are_exact(p, dof):
    # reference library: scipy.stats.chi2.ppf (the gates use 2 dof, the water's walk interval 1)
    assert chi2_quantile(p, dof) == pytest.approx(float(chi2.ppf(p, dof)), rel=1e-12)
