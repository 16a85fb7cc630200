"""The demo-edge benchmark's own arithmetic (tools/bench/demo_edge.py): where it finds the edges and
how it counts. Its figures go to the README, never into a test."""

from __future__ import annotations

import math

import numpy as np
import pytest

from tools.bench.demo_edge import Truth, edge_figures, edge_times, read_truth


def _clock_s(truth: Truth, hhmmss: str) -> float:
    day = float(truth.t_s[0]) - float(truth.t_s[0]) % 86400.0
    h, m, s = (int(x) for x in hhmmss.split(":"))
    return day + 3600 * h + 60 * m + s


def test_edges_are_where_the_scenario_says():
    # recorded_runs/README.md, "What happens when": mid-edge 07:18:27 (near) and 09:11:54 (far),
    # as the scenario was written; the fastest change lies within the 7.5-minute edge, near its middle
    truth = read_truth()
    near, far = edge_times(truth)
    assert abs(near - _clock_s(truth, "07:18:27")) < 60.0
    assert abs(far - _clock_s(truth, "09:11:54")) < 60.0


def _payload(e: float, n: float, sigma_kn: float, quality: str) -> dict:
    drift = math.hypot(e, n)
    return {"east_kn": e, "north_kn": n, "drift_kn": drift, "drift_sigma_kn": sigma_kn,
            "set_sigma_deg": math.degrees(sigma_kn / drift), "quality": quality}


def test_counts_an_estimate_off_by_a_knot_as_wrong_and_the_truth_as_right():
    t = np.arange(0.0, 3600.0, 5.0)
    truth = Truth(t, np.full_like(t, 2.0), np.full_like(t, 1.0))
    right = [(s, _payload(2.0, 1.0, 0.1, "valid")) for s in np.arange(0.0, 3600.0, 1.0)]
    off = [(s, _payload(3.0, 1.0, 0.1, "valid")) for s in np.arange(0.0, 3600.0, 1.0)]
    f_right = edge_figures(right, truth, 1800.0, half_window_s=600.0)
    f_off = edge_figures(off, truth, 1800.0, half_window_s=600.0)
    assert f_right.rms_kn == pytest.approx(0.0, abs=1e-12) and f_right.valid_wrong_s == 0.0
    assert f_off.rms_kn == pytest.approx(1.0)
    assert f_off.valid_wrong_s == pytest.approx(1200.0, abs=1.0) == f_off.valid_s
    # the same error with a sigma that covers it (1 kn off at 0.5 kn sigma is 2 sigma) is not "wrong"
    wide = [(s, _payload(3.0, 1.0, 0.5, "valid")) for s in np.arange(0.0, 3600.0, 1.0)]
    assert edge_figures(wide, truth, 1800.0, half_window_s=600.0).valid_wrong_s == 0.0
