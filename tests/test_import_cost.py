"""Import only what runs: the service does not load scipy.stats or filterpy.

Both cost about 45 MB of resident memory and a second at start on the build
machine (figures in the README, measured by ``python -m tools.bench.startup``);
the service uses neither. The smoother (reports) still uses filterpy.
"""

from __future__ import annotations

import json
import subprocess
import sys

import pytest
from scipy.stats import chi2

from estimators.current import chi2_quantile_2dof

SERVICE_MODULES = ["daemon.commands.service", "daemon.commands.replay", "daemon.commands.cli"]


def test_the_service_loads_neither_scipy_stats_nor_filterpy():
    code = ("import importlib, json, sys\n"
            f"for n in {SERVICE_MODULES!r}: importlib.import_module(n)\n"
            "print(json.dumps(sorted(sys.modules)))")
    loaded = set(json.loads(subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                                           check=True).stdout))
    heavy = sorted(m for m in loaded if m.split(".")[0] == "filterpy" or m.startswith("scipy.stats"))
    assert heavy == []


@pytest.mark.parametrize("p", [0.5, 0.9, 0.95, 0.99, 0.9973, 0.999, 1e-6])
def test_the_2_dof_chi_square_quantile_matches_scipy(p):
    # reference library: scipy.stats.chi2.ppf
    assert chi2_quantile_2dof(p) == pytest.approx(float(chi2.ppf(p, 2)), rel=1e-12)
