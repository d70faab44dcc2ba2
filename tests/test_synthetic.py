"""Ground-truth generator: the closed forms it promises, checked against outside oracles."""

import numpy as np
import pytest
import sympy as sp
from scipy.integrate import quad

from survey import synthetic as S


def test_helix_curvature_and_torsion_match_sympy_closed_form():
    # Oracle: sympy differentiates r(t) = (a cos t, a sin t, c t) symbolically and applies the
    # Frenet-Serret formulas (REFERENCES.md: kappa = a/(a^2+c^2), tau = c/(a^2+c^2), do Carmo 1976).
    t, a, c = sp.symbols("t a c", positive=True)
    r = sp.Matrix([a * sp.cos(t), a * sp.sin(t), c * t])
    d1, d2, d3 = r.diff(t), r.diff(t, 2), r.diff(t, 3)
    cross = d1.cross(d2)
    kappa = sp.simplify(cross.norm() / d1.norm() ** 3)
    tau = sp.simplify(cross.dot(d3) / cross.norm() ** 2)
    traj = S.helix(radius_m=30.0, rise_per_rad_m=4.0, speed_mps=6.0, rate_hz=5.0, turns=1.0)
    k_exp = float(kappa.subs({a: 30, c: 4, t: 0.3}))
    t_exp = float(tau.subs({a: 30, c: 4, t: 0.3}))
    np.testing.assert_allclose(traj.curvature_per_m, k_exp, rtol=1e-12)
    np.testing.assert_allclose(traj.torsion_per_m, t_exp, rtol=1e-12)


def test_helix_length_is_turns_times_circumference_of_unrolled_helix():
    # Closed form: one turn of a helix has length 2 pi sqrt(a^2 + c^2).
    traj = S.helix(radius_m=50.0, rise_per_rad_m=5.0, turns=2.0)
    assert traj.length_m == pytest.approx(2 * 2 * np.pi * np.hypot(50.0, 5.0), rel=1e-9)


def test_clothoid_coordinates_match_direct_quadrature_of_heading():
    # Oracle: scipy.integrate.quad of (cos theta, sin theta) with theta = s^2/(2 A^2),
    # independent of scipy.special.fresnel used by the generator. A^2 = R L (ISO 19107 clothoid).
    R, L = 300.0, 90.0
    A2 = R * L
    curve = S.alignment_curve([("spiral", L, 1.0 / R)])
    s_end = L
    x_ref = quad(lambda s: np.cos(s**2 / (2 * A2)), 0, s_end, epsabs=1e-12)[0]
    y_ref = quad(lambda s: np.sin(s**2 / (2 * A2)), 0, s_end, epsabs=1e-12)[0]
    r, *_ = curve.evaluate(np.array([s_end]))
    assert r[0, 0] == pytest.approx(x_ref, abs=1e-9)
    assert r[0, 1] == pytest.approx(y_ref, abs=1e-9)


def test_clothoid_curvature_is_linear_in_arc_length():
    # Clothoid definition (REFERENCES.md): kappa(s) = s / A^2 on a level alignment.
    R, L = 250.0, 60.0
    curve = S.alignment_curve([("spiral", L, 1.0 / R)])
    s = np.linspace(1.0, L, 50)
    _, d1, d2, d3 = curve.evaluate(s)
    k, _, pk = S.frenet_from_derivatives(d1, d2, d3)
    np.testing.assert_allclose(k, s / (R * L), rtol=1e-12)
    np.testing.assert_allclose(pk, s / (R * L), rtol=1e-12)


def test_spiral_between_two_arcs_is_continuous_in_position_and_heading():
    # A general clothoid piece (curvature 1/400 -> -1/200) must join its neighbours smoothly;
    # checked against a cumulative trapezoid of the heading (independent integration).
    from scipy.integrate import cumulative_trapezoid

    curve = S.alignment_curve(
        [("arc", 100, 1 / 400), ("spiral", 60, -1 / 200), ("arc", 50, -1 / 200), ("spiral", 40, 0.0)]
    )
    x = np.linspace(0, curve.u_end, 200_001)
    r, d1, *_ = curve.evaluate(x)
    X = cumulative_trapezoid(d1[:, 0], x, initial=0)
    Y = cumulative_trapezoid(d1[:, 1], x, initial=0)
    assert np.abs(X - r[:, 0]).max() < 1e-6
    assert np.abs(Y - r[:, 1]).max() < 1e-6


def test_tilted_ellipse_is_a_plane_curve_with_zero_torsion():
    # Textbook fact: a plane curve has tau = 0 wherever kappa != 0.
    traj = S.plane_loop(tilt_deg=10.0)
    assert np.nanmax(np.abs(traj.torsion_per_m)) < 1e-12
    assert np.ptp(traj.enu_m[:, 2]) > 10.0  # heights really vary


def test_switchback_curvature_on_a_grade_is_plan_curvature_over_one_plus_grade_squared():
    # Closed form: a circular turn on a steady grade g is a helix with a = R, c = g R, so
    # kappa = a/(a^2+c^2) = 1/(R (1 + g^2)).
    traj = S.switchbacks(radius_m=8.0, grade=0.08)
    assert traj.curvature_per_m.max() == pytest.approx(1 / (8.0 * (1 + 0.08**2)), rel=1e-9)


def test_sampled_speed_and_stops():
    traj = S.sample_path(S.helix_curve(20.0, 2.0, 1.0), speed_mps=5.0, rate_hz=2.0, stops=[(30.0, 20.0)])
    speed = np.linalg.norm(traj.velocity_mps, axis=1)
    assert np.isclose(speed.max(), 5.0)
    # 20 s stop at 2 Hz: about 39 fixes with exactly zero speed
    assert 37 <= int(np.sum(speed == 0.0)) <= 41


def test_gnss_error_has_the_stated_size_and_heights_are_noisier():
    rng = np.random.default_rng(7)
    traj = S.helix(radius_m=50.0, rise_per_rad_m=5.0, speed_mps=5.0, rate_hz=10.0, turns=20.0)
    fixes = S.add_gnss_error(traj, "dual", rng, wander_tau_s=30.0)
    err = fixes.enu_m - traj.enu_m
    white, wander, _, vf = S.GNSS_GRADES["dual"]
    total = np.hypot(white, wander)
    assert np.std(err[:, 0]) == pytest.approx(total, rel=0.25)
    assert np.std(err[:, 2]) / np.std(err[:, :2]) == pytest.approx(vf, rel=0.3)
    np.testing.assert_allclose(fixes.accuracy_m, total)


def test_corruptions_mark_outliers_drop_an_outage_and_repeat_fixes():
    rng = np.random.default_rng(3)
    traj = S.road_alignment()
    fixes = S.add_outliers(S.exact_fixes(traj), frac=0.01, size_m=20.0, rng=rng)
    assert fixes.outlier.sum() == round(0.01 * len(traj))
    moved = np.linalg.norm(fixes.enu_m - traj.enu_m, axis=1)
    assert np.all(moved[fixes.outlier] > 5.0) and np.all(moved[~fixes.outlier] == 0.0)
    cut = S.add_outage(fixes, start_s=20.0, length_s=5.0)
    assert len(fixes) - len(cut) == 50  # 5 s at 10 Hz
    dup = S.duplicate_fixes(cut, frac=0.02, rng=rng)
    assert len(dup) - len(cut) == round(0.02 * len(cut))
    assert np.sum(np.diff(dup.time_s) == 0.0) == len(dup) - len(cut)


def test_doppler_velocity_is_the_true_velocity_plus_white_noise_of_the_grade():
    # Truth: a helix flown at 10 m/s has horizontal speed 10 a / sqrt(a^2 + c^2) (closed form,
    # do Carmo 1976); the reported velocity scatters about it by the grade's 1-sigma per axis.
    traj = S.helix(50.0, 5.0, 10.0, 10.0, 1.0)
    fixes = S.add_doppler_velocity(S.exact_fixes(traj), traj, "phone", np.random.default_rng(3))
    err = fixes.velocity_mps - traj.velocity_mps[:, :2]
    assert np.std(err) == pytest.approx(S.DOPPLER_SIGMA_MPS["phone"], rel=0.1)
    horizontal = 10.0 * 50.0 / np.hypot(50.0, 5.0)
    assert np.median(np.hypot(*fixes.velocity_mps.T)) == pytest.approx(horizontal, abs=0.05)


def test_fixes_with_velocity_become_a_track_with_speed_and_true_course():
    # A mover heading north-east at 2 m/s: course 45 degrees (clockwise from north), speed 2 m/s.
    traj = S.exact_fixes(S.switchbacks())
    v = np.tile([np.sqrt(2.0), np.sqrt(2.0)], (len(traj), 1))
    from dataclasses import replace

    track = S.fixes_to_track(replace(traj, velocity_mps=v), lambda e, n, u: (46.5 + n * 1e-5, 7.6 + e * 1e-5, u))
    assert np.allclose(track.speed_mps, 2.0) and np.allclose(track.course_deg, 45.0)
