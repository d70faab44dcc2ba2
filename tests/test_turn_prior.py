"""The turn-aware plan prior of the smoother (survey.smooth: apply_turn_prior, choose_turn_prior).

Sources: the prior's transition is the exponential of the operator D^2 (D^2 + omega^2), whose
null space is {1, t, cos(omega t), sin(omega t)} (linear ODE with constant coefficients, closed
form); at omega = 0 it is the constant-jerk model (white snap). Helix curvature and torsion:
kappa = a/(a^2+c^2), tau = c/(a^2+c^2) (do Carmo 1976, REFERENCES.md). The issue's RTK helix
targets are kappa within 0.5 % and tau within 2 % (median).
"""

import numpy as np
import pytest

from survey import smooth as sm
from survey import synthetic as S
from survey.clean import clean_track
from survey.frame import LocalFrame
from survey.profile_build import build_profile

FRAME = LocalFrame.enu(46.5, 7.6, 800.0)  # invented site


def _profile(fixes):
    track, _ = clean_track(S.fixes_to_track(fixes, FRAME.inverse))
    e, n, u = FRAME.forward(track.lat_deg, track.lon_deg, track.height_m)
    return build_profile(track, np.column_stack([e, n, u]), FRAME)


def test_turn_blocks_at_zero_turn_rate_are_the_constant_jerk_blocks():
    # omega = 0: D^4 p = w, the constant-jerk (white snap) model the smoother uses otherwise.
    F, Qinv, _ = sm._turn_unit_blocks(0)
    np.testing.assert_allclose(F, sm._F1, atol=1e-12)
    np.testing.assert_allclose(Qinv, sm._KINV, rtol=1e-7)


@pytest.mark.parametrize("key", [40, 300, 1200])
def test_turn_transition_carries_steady_circular_motion_exactly(key):
    # p(t) = cos(w t) solves p'''' + w^2 p'' = 0: its state (p, p', p'', p''') at t = 0 must be
    # carried to its state at t = 1 (closed form).
    w = key * sm.TURN_STEP
    F, _, _ = sm._turn_unit_blocks(key)

    def state(t):
        return np.array([np.cos(w * t), -w * np.sin(w * t), -w**2 * np.cos(w * t), w**3 * np.sin(w * t)])

    np.testing.assert_allclose(F @ state(0.0), state(1.0), atol=1e-12)


def test_turn_prior_at_zero_turn_rate_leaves_the_system_unchanged():
    rng = np.random.default_rng(3)
    t = np.arange(200) * 0.5
    y = np.column_stack([np.cos(t / 10), np.sin(t / 10)]) * 30 + rng.normal(0, 0.5, (200, 2))
    model = sm.NoiseModel(1e-3, 0.25, 0.04, 60.0)
    system = sm.build_system(sm.make_design(t, 1.0), y, np.full(200, 0.25), model)
    turned = sm.apply_turn_prior(system, np.zeros(system.design.n_knots - 1))
    np.testing.assert_allclose(turned.ab, system.ab, rtol=1e-9, atol=1e-9 * np.abs(system.ab).max())
    assert turned.logdet_prior == pytest.approx(system.logdet_prior, rel=1e-9)


def test_likelihood_chooses_the_turn_prior_on_a_steady_helix_and_keeps_constant_jerk_on_a_straight():
    helix = S.add_gnss_error(S.helix(50, 5, 10, 10, 2), "dual", np.random.default_rng(5))
    assert _profile(helix).settings["plan_prior"].startswith("turn-aware")
    line = S.alignment_curve([("tangent", 1500.0, 0.0)], grades=[(1500.0, 0.02, 0.02)])
    straight = S.add_gnss_error(S.sample_path(line, speed_mps=20.0, rate_hz=5.0), "dual", np.random.default_rng(5))
    assert _profile(straight).settings["plan_prior"] == "constant jerk"


def test_rtk_helix_curvature_and_torsion_within_a_tenth_of_the_issue_targets():
    # Measured with the turn-aware prior (benchmarks/bench_accuracy.py, seeds 2024-2028):
    # kappa 0.04 %, tau 0.11 % median; the constant-jerk prior gave 0.19 % and 1.84 %. Checked
    # here at a quarter of the issue's RTK targets (0.5 %, 2 %) on three seeds.
    a, c = 50.0, 5.0
    k_true, t_true = a / (a * a + c * c), c / (a * a + c * c)
    traj = S.helix(a, c, 10, 10, 3)
    k_err, t_err = [], []
    for seed in range(3):
        p = _profile(S.add_gnss_error(traj, "rtk", np.random.default_rng([seed, 0])))
        core = (p.chainage_m > 20) & (p.chainage_m < p.chainage_m[-1] - 20)
        k_err.append(np.median(np.abs(p.curvature_per_m[core] / k_true - 1)))
        t_err.append(np.nanmedian(np.abs(p.torsion_per_m[core] / t_true - 1)))
    assert np.median(k_err) <= 0.005 / 4
    assert np.median(t_err) <= 0.02 / 4


def test_phone_helix_curvature_meets_the_issue_target():
    # Issue 3: consumer-grade helix kappa within 4 % (median). Measured 3.1 % over seeds
    # 2024-2028 in the accuracy benchmark (4.5 % with the constant-jerk prior alone); here the
    # median over four other seeds of the per-log median error.
    a, c = 50.0, 5.0
    k_true = a / (a * a + c * c)
    traj = S.helix(a, c, 10, 10, 3)
    errs = []
    for seed in range(4):
        p = _profile(S.add_gnss_error(traj, "phone", np.random.default_rng([seed, 7])))
        errs.append(np.median(np.abs(p.curvature_per_m / k_true - 1)))
    assert np.median(errs) <= 0.04


def test_turn_prior_at_another_snap_density_equals_assembling_the_system_at_it():
    # The data terms do not depend on the prior: moving a band to a new snap density in place
    # must give the band assembled from scratch at that density (same fixes and weights).
    rng = np.random.default_rng(4)
    t = np.arange(300) * 0.5
    y = np.column_stack([np.cos(t / 12), np.sin(t / 12)]) * 40 + rng.normal(0, 0.5, (300, 2))
    design = sm.make_design(t, 1.0)
    m1 = sm.NoiseModel(1e-3, 0.25, 0.04, 60.0)
    m2 = sm.NoiseModel(1e-3 / 64, 0.25, 0.04, 60.0)
    turn = np.full(design.n_knots - 1, 1.0 / 12)  # rad per 1 s knot interval
    moved = sm.apply_turn_prior(sm.build_system(design, y, np.full(300, 0.25), m1), turn, model=m2)
    fresh = sm.apply_turn_prior(sm.build_system(design, y, np.full(300, 0.25), m2), turn)
    np.testing.assert_allclose(moved.ab, fresh.ab, rtol=1e-9, atol=1e-9 * np.abs(fresh.ab).max())
    assert moved.logdet_prior == pytest.approx(fresh.logdet_prior, rel=1e-9)


def _dense_band(system) -> np.ndarray:
    """The posterior precision as a dense symmetric matrix, from its upper band storage
    (LAPACK layout: ab[u + i - j, j] = Lambda[i, j])."""
    N = system.ab.shape[1]
    u = system.ab.shape[0] - 1
    full = np.zeros((N, N))
    for i in range(N):
        for j in range(i, min(N, i + u + 1)):
            full[i, j] = full[j, i] = system.ab[u + i - j, j]
    return full


def test_turn_aware_draws_are_solved_with_each_draws_own_turn_rates(monkeypatch):
    # Oracle: numpy's dense solve of each draw's own posterior precision Lambda + Delta_j (the
    # turn-aware prior at that draw's turn rates). Set-up: a stiff turn-aware prior (snap density
    # x 4^-6, as the likelihood picks on phone helices), where the first-order draw is far off.
    f = S.add_gnss_error(S.helix(50, 5, 10, 5, 1.5), "phone", np.random.default_rng(11))
    n = len(f.time_s)
    model = sm.NoiseModel(1e-2, 2.25, 9.0, 60.0)
    g = sm.smooth_stretch(f.time_s, f.enu_m, np.ones(n), np.ones(n), model, None, turn_q_factor=4.0**-6).groups[0]
    seen = {}
    real = sm._exact_in_turn_rates

    def capture(system, U, tables, rhs, x, refit):
        seen.update(tables=tables, rhs=rhs.copy(), first_order=x.copy())
        return real(system, U, tables, rhs, x, refit)

    monkeypatch.setattr(sm, "_exact_in_turn_rates", capture)
    draws = 3
    dev = np.moveaxis(sm.turn_refit_draws(g.system, g.factor, g.turn_refit, g.white_var, g.model, draws,
                                          np.random.default_rng(1)), 0, 2)
    K, d = g.system.design.n_knots, g.system.dim
    lam = _dense_band(g.system)
    unit = np.eye(K * d).reshape(K, d, K * d)
    worst_first_order = 0.0
    for j in range(draws):
        delta = np.zeros_like(unit)
        delta[:, :4] = (sm._path_prior_times(*seen["tables"][j], unit[:, :4])
                        - sm._path_prior_times(*g.system.turn_blocks, unit[:, :4]))
        own = lam + delta.reshape(K * d, K * d)
        for a in range(2):
            exact = np.linalg.solve(own, seen["rhs"][:, :, j, a].ravel())

            def energy_error(v):
                e = v.ravel() - exact
                return np.sqrt(e @ own @ e / (exact @ own @ exact))

            assert energy_error(dev[:, :, j, a]) <= 0.03
            worst_first_order = max(worst_first_order, energy_error(seen["first_order"][:, :, j, a]))
    assert worst_first_order > 0.3  # the set-up is one where solving each draw matters


def test_phone_helix_with_outliers_and_an_outage_keeps_its_chainage():
    # The sampling-error draws of a stiff turn-aware estimate used to overshoot (speed 1-sigma
    # up to 19 m/s on this log), so the mover read as stopped and the chainage froze for the
    # last third. At constant speed along the curve the true length is speed x duration
    # (closed form); the accuracy benchmark's chainage error on such logs is 0.2-0.7 %.
    traj = S.helix(50, 5, 10, 10, 3)
    rng = np.random.default_rng([2026, 2])  # the benchmark's "helix phone corrupted", seed 2026
    f = S.add_gnss_error(traj, "phone", rng)
    f = S.add_outliers(f, 0.01, 30.0, rng)
    f = S.add_outage(f, 0.3 * (traj.time_s[-1] - traj.time_s[0]), 5.0)
    f = S.duplicate_fixes(f, 0.01, rng)
    p = _profile(f)
    true_length = 10.0 * float(np.ptp(f.time_s))
    assert p.settings["path_length_m"] == pytest.approx(true_length, rel=0.02)
    assert p.time_s[-1] >= f.time_s.max() - 2.0
