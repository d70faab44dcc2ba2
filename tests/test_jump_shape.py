"""Telling a jump from a bend that the fixes are too sparse to follow (survey.jump_shape).

Expected values are closed forms: Lagrange interpolation weights, Taylor's remainder, and the
share formula's sums for the patterns named in each test."""

import numpy as np
import pytest

from survey import synthetic as S
from survey.clean import jump_suspects
from survey.frame import LocalFrame
from survey.jump_ends import lagrange_weights
from survey.jump_shape import MAX_ACCEL_MPS2, jump_share, jumps_among, motion_residual_bound
from survey.smooth import screen_outliers
from test_clean import track_from_metres

FRAME = LocalFrame.enu(46.5, 7.6, 800.0)  # invented site


def _chain(n):
    return np.arange(n)


def test_a_lone_jump_explains_all_of_the_residuals_around_it():
    # closed form: a jump d at fix i leaves the five windows c d with c = (1/6, -2/3, 1, -2/3, 1/6)
    # (minus the Lagrange weights of fix i in its neighbours' cubics), so the share is exactly 1
    t = np.arange(30.0)
    east, north = 2.0 * t, np.zeros_like(t)
    north[15] += 7.0
    assert jump_share(t, (east, north), _chain(30), [15]) == pytest.approx(1.0, abs=1e-12)


def test_a_steady_arc_leaves_residuals_no_jump_explains():
    # closed form: the jump pattern sums to zero, so five equal residuals project to nothing; on
    # an arc the residual turns by the angle between fixes, leaving (2 x 0.3 rad)^2-order terms
    t = np.arange(30.0)
    theta = 0.3 * t
    share = jump_share(t, (40 * np.cos(theta), 40 * np.sin(theta)), _chain(30), [15])
    assert share[0] < 1e-3


def test_a_kink_at_a_fix_looks_like_a_jump():
    # closed form: a corner at fix i leaves residuals (0, 1/3, -2/3, 1/3, 0) x its size, share
    # (10/9)^2 / (35/18 x 2/3) = 20/21
    t = np.arange(30.0)
    share = jump_share(t, (np.abs(t - 15.0), t), _chain(30), [15])
    assert share[0] == pytest.approx(20.0 / 21.0, rel=1e-12)


def test_too_few_windows_at_a_chain_end_cannot_show_a_pattern():
    t = np.arange(30.0)
    share = jump_share(t, (t, np.zeros_like(t)), _chain(30), [0, 1, 2, 29])
    assert share.tolist() == [1.0, 1.0, 1.0, 1.0]


def test_windows_do_not_cross_a_segment_change():
    # fix 10 is the second of a new segment: only the windows centred on 11 and 12 lie in it
    t = np.arange(30.0)
    north = np.zeros_like(t)
    north[10] += 5.0
    seg = (t >= 9).astype(int)
    assert jump_share(t, (t, north), _chain(30), [10], seg)[0] == 1.0
    assert jump_share(t, (t, north), _chain(30), [10])[0] == pytest.approx(1.0)


def test_motion_bound_for_even_spacing_is_four_thirds_a_dt_squared():
    # closed form: (A/2) sum |w_k| (t_k - t_i)^2 with w = (-1/6, 2/3, 2/3, -1/6) at -2dt..2dt
    dt = 2.0
    t = dt * np.arange(10.0)
    bound = motion_residual_bound(t, _chain(10), np.array([4, 0]), 5.0)
    assert bound[0] == pytest.approx(4.0 / 3.0 * 5.0 * dt**2)
    assert bound[1] == np.inf  # no window at the chain's first fix


def test_circular_motion_stays_inside_its_motion_bound():
    # steady motion on a circle has acceleration v^2 / R (closed form); whatever the spacing, its
    # cubic prediction residual must not exceed the bound. 10 m radius at 15 m/s, 0.5-2 s
    # between fixes: 0.75-3 rad of the circle per interval, far beyond the small-step residual
    # R (omega dt)^4 / 6
    t = np.cumsum(np.random.default_rng(3).uniform(0.5, 2.0, 40))
    r_m, v = 10.0, 15.0
    theta = v / r_m * t
    east, north = r_m * np.cos(theta), r_m * np.sin(theta)
    places = np.arange(2, len(t) - 2)
    bound = motion_residual_bound(t, _chain(len(t)), places, v * v / r_m)
    nodes = [places + q for q in (-2, -1, 1, 2)]
    w = lagrange_weights(tuple(t[i] for i in nodes), t[places])
    res = np.hypot(east[places] - sum(wk * east[i] for wk, i in zip(w, nodes)),
                   north[places] - sum(wk * north[i] for wk, i in zip(w, nodes)))
    assert np.all(res <= bound)
    assert np.max(res / bound) > 0.25  # and the bound is not vacuous here (measured 0.34)


def test_a_candidate_in_a_window_no_motion_can_make_is_a_jump_whatever_its_pattern():
    # a kink-free pattern (share 0) but a residual beyond noise + (4/3) g dt^2 at 10 Hz
    t = 0.1 * np.arange(30.0)
    east, north = t.copy(), np.zeros_like(t)
    marks = np.zeros(30, bool)
    got = jumps_among(t, (east, north), _chain(30), np.array([15]), np.array([5.0]), 1.0, marks)
    assert got.tolist() == [True]
    assert np.flatnonzero(marks).tolist() == [13, 14, 15, 16, 17]  # its window, kept for later passes


def _sparse_drive(rate_hz, seed=5, grade="dual"):
    pieces, _ = S.random_drive_pieces(3000.0, np.random.default_rng([seed, 777]))
    traj = S.sample_path(S.alignment_curve(pieces), 15.0, rate_hz)
    return S.add_gnss_error(traj, grade, np.random.default_rng(1))


def test_bends_of_a_half_hertz_drive_are_not_taken_for_jumps():
    # 30 m between fixes on 40-600 m radii: the peak test alone flagged 9 of these 107 good
    # fixes (measured before this test); none is a jump by construction
    f = _sparse_drive(0.5)
    assert not jump_suspects(S.fixes_to_track(f, FRAME.inverse)).any()
    assert not screen_outliers(f.time_s, f.enu_m[:, :2]).any()


def test_jumps_in_a_half_hertz_drive_are_still_found():
    f = _sparse_drive(0.5)
    f = S.add_outliers(f, 0.03, 30.0, np.random.default_rng(2))
    got = jump_suspects(S.fixes_to_track(f, FRAME.inverse))
    assert np.array_equal(got, f.outlier)


def test_a_run_of_jumps_at_ten_hertz_is_found_as_before():
    # a window no motion can make: the peak test alone decides (jumps two places apart spoil
    # each other's pattern, and the good fix between them peaks first)
    rng = np.random.default_rng(8)
    t = 0.1 * np.arange(400.0)
    north = 20.0 * t + rng.normal(0, 0.2, t.size)
    east = rng.normal(0, 0.2, t.size)
    east[[200, 202]] += 30.0
    got = set(np.flatnonzero(jump_suspects(track_from_metres(t, north, east))).tolist())
    assert {200, 202} <= got


def test_screen_without_time_lets_the_pattern_decide():
    # chainage as the parameter: no acceleration bound, a lone jump still explains its windows
    rng = np.random.default_rng(9)
    s = np.arange(60.0)
    Y = np.column_stack([s, np.zeros_like(s)]) + rng.normal(0, 0.3, (60, 2))
    Y[30, 1] += 20.0
    assert np.flatnonzero(screen_outliers(s, Y, max_accel=None)).tolist() == [30]


def test_the_acceleration_bound_is_one_standard_gravity():
    # standard gravity, 9.80665 m/s^2 (CGPM 1901; common practice for "1 g")
    assert MAX_ACCEL_MPS2 == 9.80665
