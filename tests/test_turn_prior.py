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
