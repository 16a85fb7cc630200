"""The hand-written 2 x 4 fusion step against an outside reference (filterpy's generic EKF update),
the shared fusion health, and the windowed NIS test's bounds against the chi-square distribution."""

from __future__ import annotations

import math

import numpy as np
import pytest
from filterpy.kalman import ExtendedKalmanFilter
from scipy.stats import chi2

from estimators.current import IK, CurrentEstimator, CurrentParams, WaterInputs, jacobian
from estimators.current.fusion import fuse, fuse_rows, joseph_with_gain_rows
from estimators.fusion import FusionHealth, FusionReport, WindowedNis
from estimators.samples import Fix, Heading, Pressure, WaterSpeed
from estimators.pressure import PressureTendency


def random_case(rng: np.random.Generator):
    """A random state, SPD covariance, current-triangle Jacobian, SPD R and innovation."""
    x = np.array([[rng.normal(0, 1)], [rng.normal(0, 1)], [rng.uniform(0.9, 1.1)], [rng.normal(0, 0.05)]])
    A = rng.normal(0, 1, (4, 4))
    P = A @ A.T * rng.uniform(0.001, 0.5) + 1e-4 * np.eye(4)
    s, th, k = rng.uniform(0.5, 8.0), rng.uniform(0, 2 * math.pi), float(x[2, 0])
    H = np.array([[1.0, 0.0, s * math.sin(th), k * s * math.cos(th)],
                  [0.0, 1.0, s * math.cos(th), -k * s * math.sin(th)]])
    B = rng.normal(0, 0.2, (2, 2))
    R = B @ B.T + 0.01 * np.eye(2)
    y = rng.normal(0, 0.3, (2, 1))
    return x, P, H, R, y


def filterpy_update(x, P, H, R, y):
    """filterpy's generic EKF update (Joseph form), given h(x) = z - y so that its innovation is y."""
    ekf = ExtendedKalmanFilter(dim_x=4, dim_z=2)
    ekf.x, ekf.P, ekf.R = x.copy(), P.copy(), R.copy()
    z = np.array([[3.0], [-2.0]])
    ekf.update(z, HJacobian=lambda _x: H, Hx=lambda _x: z - y)
    nis = (ekf.y.T @ np.linalg.inv(ekf.S) @ ekf.y).item()
    return ekf.x, ekf.P, nis


@pytest.mark.parametrize("seed", range(200))
def test_the_2x4_update_matches_filterpys_generic_ekf_update(seed):
    # GIVEN a random state, covariance, Jacobian, R and innovation
    x, P, H, R, y = random_case(np.random.default_rng(seed))
    # WHEN both update (no gate: an infinite one)
    ours = fuse(x, P, y, H, R, math.inf)
    x_ref, P_ref, nis_ref = filterpy_update(x, P, H, R, y)
    # THEN the state, the covariance and the NIS agree to rounding (outside reference: filterpy 1.4)
    assert ours.fused
    np.testing.assert_allclose(ours.x, x_ref, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(ours.P, P_ref, rtol=1e-8, atol=1e-12)
    assert ours.nis == pytest.approx(nis_ref, rel=1e-9)
    # and the prior is not changed in place
    assert ours.x is not x and ours.P is not P


@pytest.mark.parametrize("seed", range(50))
def test_the_step_in_plain_floats_matches_filterpys_update_and_carries_a_covariance_by_its_gain(seed):
    # GIVEN a random case as the filter's own step hands it over: x, P, H and R as plain rows
    x, P, H, R, y = random_case(np.random.default_rng(1000 + seed))
    h0, h1 = H.tolist()
    up = fuse_rows(x, P, x[:, 0].tolist(), P.tolist(), float(y[0, 0]), float(y[1, 0]), h0, h1, R.tolist(), math.inf)
    # THEN as filterpy's generic update (outside reference: filterpy 1.4)
    x_ref, P_ref, nis_ref = filterpy_update(x, P, H, R, y)
    assert up.fused and up.nis == pytest.approx(nis_ref, rel=1e-9)
    np.testing.assert_allclose(up.x, x_ref, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(up.P, P_ref, rtol=1e-8, atol=1e-12)
    # AND another covariance carried with that gain is (I - K H) Q (I - K H)' + K R K', in numpy's matrices
    B = np.random.default_rng(seed).normal(0, 0.3, (4, 4))
    Q = B @ B.T + 1e-3 * np.eye(4)
    K = np.array(up.gain)
    A = np.eye(4) - K @ H
    carried = joseph_with_gain_rows(Q.tolist(), up.gain, h0, h1, R.tolist())
    np.testing.assert_allclose(carried, A @ Q @ A.T + K @ R @ K.T, rtol=1e-9, atol=1e-12)


def test_consider_states_keep_their_estimate_and_a_covariance_that_is_still_the_joseph_form():
    x, P, H, R, y = random_case(np.random.default_rng(7))
    up = fuse(x, P, y, H, R, math.inf, consider_from=IK)
    # THEN k and d do not move; their covariance with the current does, by the Joseph form with K's rows zeroed
    np.testing.assert_array_equal(up.x[IK:], x[IK:])
    K = P @ H.T @ np.linalg.inv(H @ P @ H.T + R)
    K[IK:, :] = 0.0
    A = np.eye(4) - K @ H
    np.testing.assert_allclose(up.P, A @ P @ A.T + K @ R @ K.T, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(up.P[IK:, IK:], P[IK:, IK:], rtol=1e-9)  # a consider state's variance is not reduced


def test_gate_rejects_and_the_guard_stops_non_finite_input():
    x, P, H, R, y = random_case(np.random.default_rng(3))
    gate = float(chi2.ppf(0.9995, 2))
    far = fuse(x, P, 100.0 * np.ones((2, 1)), H, R, gate)
    assert not far.fused and far.reason == "gate" and far.nis > gate and far.x is x
    bad = fuse(x, P, np.array([[math.nan], [0.0]]), H, R, gate)
    assert not bad.fused and bad.reason == "numerical guard" and math.isnan(bad.nis)


def test_fusion_health_counts_by_the_report():
    h = FusionHealth()
    h.count(FusionReport(1.0, (0.1, 0.1), (0.01, 0.01), 2.0, 15.0, True))
    h.count(FusionReport(2.0, (3.0, 3.0), (0.01, 0.01), 900.0, 15.0, False, "gate"))
    h.count(FusionReport(3.0, (math.nan, 0.0), (0.01, 0.01), math.nan, 15.0, False, "numerical guard"))
    assert (h.fused, h.rejected, h.faults) == (1, 1, 1)
    assert h.as_dict()["last_nis"] == 900.0


def test_windowed_nis_bounds_hold_white_chi2_and_catch_a_variance_twice_the_filters():
    # GIVEN a 60-step window of a 2-dof NIS at 99 % (bounds from scipy's chi-square, Bar-Shalom 5.4.2)
    w = WindowedNis(60, 2, 0.99)
    # (the Wilson-Hilferty approximation the service uses, against scipy's exact quantile)
    assert w.low == pytest.approx(chi2.ppf(0.005, 120) / 60, rel=2e-3)
    assert w.high == pytest.approx(chi2.ppf(0.995, 120) / 60, rel=2e-3)
    rng = np.random.default_rng(11)
    # WHEN innovations are what the filter expects, THEN disjoint windows leave the bounds about 1 % of the time
    outs = 0
    for i in range(400):
        ww = WindowedNis(60, 2, 0.99)
        for nis in rng.chisquare(2, 60):
            ww.add(float(nis))
        outs += ww.verdict() != "ok"
    assert outs / 400 < 0.04
    # and innovations with twice the variance the filter assumes leave them almost always
    high = 0
    for i in range(100):
        ww = WindowedNis(60, 2, 0.99)
        for nis in 2.0 * rng.chisquare(2, 60):
            ww.add(float(nis))
        high += ww.verdict() == "high"
    assert high >= 95


def test_each_fusing_estimator_reports_its_steps_health():
    # GIVEN the current and the pressure estimators fed a steady boat and a steady barometer
    cur, prs = CurrentEstimator(CurrentParams()), PressureTendency()
    from estimators.runner import run
    samples = []
    for i in range(120):
        t = 1000.0 + i
        samples += [Heading(t + 0.1, 90.0), WaterSpeed(t + 0.2, 5.0), Fix(t + 0.5, 50.0, -5.0, 5.5, 90.0, 0.9)]
        samples.append(Pressure(t + 0.3, 1012.0))
    list(run(cur, [s for s in samples if not isinstance(s, Pressure)]))
    list(run(prs, [s for s in samples if isinstance(s, Pressure)]))
    # THEN each names its step with the same fields
    gv = cur.fusion_health()["ground_velocity"]
    baro = prs.fusion_health()["barometer"]
    for h in (gv, baro):
        assert set(h) >= {"fused", "rejected", "faults", "resets", "last_nis"}
    assert gv["fused"] > 100 and gv["last_nis"] is not None
    assert baro["fused"] > 100


def test_the_status_topic_carries_each_filters_fusion_health():
    from daemon.core.pipeline import Pipeline
    from daemon.core.readings import Reading
    from tests.helpers import Keep
    from tests.helpers import FakeAlerts
    # GIVEN a pipeline with the current estimator
    sink = Keep()
    pipe = Pipeline([CurrentEstimator(CurrentParams())], [sink], FakeAlerts(), prefix="boat")
    # WHEN 25 s of a steady boat pass
    for i in range(25):
        t = 1000.0 + i
        for s in (Heading(t + 0.1, 90.0), WaterSpeed(t + 0.2, 5.0), Fix(t + 0.5, 50.0, -5.0, 5.5, 90.0, 0.9)):
            pipe.feed(Reading("nav", s, s.t_s, "X"))
    # THEN the status names the ground-velocity step's fused/rejected counts and last NIS
    status = [m for m in sink.messages if m.kind == "status"][-1].payload
    gv = status["fusion"]["current"]["ground_velocity"]
    assert gv["fused"] >= 10 and gv["rejected"] == 0 and gv["last_nis"] is not None


def test_quality_is_degraded_with_a_reason_while_the_innovations_are_larger_than_the_model_says():
    from estimators.runner import run
    from tests.synth import synth_passage, tacking_legs
    # GIVEN the same tacking passage read by a GNSS as noisy as configured, and by one four times noisier
    qualities = {}
    for gnss_sigma in (0.1, 0.4):
        syn = synth_passage(5, 2400, tacking_legs(2400, 300), gnss_sigma=gnss_sigma)
        est = CurrentEstimator(CurrentParams(gnss_velocity_sigma_kn=0.1, noise_correlation_s=0.5, heading_correlation_s=0.5,
                                             log_correlated_sigma_kn=0.0, heading_correlated_sigma_deg=0.0))
        # WHEN the estimator runs, collect the published quality and its reason after 20 minutes
        pubs = [o.payload for s, outs in run(est, syn.samples) for o in outs
                if getattr(o, "topic", None) == "current" and o.t_s - syn.samples[0].t_s > 1200]
        qualities[gnss_sigma] = pubs
    # THEN with the configured noise the windowed NIS test never degrades it
    assert not any(p["quality"] == "degraded" for p in qualities[0.1])
    # and with four times the noise it is degraded most of the time, saying why
    noisy = [p for p in qualities[0.4] if p["quality"] == "degraded"]
    assert len(noisy) > 0.8 * len(qualities[0.4])
    assert all("NIS" in p["quality_reason"] for p in noisy)


def test_quality_is_degraded_while_the_change_detector_has_raised_the_process_noise():
    from estimators.runner import run
    # GIVEN a steady boat (log 5 kn on 090) whose ground speed jumps from 5.5 to 6.3 kn after 20 minutes:
    # a current of 0.5 kn east becoming 1.3 kn at once, far faster than the model's walk
    samples = []
    for i in range(1800):
        t = 1000.0 + i
        sog = 5.5 if i < 1200 else 6.3
        samples += [Heading(t + 0.1, 90.0), WaterSpeed(t + 0.2, 5.0), Fix(t + 0.5, 50.0, -5.0, sog, 90.0, 0.9)]
    est = CurrentEstimator(CurrentParams())
    pubs = [(o.t_s, o.payload) for s, outs in run(est, samples) for o in outs if getattr(o, "topic", None) == "current"]
    before = [p for t, p in pubs if 1600.0 < t < 2200.0]
    after = [p for t, p in pubs if 2200.0 <= t < 2300.0]
    # THEN before the jump nothing says the current changes faster than its model
    assert before and not any(p["q_inflation"] > 1.0 or p["quality"] == "degraded" for p in before)
    # ... and within 100 s after it the quality is 'degraded', saying why, with the process noise raised
    raised = [p for p in after if p["quality"] == "degraded" and "the current is changing fast" in p["quality_reason"]]
    assert raised and all(p["q_inflation"] > 1.0 for p in raised)
    # ... until the inflation has decayed back to 1 (minutes later), when it no longer says so
    last = pubs[-1][1]
    assert last["q_inflation"] == 1.0 and "the current is changing fast" not in last["quality_reason"]


def test_the_jacobian_is_the_measurement_functions_derivative():
    """H against central differences of the measurement function written out here from its definition,
    h(x) = c + k s u(psi + d), u(a) = (sin a, cos a) east and north (the current triangle; no heel, so no
    leeway), at the low-passed inputs the Jacobian is taken at."""
    rng = np.random.default_rng(7)
    p = CurrentParams()
    for _ in range(50):
        s, psi = float(rng.uniform(1.0, 9.0)), float(rng.uniform(0.0, 360.0))
        x = np.array([rng.normal(0, 1), rng.normal(0, 1), rng.uniform(0.9, 1.1), math.radians(rng.normal(0, 3))])
        w = WaterInputs(speed_kn=s, heading_deg=psi, heel_deg=None, slow_speed_kn=s, slow_heading_deg=psi)

        def h(v: np.ndarray) -> np.ndarray:
            a = math.radians(psi) + v[3]
            return np.array([v[0] + v[2] * s * math.sin(a), v[1] + v[2] * s * math.cos(a)])

        step = 1e-6
        numeric = np.column_stack([(h(x + step * e) - h(x - step * e)) / (2 * step) for e in np.eye(4)])
        np.testing.assert_allclose(jacobian(p, w, float(x[2]), float(x[3])), numeric, atol=1e-6)
