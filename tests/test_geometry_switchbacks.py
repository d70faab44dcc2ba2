"""Tight switchbacks walked with a phone at 1 Hz: honest sharpness and the speed through turns.

Truth: survey.synthetic.switchbacks -- 180-degree arcs of radius 8 m (kappa = 1/8 per metre,
closed form) joined by straight legs, walked at 1.3 m/s; phone-grade receiver error (white plus
slow Gauss-Markov wander, REFERENCES.md "GNSS accuracy").
"""

import numpy as np
import pytest

from survey import synthetic as S
from survey.clean import clean_track
from survey.frame import LocalFrame
from survey.profile_build import build_profile

FRAME = LocalFrame.enu(46.5, 7.6, 800.0)  # invented site
SEEDS = (100, 101, 102)
TRAJ = S.switchbacks(radius_m=8.0)


def _profile(log_seed, with_accuracy=True, **kw):
    f = S.add_gnss_error(TRAJ, "phone", np.random.default_rng(log_seed))
    track, _ = clean_track(S.fixes_to_track(f, FRAME.inverse, with_accuracy=with_accuracy))
    e, n, u = FRAME.forward(track.lat_deg, track.lon_deg, track.height_m)
    return build_profile(track, np.column_stack([e, n, u]), FRAME, **kw)


@pytest.mark.parametrize("with_accuracy", [True, False])
def test_turns_of_8_m_are_rarely_claimed_sharper_than_6_m(with_accuracy):
    # True kappa never exceeds 1/8 per metre (closed form), so kappa > 1/6 + 1.64 sigma is a false
    # one-sided 95 % claim; at an honest sigma it happens at no more than ~5 % of stations.
    fractions = []
    for seed in SEEDS:
        p = _profile(seed, with_accuracy)
        fractions.append(np.mean(p.curvature_per_m - 1.0 / 6.0 > 1.64 * p.curvature_sd_per_m))
    assert max(fractions) <= 0.05, fractions


def _turn_speed_error(p):
    # true speed 1.3 m/s everywhere (constant-speed sampling, survey.synthetic.sample_path)
    s_true = np.interp(p.time_s, TRAJ.time_s, TRAJ.chainage_m)
    k_true = np.interp(s_true, TRAJ.chainage_m, TRAJ.curvature_per_m)
    turn = k_true > 0.06
    return np.median(p.speed_mps[turn]) / 1.3 - 1.0


def test_speed_through_turns_is_less_cut_short_with_the_twicing_correction():
    # Corner cutting makes a linear smoother's speed low in tight turns; twicing (Tukey 1977)
    # removes part of that bias (at least a fifth asked here; measured on these seeds: median
    # -26 % uncorrected, -18 % corrected -- still short, see the accuracy benchmark).
    plain = [_turn_speed_error(_profile(s, speed_bias="none")) for s in SEEDS]
    twice = [_turn_speed_error(_profile(s)) for s in SEEDS]
    assert np.median(plain) < 0 and abs(np.median(twice)) < 0.8 * abs(np.median(plain)), (plain, twice)


def test_chainage_is_less_short_with_the_twicing_correction():
    # true length from the closed-form alignment (survey.synthetic.alignment_curve)
    plain = [_profile(s, speed_bias="none").settings["path_length_m"] / TRAJ.length_m - 1 for s in SEEDS]
    twice = [_profile(s).settings["path_length_m"] / TRAJ.length_m - 1 for s in SEEDS]
    assert abs(np.median(twice)) < abs(np.median(plain)), (plain, twice)


def test_without_stated_accuracy_the_wander_is_not_fitted_far_above_the_truth():
    # Truth: phone grade = 3 m wander 1-sigma per axis, i.e. 9 m^2 (survey.synthetic.GNSS_GRADES,
    # sized from REFERENCES.md "GNSS accuracy"). Before the wander bound the free fit found
    # 24-37 m^2 on these logs (the wander soaked up the turns); a factor 1.5 either way is asked.
    true_var = S.GNSS_GRADES["phone"][1] ** 2
    fitted = [_profile(s, with_accuracy=False).settings["wander_var_h_m2"] for s in SEEDS]
    assert all(true_var / 1.5 <= v <= 1.5 * true_var for v in fitted), fitted


@pytest.mark.xfail(strict=True, reason="known shortfall: at the turn stations 3.7-13.2 % of 8 m turns are "
                   "claimed sharper than 6 m at 95 % (seeds 100-102, noise-draw seeds 0-3, with and without "
                   "stated accuracy); the 1-sigma from repeated-noise draws does not hold the smoother's "
                   "bias at a hairpin apex, where the estimate is sharper than the truth")
def test_turn_stations_are_rarely_claimed_sharper_than_6_m_whatever_the_noise_draws():
    # Stations in the turns only (true kappa = 1/8 per metre there, closed form; located at the
    # same time on the true path): kappa > 1/6 + 1.64 sigma is a false one-sided 95 % claim and
    # must stay at no more than ~5 % of them on every log, with or without stated accuracy, and
    # whichever seed the uncertainty's repeated-noise draws use (the claim must not depend on it).
    fractions = []
    for with_accuracy in (True, False):
        for draw_seed in range(4):
            for seed in SEEDS:
                p = _profile(seed, with_accuracy=with_accuracy, seed=draw_seed)
                s_true = np.interp(p.time_s, TRAJ.time_s, TRAJ.chainage_m)
                turn = np.interp(s_true, TRAJ.chainage_m, TRAJ.curvature_per_m) > 0.06
                fractions.append(np.mean((p.curvature_per_m - 1.0 / 6.0 > 1.64 * p.curvature_sd_per_m)[turn]))
    assert max(fractions) <= 0.05, fractions

def test_each_hairpin_turns_the_heading_by_half_a_turn_per_metre_of_reported_chainage():
    # A 180-degree turn changes the heading by pi, and the integral of plan curvature over arc
    # length is the heading change (fundamental theorem of plane curves, textbook fact). The
    # stations sit 1 m apart on the reported chainage, so the sum of plan curvature over a turn
    # must come to pi: curvature is per metre of that chainage. Measured median of |sum| / pi
    # over the 4 turns x 4 logs of seeds 100-103, 104-107, 108-111: 1.009, 1.038, 1.016 (1.074,
    # 1.093, 1.069 when curvature was per metre of the smoothed path's own, corner-cut, length).
    ratios = []
    for seed in (100, 101, 102, 103):
        p = _profile(seed)
        # leg midpoints of the closed-form alignment (survey.synthetic.switchback_curve:
        # 20 m lead-in, then 4 x (8 pi m arc + 40 m leg)) separate the turns
        bounds = [10.0] + [20 + i * (8 * np.pi + 40) + 8 * np.pi + 20 for i in range(4)]
        for a, b in zip(bounds[:-1], bounds[1:]):
            turn = (p.chainage_m >= a) & (p.chainage_m < b)
            ratios.append(abs(np.sum(p.plan_curvature_per_m[turn])) / np.pi)
    assert abs(np.median(ratios) - 1.0) <= 0.05, np.round(ratios, 3)
