"""Our profile against the standard reference the issue's targets are set against.

The standard is a per-axis constant-jerk Kalman filter + Rauch-Tung-Striebel smoother with its
noise chosen by maximum likelihood (benchmarks/standard_rts.py), built on the reference library
filterpy (KalmanFilter.batch_filter, rts_smoother, Q_continuous_white_noise). Truth comes from
the closed forms in survey.synthetic (helix: kappa = a/(a^2+c^2), do Carmo 1976; REFERENCES.md).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

pytest.importorskip("filterpy")  # test extra: the reference smoother is built on it
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "benchmarks"))

from standard_rts import standard_kappa_tau  # noqa: E402

from survey import synthetic as S  # noqa: E402
from survey.clean import clean_track  # noqa: E402
from survey.frame import LocalFrame  # noqa: E402
from survey.profile_build import build_profile  # noqa: E402

FRAME = LocalFrame.enu(46.5, 7.6, 800.0)  # invented site


def _kappa_error_by_time(traj: S.Trajectory, time_s: np.ndarray, kappa_per_m: np.ndarray) -> float:
    """Median relative kappa error on the curved part, each estimate against the exact kappa of
    the true path where the mover was at the estimate's time (one yardstick for both methods)."""
    true = traj.truth_at_chainage(np.interp(time_s, traj.time_s, traj.chainage_m))["curvature_per_m"]
    curved = true > 0.5 * np.max(true)
    return float(np.median(np.abs(kappa_per_m[curved] / true[curved] - 1.0)))


def test_our_profile_curvature_is_no_worse_than_the_standard_ml_rts_smoother_on_the_phone_helix():
    # The phone case: helix a = 50 m, c = 5 m/rad, 3 turns at 10 m/s, 10 Hz; phone-grade
    # error (1.5 m white + 3 m / 60 s wander per axis, heights x1.6: survey.synthetic.GNSS_GRADES).
    # Closed-form truth kappa = a/(a^2+c^2) = 0.0198 1/m (do Carmo 1976). Medians over three
    # noise draws. Measured on draws [seed, 77] for seeds 0-29 with the profile of commit c371d8a:
    # per-seed ratio standard/ours 1.10-2.29 (ours better on all 30); median-of-3 ratio 1.40-2.29
    # over the ten disjoint triples, at least 1.25 over every run of three consecutive seeds;
    # seeds 0-2 give medians ours 4.6 %, standard 7.1 %. (Before the turn-aware prior, da74310,
    # the worst run of three was 1.015: the test held then too, with little room.)
    traj = S.helix(50.0, 5.0, 10.0, 10.0, 3.0)
    ours, standard = [], []
    for seed in (0, 1, 2):
        fixes = S.add_gnss_error(traj, "phone", np.random.default_rng([seed, 77]))
        track, _ = clean_track(S.fixes_to_track(fixes, FRAME.inverse))
        e, n, u = FRAME.forward(track.lat_deg, track.lon_deg, track.height_m)
        profile = build_profile(track, np.column_stack([e, n, u]), FRAME)
        ours.append(_kappa_error_by_time(traj, profile.time_s, profile.curvature_per_m))
        t, kappa, _ = standard_kappa_tau(fixes.time_s, fixes.enu_m)
        standard.append(_kappa_error_by_time(traj, t, kappa))
    assert np.median(ours) <= np.median(standard), (ours, standard)


def test_standard_smoother_recovers_the_radius_of_steady_circular_motion():
    # Closed form: constant speed v on a circle of radius R has a = v^2/R, so kappa = |v x a|/|v|^3
    # = 1/R (common practice; REFERENCES.md "Steady circular motion"). R = 50 m, 10 m/s, 10 Hz with
    # +-30 % timing jitter and a 3 s outage (each step's own dt must be used), 1 mm white noise.
    # Tolerances: over generator seeds 0-11 (0-2 also without jitter) the median |kappa R - 1|
    # was 0.04-0.09 % and its maximum 2 s away from the ends 0.18-0.37 % (seed 5: 0.09 %, 0.35 %);
    # the bounds are more than twice the worst of those. A filter built on the nominal 0.1 s step
    # instead of each step's own gives 3-4 % median and a 12x error after the outage.
    radius_m = 50.0
    rng = np.random.default_rng(5)
    traj = S.helix(radius_m, 0.0, 10.0, 10.0, 1.0, jitter=0.3, rng=rng)
    fixes = S.add_gnss_error(traj, "rtk", rng, white_m=0.001, wander_m=0.0)
    fixes = S.add_outage(fixes, 10.0, 3.0)
    t, kappa, _ = standard_kappa_tau(fixes.time_s, fixes.enu_m)
    inner = (t > t[0] + 2.0) & (t < t[-1] - 2.0)  # the smoother's two ends see one side only
    rel = np.abs(kappa[inner] * radius_m - 1.0)
    assert np.median(rel) <= 0.002
    assert np.max(rel) <= 0.01


def test_standard_maximum_likelihood_recovers_the_white_position_noise_variance():
    # The road alignment at 10 Hz (640 fixes) with white receiver error only, 0.15 m per
    # horizontal axis and 0.15 x 1.7 m vertically (survey.synthetic.GNSS_GRADES "dual", wander
    # left out): the ML r of each axis group must be that variance. A variance estimated from n
    # Gaussian draws has a relative 1-sigma of sqrt(2/n) (chi-square, closed form): about 4 % for
    # the two horizontal axes, 5.6 % vertically; 20 % is 3.5 sigma of the vertical one. Measured
    # over draws [seed, 9], seeds 0-9: horizontal 0.96-1.11 x, vertical 0.95-1.15 x.
    from standard_rts import standard_fit

    fixes = S.add_gnss_error(S.road_alignment(), "dual", np.random.default_rng([0, 9]), wander_m=0.0)
    noise = standard_fit(fixes.time_s, fixes.enu_m)["noise"]
    assert noise["horizontal"][1] == pytest.approx(0.15**2, rel=0.2)
    assert noise["vertical"][1] == pytest.approx((0.15 * 1.7) ** 2, rel=0.2)
