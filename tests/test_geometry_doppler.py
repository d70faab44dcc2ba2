"""Receiver velocity (speed and course over ground) measured by the smoother beside the positions.

Truth: closed-form paths of survey.synthetic (switchbacks of radius 8 m, kappa = 1/8 per metre;
helix kappa = a/(a^2+c^2), do Carmo 1976; a tilted ellipse, a plane curve with tau = 0);
phone-grade position error (white plus slow Gauss-Markov wander, REFERENCES.md "GNSS accuracy")
and the receiver's Doppler velocity = true velocity + white noise (survey.synthetic
DOPPLER_SIGMA_MPS, from memory).
"""

from dataclasses import replace

import numpy as np
import pytest

from survey import synthetic as S
from survey.clean import clean_track
from survey.frame import LocalFrame
from survey.profile_build import build_profile
from tests.band_support import band_hits

FRAME = LocalFrame.enu(46.5, 7.6, 800.0)  # invented site
SWITCHBACKS = S.switchbacks(radius_m=8.0)
SEEDS = (100, 101, 102)


def _profile(fixes, **kw):
    track, _ = clean_track(S.fixes_to_track(fixes, FRAME.inverse))
    e, n, u = FRAME.forward(track.lat_deg, track.lon_deg, track.height_m)
    return build_profile(track, np.column_stack([e, n, u]), FRAME, **kw)


def _phone(traj, seed, doppler=True):
    rng = np.random.default_rng(seed)
    f = S.add_gnss_error(traj, "phone", rng)
    return S.add_doppler_velocity(f, traj, "phone", rng) if doppler else f


def _arc_core_radius_error(p, traj=SWITCHBACKS):
    # radius on the middle half of every 180-degree arc, stations located by chainage (as the
    # accuracy benchmark does: a chainage drift shows as error)
    k_true = traj.truth_at_chainage(p.chainage_m)["curvature_per_m"]
    core = np.abs(k_true * 8.0 - 1.0) < 0.01
    edges = np.flatnonzero(np.diff(np.r_[0, core.astype(int), 0]))
    keep = np.zeros_like(core)
    for a, b in zip(edges[::2], edges[1::2]):
        quarter = 0.25 * (p.chainage_m[b - 1] - p.chainage_m[a])
        keep[a:b] = (p.chainage_m[a:b] > p.chainage_m[a] + quarter) & (p.chainage_m[a:b] < p.chainage_m[b - 1] - quarter)
    return float(np.median(np.abs(1.0 / p.curvature_per_m[keep] / 8.0 - 1.0)))


def test_phone_switchbacks_with_doppler_velocity_give_the_8_m_radius_within_15_percent():
    # Issue target for 8 m switchbacks at walking pace: radius within 15 %. Positions alone miss
    # it (the wander takes part of every hairpin: 29 % median over seeds 0-5, accuracy benchmark);
    # the velocity does not carry the wander.
    errors = [_arc_core_radius_error(_profile(_phone(SWITCHBACKS, s))) for s in SEEDS]
    assert max(errors) <= 0.15, errors


def test_doppler_velocity_shortens_the_chainage_error_on_phone_switchbacks():
    # True length between the first and last fix: closed-form arc length of the path
    # (survey.synthetic.sample_path, constant speed).
    def length_error(p, f):
        covered = np.ptp(np.interp([f.time_s.min(), f.time_s.max()], SWITCHBACKS.time_s, SWITCHBACKS.chainage_m))
        return abs(p.settings["path_length_m"] / covered - 1.0)

    with_v, without = [], []
    for s in SEEDS:
        f = _phone(SWITCHBACKS, s)
        with_v.append(length_error(_profile(f), f))
        without.append(length_error(_profile(replace(f, velocity_mps=None)), f))
    assert np.median(with_v) < 0.5 * np.median(without), (with_v, without)


def test_phone_helix_curvature_with_doppler_velocity_is_within_2_percent():
    # Helix a = 50 m, c = 5 m/rad: kappa = a / (a^2 + c^2) (do Carmo 1976); the issue's
    # consumer-grade target is 4 %, which positions alone miss under the 3 m wander.
    traj = S.helix(50.0, 5.0, 10.0, 10.0, 3.0)
    k_true = 50.0 / (50.0**2 + 5.0**2)
    errors = []
    for s in SEEDS:
        p = _profile(_phone(traj, s))
        core = (p.chainage_m > 50) & (p.chainage_m < traj.length_m - 50)
        errors.append(np.median(np.abs(p.curvature_per_m[core] / k_true - 1.0)))
    assert max(errors) <= 0.02, errors


def test_plane_loop_with_doppler_velocity_keeps_zero_torsion():
    # Textbook fact: tau = 0 for a plane curve (do Carmo 1976); the velocity measures only plan
    # motion, so the heights must still follow the tilted plane (p95 |tau| <= 5 % of kappa).
    traj = S.plane_loop()
    rng = np.random.default_rng(7)
    f = S.add_doppler_velocity(S.add_gnss_error(traj, "dual", rng), traj, "dual", rng)
    p = _profile(f)
    tau = p.torsion_per_m[np.isfinite(p.torsion_per_m)]
    assert len(tau) > 0.5 * len(p)
    assert np.percentile(np.abs(tau), 95) <= 0.05 * np.median(p.curvature_per_m)


def test_curvature_band_with_doppler_velocity_covers_the_truth_at_about_its_stated_rate():
    # A calibrated 1-sigma band covers the truth ~68 % of the time (Gaussian property); white
    # position error and white velocity error, as the model assumes; the repeated-noise draws
    # must carry the velocity noise too. Helix kappa in closed form (do Carmo 1976).
    a, c = 40.0, 6.0
    k_true = a / (a * a + c * c)
    traj = S.helix(a, c, speed_mps=8.0, rate_hz=5.0, turns=1.0)
    hits = []
    for seed in range(8):
        rng = np.random.default_rng(200 + seed)
        f = S.add_gnss_error(traj, "dual", rng, wander_m=0.0, white_m=0.3)
        f = S.add_doppler_velocity(f, traj, "dual", rng, sigma_mps=0.15)
        hits.append(band_hits(_profile(f, seed=seed), "curvature_per_m", k_true, traj.length_m))
    cover = np.mean(np.concatenate(hits))
    assert 0.45 <= cover <= 0.92, cover


def test_a_few_wild_velocities_are_down_weighted():
    # Five fixes report a velocity 20 m/s off (a receiver glitch): the radius must stay within
    # 15 % of the closed-form 8 m, as without the glitch.
    f = _phone(SWITCHBACKS, 100)
    v = f.velocity_mps.copy()
    v[[40, 41, 90, 150, 151]] += 20.0
    assert _arc_core_radius_error(_profile(replace(f, velocity_mps=v))) <= 0.15


def test_profile_settings_say_the_velocity_was_used():
    p = _profile(_phone(SWITCHBACKS, 100))
    assert "velocity" in p.settings["receiver_velocity"]
    assert any("velocity measurements" in m for m in p.messages)


@pytest.mark.parametrize("setting", [{"use_velocity": False}, {"velocity_min_speed_mps": 100.0}])
def test_without_usable_velocity_the_profile_is_the_positions_only_one(setting):
    # Switching the velocity off, or no fix fast enough for a trusted course, gives exactly the
    # profile of the same log without speed and course.
    f = _phone(SWITCHBACKS, 101)
    a = _profile(f, **setting)
    b = _profile(replace(f, velocity_mps=None))
    assert np.array_equal(a.curvature_per_m, b.curvature_per_m, equal_nan=True)
    assert "receiver_velocity" not in a.settings


def test_doppler_velocity_cuts_the_false_sharp_sections_on_8_m_switchbacks():
    # The ride-trail preset flags turns tighter than 6 m radius (survey.design); the true radius
    # is 8 m everywhere (closed form), so every "sharp" section is false. Measured over seeds
    # 100-109, with and without stated accuracy: 16 such sections from positions alone, 3 with
    # the velocity. Asked here on seeds 100-102: at most a third of the positions-only count.
    from survey.design import preset_limits
    from survey.sections import detect_sections

    limits = preset_limits("ride-trail")
    count = {True: 0, False: 0}
    for with_accuracy in (True, False):
        for s in SEEDS:
            f = _phone(SWITCHBACKS, s)
            for doppler in (True, False):
                g = f if doppler else replace(f, velocity_mps=None)
                track, _ = clean_track(S.fixes_to_track(g, FRAME.inverse, with_accuracy=with_accuracy))
                e, n, u = FRAME.forward(track.lat_deg, track.lon_deg, track.height_m)
                p = build_profile(track, np.column_stack([e, n, u]), FRAME)
                count[doppler] += sum(1 for sec in detect_sections(p, limits) if sec.kind == "sharp")
    assert count[False] >= 3 and count[True] <= count[False] / 3, count


def test_a_singular_positions_only_grade_smoother_falls_back_to_a_stiffer_one(monkeypatch):
    # With velocities the local grade comes from a positions-only pass of the plan smoother (no
    # velocity rows, so less well conditioned). Made to fail once, as a numerically singular
    # band would, the profile must still come out, with finite heights and torsion where the
    # curvature allows it (helix: closed form tau = c/(a^2+c^2) > 0, do Carmo 1976).
    import survey.smooth as sm

    real, failed = sm._smooth_group, []

    def once_singular(Y, var, w, m, design, *rest):
        if Y.shape[1] == 3 and not rest and not failed:
            failed.append(m.snap_psd)
            raise np.linalg.LinAlgError("4-th leading minor not positive definite")
        return real(Y, var, w, m, design, *rest)

    monkeypatch.setattr(sm, "_smooth_group", once_singular)
    traj = S.helix(50, 5, 10, 10, 3)
    p = _profile(_phone(traj, 100))
    assert failed, "the positions-only pass was not reached"
    assert np.all(np.isfinite(p.up_m))
    assert np.nanmedian(p.torsion_per_m) > 0
