"""Frenet geometry and the smoother, against closed forms and sympy."""

import numpy as np
import pytest
import sympy as sp

from survey import synthetic as S
from survey.frame import LocalFrame
from survey.geometry import frenet
from survey.profile_build import build_profile
from survey.stations import TORSION_LOW_CURVATURE
from tests.band_support import band_hits

FRAME = LocalFrame.enu(46.5, 7.6, 800.0)  # invented site


def profile_of(fixes, **kw):
    track = S.fixes_to_track(fixes, FRAME.inverse)
    e, n, u = FRAME.forward(track.lat_deg, track.lon_deg, track.height_m)
    return build_profile(track, np.column_stack([e, n, u]), FRAME, **kw)


def test_frenet_of_sympy_twisted_cubic_matches_symbolic_kappa_and_tau():
    # Independent oracle: sympy's exact kappa, tau of r(t) = (t, t^2, t^3) (Frenet-Serret formulas,
    # REFERENCES.md), compared with survey.geometry.frenet on the exact derivatives.
    t = sp.symbols("t", real=True)
    r = sp.Matrix([t, t**2, t**3])
    d1, d2, d3 = r.diff(t), r.diff(t, 2), r.diff(t, 3)
    c = d1.cross(d2)
    kappa = sp.lambdify(t, c.norm() / d1.norm() ** 3)
    tau = sp.lambdify(t, c.dot(d3) / c.dot(c))
    ts = np.linspace(-1.5, 1.5, 13)
    v = np.column_stack([np.ones_like(ts), 2 * ts, 3 * ts**2])
    a = np.column_stack([np.zeros_like(ts), 2 + 0 * ts, 6 * ts])
    j = np.column_stack([0 * ts, 0 * ts, 6 + 0 * ts])
    g = frenet(v, a, j)
    np.testing.assert_allclose(g["curvature_per_m"], [kappa(x) for x in ts], rtol=1e-12)
    np.testing.assert_allclose(g["torsion_per_m"], [tau(x) for x in ts], rtol=1e-12)
    np.testing.assert_allclose(np.einsum("ij,ij->i", np.cross(g["tangent"], g["normal"]), g["binormal"]), 1.0)


def test_rtk_helix_curvature_and_torsion_match_closed_form():
    # Helix: kappa = a/(a^2+c^2), tau = c/(a^2+c^2) (do Carmo 1976; REFERENCES.md). Issue targets:
    # RTK kappa within 0.5 %, tau within 2 % (median).
    a, c = 50.0, 5.0
    traj = S.helix(a, c, speed_mps=10.0, rate_hz=10.0, turns=2.0)
    p = profile_of(S.add_gnss_error(traj, "rtk", np.random.default_rng(11)))
    core = (p.chainage_m > 50) & (p.chainage_m < traj.length_m - 50)
    k_true, t_true = a / (a * a + c * c), c / (a * a + c * c)
    assert np.median(np.abs(p.curvature_per_m[core] / k_true - 1)) < 0.005
    assert np.nanmedian(np.abs(p.torsion_per_m[core] / t_true - 1)) < 0.02


@pytest.mark.parametrize("seed", [5, 7])
def test_plane_curve_has_near_zero_torsion_despite_height_noise(seed):
    # Textbook fact: a plane curve has tau = 0 (do Carmo 1976). Issue target: 95th percentile
    # |tau| <= 5 % of the typical kappa (measured 0.3-1.9 % on seeds 5-12; 6-12 % before heights
    # followed the local grade plane). Seed 7 is the worst of those.
    traj = S.plane_loop(tilt_deg=6.0)
    p = profile_of(S.add_gnss_error(traj, "dual", np.random.default_rng(seed)))
    tau = p.torsion_per_m[np.isfinite(p.torsion_per_m)]
    assert len(tau) > 0.5 * len(p)
    assert np.percentile(np.abs(tau), 95) <= 0.05 * np.median(p.curvature_per_m)


@pytest.mark.xfail(strict=True, reason="known shortfall: p95 |tau| 6-17 % of kappa on seeds 21-26 (32-54 % "
                   "before heights followed the grade plane); the phone's ~5 m vertical wander over a "
                   "76 s lap is a real-looking height signal that bends the path out of its plane")
def test_steeper_plane_curve_with_phone_grade_error_still_has_near_zero_torsion():
    # Textbook fact: tau = 0 for a plane curve (do Carmo 1976); a 12-degree pad logged with a
    # phone at 5 Hz (metres of error, heights 1.6x noisier: REFERENCES.md GNSS accuracy). Same
    # issue target, 5 % of the typical kappa.
    traj = S.plane_loop(tilt_deg=12.0)
    p = profile_of(S.add_gnss_error(traj, "phone", np.random.default_rng(21)))
    tau = p.torsion_per_m[np.isfinite(p.torsion_per_m)]
    assert len(tau) > 0.3 * len(p)
    assert np.percentile(np.abs(tau), 95) <= 0.05 * np.median(p.curvature_per_m)


def test_smoothed_heights_stay_on_the_plane_of_the_fixes_whatever_the_two_strengths():
    # Linearity of the smoother (x_hat = Lambda^-1 H^T W y): heights that lie exactly on the plane
    # z = c + g . en through the NOISY plan fixes must come out on that plane through the smoothed
    # plan path, although heights are smoothed far more strongly than plan position. Then the
    # vertical velocity, acceleration and jerk are g . (their plan counterparts), the condition
    # for tau = 0 (the path lies in a plane: do Carmo 1976). Tolerance 1 % of the in-plane value
    # (the grade fit's ridge shrinks g by ~0.1 %); without the grade plane it is off by ~30 %.
    from survey.smooth import NoiseModel, smooth_stretch

    traj = S.plane_loop(tilt_deg=0.0)
    rng = np.random.default_rng(3)
    g, c = np.array([0.04, -0.09]), 12.0
    en = traj.enu_m[:, :2] + rng.normal(0.0, 0.3, (len(traj.time_s), 2))
    enu = np.column_stack([en, c + en @ g])
    n = len(enu)
    model_h = NoiseModel(snap_psd=1e-4, var_scale=0.09)
    model_v = NoiseModel(snap_psd=1e-8, var_scale=0.25)  # ~2.5x the horizontal smoothing scale
    sm = smooth_stretch(traj.time_s, enu, np.ones(n), np.ones(n), model_h, model_v)
    t = traj.time_s[(traj.time_s > 10) & (traj.time_s < traj.time_s[-1] - 10)]
    st = sm.at(t)
    for d in (1, 2, 3):
        in_plane = st[:, :2, d] @ g
        assert np.max(np.abs(st[:, 2, d] - in_plane)) <= 0.01 * np.max(np.abs(in_plane)), d
    off = smooth_stretch(traj.time_s, enu, np.ones(n), np.ones(n), model_h, model_v, grade_window_scales=None).at(t)
    assert np.max(np.abs(off[:, 2, 3] - off[:, :2, 3] @ g)) > 0.1 * np.max(np.abs(off[:, :2, 3] @ g))


def test_clothoid_curvature_grows_linearly_with_chainage():
    # Clothoid: kappa(s) = s / A^2 with A^2 = R L (REFERENCES.md, ISO 19107 clothoid).
    R, L = 200.0, 120.0
    curve = S.alignment_curve([("tangent", 100, 0), ("spiral", L, 1 / R), ("arc", 150, 1 / R)])
    traj = S.sample_path(curve, speed_mps=15.0, rate_hz=10.0)
    p = profile_of(S.add_gnss_error(traj, "rtk", np.random.default_rng(3)))
    inner = (p.chainage_m > 115) & (p.chainage_m < 205)
    slope, intercept = np.polyfit(p.chainage_m[inner], p.curvature_per_m[inner], 1)
    assert slope == pytest.approx(1 / (R * L), rel=0.03)
    assert intercept == pytest.approx(-100 / (R * L), abs=0.03 * 100 / (R * L) + 1e-4)


def test_lateral_acceleration_is_v_squared_over_r_in_steady_turning():
    # Physics: a = v^2 / R for steady circular motion (REFERENCES.md).
    R, v = 60.0, 12.0
    traj = S.helix(R, 0.0, speed_mps=v, rate_hz=10.0, turns=1.5)
    p = profile_of(S.add_gnss_error(traj, "rtk", np.random.default_rng(4)))
    core = (p.chainage_m > 60) & (p.chainage_m < traj.length_m - 60)
    assert np.median(p.lateral_accel_mps2[core]) == pytest.approx(v * v / R, rel=0.01)
    assert np.median(p.speed_mps[core]) == pytest.approx(v, rel=0.005)


def test_straight_gives_nan_torsion_with_low_curvature_reason_never_a_huge_number():
    # Torsion is undefined where r' x r'' = 0 (REFERENCES.md): it must be empty, not huge.
    curve = S.alignment_curve([("tangent", 600.0, 0.0)], grades=[(600.0, 0.03, 0.03)])
    traj = S.sample_path(curve, speed_mps=20.0, rate_hz=5.0)
    p = profile_of(S.add_gnss_error(traj, "dual", np.random.default_rng(8)))
    low = p.torsion_reason == TORSION_LOW_CURVATURE
    assert low.mean() > 0.9
    assert np.all(np.isnan(p.torsion_per_m[low]))
    assert np.nanmax(np.abs(p.torsion_per_m), initial=0.0) < 0.1


def test_curvature_band_covers_the_truth_at_about_its_stated_rate():
    # A calibrated 1-sigma band covers the truth ~68 % of the time (Gaussian property). White
    # receiver noise with its true accuracy: the model's own assumptions.
    a, c = 40.0, 6.0
    k_true = a / (a * a + c * c)  # helix curvature, closed form (do Carmo 1976)
    traj = S.helix(a, c, speed_mps=8.0, rate_hz=5.0, turns=1.0)
    hits_k = []
    for seed in range(8):
        f = S.add_gnss_error(traj, "dual", np.random.default_rng(100 + seed), wander_m=0.0, white_m=0.15)
        hits_k.append(band_hits(profile_of(f, seed=seed), "curvature_per_m", k_true, traj.length_m))
    cover_k = np.mean(np.concatenate(hits_k))
    assert 0.45 <= cover_k <= 0.92


def test_torsion_band_covers_the_truth_at_about_its_stated_rate():
    # Same set-up as above, for torsion.
    a, c = 40.0, 6.0
    t_true = c / (a * a + c * c)
    traj = S.helix(a, c, speed_mps=8.0, rate_hz=5.0, turns=1.0)
    hits = []
    for seed in range(8):
        f = S.add_gnss_error(traj, "dual", np.random.default_rng(100 + seed), wander_m=0.0, white_m=0.15)
        hits.append(band_hits(profile_of(f, seed=seed), "torsion_per_m", t_true, traj.length_m))
    assert 0.45 <= np.mean(np.concatenate(hits)) <= 0.92


def test_slow_wander_on_a_straight_is_not_read_as_a_bend():
    # Correlated receiver error must not become bends (REFERENCES.md: likelihood undersmooths
    # with slow wander). A straight driven at 100 km/h with phone-grade 3 m wander (60 s) must
    # never look tighter than the minimum design radius for that speed: R = V^2/(127 (e+f)) =
    # 393.7 m at e = 0.08, f = 0.12 (Ethiopian Roads Authority manual 2002, ch. 8 worked example).
    curve = S.alignment_curve([("tangent", 3000.0, 0.0)], grades=[(3000.0, 0.02, 0.02)])
    traj = S.sample_path(curve, speed_mps=100 / 3.6, rate_hz=1.0)
    for seed in range(2):
        f = S.add_gnss_error(traj, "phone", np.random.default_rng(seed), white_m=0.3)
        p = profile_of(f)
        assert np.min(p.radius_m) > 393.7


def test_multipath_outliers_duplicates_and_outage_do_not_spoil_an_uncleaned_log():
    # Regression: 1 % multipath jumps of 15-45 m once drove the likelihood to a path through them
    # (kappa error 97 %, length +160 %). build_profile must hold up even on a raw, uncleaned log.
    # Issue targets: no worse than 1.5x the clean case; chainage within 0.5 % of the true length.
    traj = S.road_alignment()
    rng = np.random.default_rng(2024)
    clean = S.add_gnss_error(traj, "dual", rng)
    bad = S.add_outliers(clean, 0.01, 30.0, rng)
    bad = S.duplicate_fixes(S.add_outage(bad, 20.0, 5.0), 0.01, rng)

    def kappa_error(p):
        kt = traj.truth_at_chainage(p.chainage_m)["curvature_per_m"]
        arc = kt > 0.5 * kt.max()
        return np.median(np.abs(p.curvature_per_m[arc] / kt[arc] - 1))

    p_clean, p_bad = profile_of(clean), profile_of(bad)
    assert kappa_error(p_bad) <= 1.5 * kappa_error(p_clean)
    assert abs(p_bad.settings["path_length_m"] / traj.length_m - 1) < 0.005
