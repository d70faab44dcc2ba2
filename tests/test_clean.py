"""Cleaning: every change to the log is counted; impossible jumps are flagged, real bends are not."""

import numpy as np
import pytest

from survey.clean import clean_track, jump_suspects
from survey.errors import InputError
from survey.track import make_track

LAT0, LON0 = 52.0, 5.0
M_PER_DEG_LAT = 111_250.0  # about 111.25 km per degree of latitude near 52 N (common practice)


def track_from_metres(t, north_m, east_m=None, h=None, segment=None):
    """A Track whose fixes lie ``north_m``/``east_m`` metres from (LAT0, LON0) (small offsets)."""
    north_m = np.asarray(north_m, float)
    east_m = np.zeros_like(north_m) if east_m is None else np.asarray(east_m, float)
    lat = LAT0 + north_m / M_PER_DEG_LAT
    lon = LON0 + east_m / (M_PER_DEG_LAT * np.cos(np.radians(LAT0)))
    return make_track("walk.csv", "csv", t, lat, lon, h, segment=segment)


def test_exact_duplicate_fixes_are_dropped_and_counted():
    t = [0, 1, 1, 2, 3]
    track = track_from_metres(t, [0, 1, 1, 2, 3])
    cleaned, report = clean_track(track)
    assert len(cleaned) == 4
    assert report.exact_duplicates == 1
    assert report.same_time_conflicts == 0


def test_same_time_different_position_keeps_the_first_and_counts():
    track = track_from_metres([0, 1, 1, 2], [0, 1, 5, 2])
    cleaned, report = clean_track(track)
    assert report.same_time_conflicts == 1
    np.testing.assert_allclose((cleaned.lat_deg - LAT0) * M_PER_DEG_LAT, [0, 1, 2], atol=1e-6)


def test_out_of_order_fixes_are_sorted_and_counted():
    track = track_from_metres([0, 2, 1, 3, 4], [0, 2, 1, 3, 4])
    cleaned, report = clean_track(track)
    assert np.all(np.diff(cleaned.time_s) > 0)
    assert report.out_of_order == 1


def test_time_jumping_backwards_beyond_the_gap_limit_is_refused_naming_the_fix():
    track = track_from_metres([1000, 1001, 1002, 10, 11], [0, 1, 2, 3, 4])
    with pytest.raises(InputError, match=r"walk\.csv: fix 4: time goes backwards"):
        clean_track(track, gap_s=30)


def test_gaps_longer_than_the_limit_start_new_segments():
    t = np.r_[np.arange(10), 100 + np.arange(10), 300 + np.arange(10)]
    track = track_from_metres(t, np.arange(30) * 1.4)
    cleaned, report = clean_track(track, gap_s=30)
    assert report.segments == 3 and report.gap_splits == 2
    assert list(np.unique(cleaned.segment)) == [0, 1, 2]


def test_source_segments_are_kept_and_not_counted_as_gaps():
    track = track_from_metres(np.arange(6), np.arange(6), segment=[0, 0, 0, 1, 1, 1])
    cleaned, report = clean_track(track)
    assert report.segments == 2 and report.gap_splits == 0


def test_untimed_fixes_in_a_timed_log_are_dropped_and_counted():
    track = track_from_metres([0, 1, np.nan, 3], [0, 1, 2, 3])
    cleaned, report = clean_track(track)
    assert len(cleaned) == 3 and report.untimed_dropped == 1


def test_a_multipath_jump_is_flagged_and_nothing_else():
    rng = np.random.default_rng(7)
    t = np.arange(600.0)
    north = 1.4 * t + rng.normal(0, 1.0, t.size)  # walking, 1 m white noise
    east = rng.normal(0, 1.0, t.size)
    east[300] += 60.0  # a 60 m multipath excursion for one fix
    suspect = jump_suspects(track_from_metres(t, north, east))
    assert list(np.flatnonzero(suspect)) == [300]


def test_a_sharp_but_real_bend_is_not_flagged():
    # A car at 15 m/s through a 30 m radius bend at 1 Hz pulls v^2/R = 7.5 m/s^2 (a = v^2/R,
    # physics); with 0.5 m receiver noise this is legitimate motion, not a jump.
    rng = np.random.default_rng(3)
    t = np.arange(200.0)
    s = 15.0 * t
    r = 30.0
    arc_start, arc_len = 1000.0, np.pi * r  # half-turn
    north = np.where(s < arc_start, s, arc_start + r * np.sin(np.clip((s - arc_start) / r, 0, np.pi)))
    east = np.where(s < arc_start, 0.0, r - r * np.cos(np.clip((s - arc_start) / r, 0, np.pi)))
    after = s > arc_start + arc_len
    north = np.where(after, arc_start - (s - arc_start - arc_len), north)
    east = np.where(after, 2 * r, east)
    north += rng.normal(0, 0.5, t.size)
    east += rng.normal(0, 0.5, t.size)
    assert not jump_suspects(track_from_metres(t, north, east)).any()


def test_report_counts_add_up():
    track = track_from_metres([0, 1, 1, 1, 2, 4, 3], [0, 1, 1, 7, 2, 4, 3])
    cleaned, report = clean_track(track)
    assert report.fixes_read == 7
    assert report.fixes_kept == len(cleaned) == 7 - report.exact_duplicates - report.same_time_conflicts


def test_a_jump_is_found_in_irregularly_sampled_fixes():
    rng = np.random.default_rng(21)
    t = np.cumsum(rng.uniform(0.3, 2.0, 400))  # irregular 0.5-3 Hz logging
    north = 5.0 * t + rng.normal(0, 0.3, t.size)
    east = 0.002 * t**2 + rng.normal(0, 0.3, t.size)
    north[123] -= 25.0
    suspect = jump_suspects(track_from_metres(t, north, east))
    assert list(np.flatnonzero(suspect)) == [123]


def test_standing_still_with_noise_flags_no_jumps():
    rng = np.random.default_rng(4)
    t = np.arange(900.0)
    suspect = jump_suspects(track_from_metres(t, rng.normal(0, 3, t.size), rng.normal(0, 3, t.size)))
    assert not suspect.any()


def _suspects_by_direct_prediction(t, north, east, segment, z=8.0, passes=4):
    """Reference for ``jump_suspects``: every pass predicts every remaining interior fix afresh
    with scipy.interpolate.lagrange through its two neighbours on each side (a loop over fixes).
    It leaves out the bend test (``survey.jump_shape``): at 0.5-1.5 s between fixes on this
    log's gentle bend every peak is beyond what motion at 1 g can make or has a jump's pattern,
    so the two must agree."""
    from scipy.interpolate import lagrange

    suspect = np.zeros(t.size, bool)
    for _ in range(passes):
        idx = np.flatnonzero(~suspect)
        full = np.zeros(idx.size)
        resid = []
        for p in range(2, idx.size - 2):
            nb = idx[[p - 2, p - 1, p + 1, p + 2]]
            if np.any(segment[nb] != segment[idx[p]]) or np.any(np.diff(t[idx[p - 2 : p + 3]]) <= 0):
                continue
            r = [y[idx[p]] - lagrange(t[nb] - t[idx[p]], y[nb])(0.0) for y in (east, north)]
            resid += r
            full[p] = np.hypot(*r)
        d = np.array(resid)
        sigma = 1.4826 * np.median(np.abs(d - np.median(d)))  # MAD (Rousseeuw & Croux 1993)
        peak = (full >= np.r_[0.0, full[:-1]]) & (full >= np.r_[full[1:], 0.0])
        bad = (full > z * sigma) & peak
        if not bad.any():
            break
        suspect[idx[bad]] = True
    return suspect


def test_clusters_of_jumps_are_peeled_pass_by_pass_as_a_fresh_prediction_finds():
    # reference: a direct per-fix prediction repeated in full every pass (scipy's Lagrange
    # polynomial); jump_suspects predicts again only next to the fixes it has just removed
    rng = np.random.default_rng(11)
    t = np.cumsum(rng.uniform(0.5, 1.5, 500))
    north = 3.0 * t + rng.normal(0, 0.5, t.size)
    east = 20.0 * np.sin(t / 40.0) + rng.normal(0, 0.5, t.size)
    segment = np.where(np.arange(t.size) < 260, 0, 1)
    east[[100, 101, 102]] += [40.0, 45.0, 38.0]  # a cluster: found one by one
    north[[200, 202]] -= [30.0, 33.0]
    east[[257, 258, 262]] += 25.0  # next to the segment change
    track = track_from_metres(t, north, east, segment=segment)
    got = jump_suspects(track)
    want = _suspects_by_direct_prediction(t, north, east, segment)
    assert np.flatnonzero(got).tolist() == np.flatnonzero(want).tolist()
    assert jump_suspects(track, passes=1).sum() < got.sum()  # later passes found more


def test_a_jump_at_a_segment_end_is_flagged_and_not_its_good_neighbours():
    # The two end fixes have no window of their own (survey.jump_ends): the jump is put on the
    # fix that made it, found by construction, and no good fix is flagged.
    rng = np.random.default_rng(12)
    t = np.arange(300.0)
    north = 1.4 * t + rng.normal(0, 0.3, t.size)
    east = rng.normal(0, 0.3, t.size)
    east[-2] += 30.0  # the second-to-last fix
    north[1] -= 30.0  # the second fix
    assert np.flatnonzero(jump_suspects(track_from_metres(t, north, east))).tolist() == [1, t.size - 2]


def test_a_jump_in_a_six_fix_segment_is_placed_from_that_segment_alone():
    # The end test may only use the segment's own fixes: a short segment must not borrow the
    # next segment's first fix (a new track segment of the log, a second later but 400 m on).
    # The jump is put in by construction.
    rng = np.random.default_rng(21)
    t = np.r_[np.arange(6.0), 6.0 + np.arange(300.0)]
    segment = np.r_[np.zeros(6, int), np.ones(300, int)]
    north = np.r_[1.4 * np.arange(6.0), 400.0 + 1.4 * np.arange(300.0)] + rng.normal(0, 0.3, t.size)
    east = rng.normal(0, 0.3, t.size)
    east[1] += 30.0
    suspect = jump_suspects(track_from_metres(t, north, east, segment=segment))
    assert np.flatnonzero(suspect).tolist() == [1]
