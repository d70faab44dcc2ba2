"""Synthetic IMU truth: physics of the exact motion, and the MEMS noise model's sizes."""

import numpy as np
import pytest

from survey.imu.preint import make_substeps, preintegrate
from survey.imu.synth import MPU9250, imu_truth, make_motion, simulate_imu, superelevation_bank
from survey.synthetic import alignment_curve

G0 = 9.80665  # standard gravity (CGPM 1901)
R = 400.0
E = 0.08  # superelevation; ERA Geometric Design Manual 2002 ch. 8 worked example uses e = 0.08


@pytest.fixture(scope="module")
def truth():
    curve = alignment_curve([("tangent", 100.0, 0.0), ("spiral", 80.0, 1 / R), ("arc", 300.0, 1 / R)])
    return imu_truth(make_motion(curve, 15.0, static_s=5.0, ramp_s=4.0, bank=superelevation_bank(E * R)), 200.0)


def test_at_rest_the_accelerometer_reads_plus_g_up(truth):
    # Specific force of a level body at rest is -gravity = +g on the up axis (physics).
    np.testing.assert_allclose(truth.specific_force_mps2[:500], np.tile([0, 0, G0], (500, 1)), atol=1e-9)
    np.testing.assert_allclose(truth.gyro_radps[:500], 0.0, atol=1e-9)


def test_on_the_arc_yaw_rate_is_speed_over_radius_and_bank_is_atan_e(truth):
    arc = truth.chainage_m > 200.0
    w_up = np.einsum("nj,nj->n", truth.attitude[arc][:, 2, :],
                     truth.gyro_radps[arc])
    np.testing.assert_allclose(w_up, 15.0 / R, rtol=1e-6)  # omega = v / R (REFERENCES.md, physics)
    np.testing.assert_allclose(truth.bank_rad[arc], np.arctan(E), rtol=1e-9)
    # lateral specific force on a banked arc: v^2/R cos(b) - g sin(b) (physics of the banked turn)
    b = np.arctan(E)
    np.testing.assert_allclose(truth.specific_force_mps2[arc, 1], 15.0**2 / R * np.cos(b) - G0 * np.sin(b), atol=1e-6)


def test_strapdown_integration_of_the_exact_signals_returns_the_exact_path(truth):
    # Integrating error-free gyro and specific force (Forster 2017 preintegration) from the true
    # state must land on the closed-form position 10 s later (numerical vs closed form).
    t = truth.time_s
    ep = np.array([12.0, 22.0])
    steps = make_substeps(t, truth.specific_force_mps2, truth.gyro_radps, ep)
    pre = preintegrate(steps, np.zeros((1, 3)), np.zeros((1, 3)), 0.0, 0.0)
    a, b = truth.at(ep[:1]), truth.at(ep[1:])
    Ri, vi, pi = a["attitude"][0], a["velocity_mps"][0], a["enu_m"][0]
    g = np.array([0, 0, -G0])
    T = pre.T[0]
    p = pi + vi * T + 0.5 * g * T**2 + Ri @ pre.dp[0]
    v = vi + g * T + Ri @ pre.dv[0]
    assert np.linalg.norm(p - b["enu_m"][0]) < 0.01
    assert np.linalg.norm(v - b["velocity_mps"][0]) < 0.002


def test_white_noise_matches_the_datasheet_densities(truth):
    # MPU-9250 datasheet (PS-MPU-9250A-01): 0.01 deg/s/sqrt(Hz), 300 ug/sqrt(Hz); per-sample
    # sigma = density * sqrt(rate) for white noise sampled at that rate.
    log, err = simulate_imu(truth, MPU9250, np.random.default_rng(0))
    ng = log.gyro_radps - truth.gyro_radps - err.gyro_bias_radps
    na = log.accel_mps2 - truth.specific_force_mps2 - err.accel_bias_mps2
    assert ng.std() == pytest.approx(np.radians(0.01) * np.sqrt(200.0), rel=0.03)
    assert na.std() == pytest.approx(300e-6 * G0 * np.sqrt(200.0), rel=0.03)
    assert np.abs(err.gyro_bias_radps[0]).max() <= np.radians(5.0)  # zero-rate offset +-5 deg/s
