"""Path length of raw fixes: geodesic agreement and no length from standing still."""

import numpy as np
from geographiclib.geodesic import Geodesic

from survey.frame import LocalFrame
from survey.length import path_length
from survey.track import make_track


def test_plan_length_matches_geodesic_sum_within_0_1_percent_over_50_km():
    # Oracle: sum of geographiclib geodesic distances between consecutive fixes (Karney 2013,
    # J. Geodesy 87:43-55). A winding 50 km route at ellipsoid height 0, one fix per ~50 m.
    geod = Geodesic.WGS84
    lat, lon = [60.1], [24.9]
    azimuth = 30.0
    for k in range(1000):
        azimuth += 25.0 * np.sin(k / 40.0)
        g = geod.Direct(lat[-1], lon[-1], azimuth, 50.0)
        lat.append(g["lat2"])
        lon.append(g["lon2"])
    lat, lon = np.array(lat), np.array(lon)
    truth = sum(geod.Inverse(lat[i], lon[i], lat[i + 1], lon[i + 1])["s12"] for i in range(len(lat) - 1))
    track = make_track("route.gpx", "gpx-1.1", np.arange(len(lat)) * 5.0, lat, lon, np.zeros(len(lat)))
    frame = LocalFrame.for_track(track)
    enu = np.column_stack(frame.forward(lat, lon, track.height_m))
    result = path_length(enu, track.segment, track.time_s)
    assert abs(result.plan_length_m / truth - 1) < 1e-3


def test_standing_still_with_receiver_noise_adds_almost_no_length():
    # Ten minutes at one spot with 3 m (1-sigma) horizontal noise at 1 Hz. Summing raw steps
    # would give about 600 * 3 * sqrt(pi) ~ 3 km (mean of a Rayleigh step, closed form).
    rng = np.random.default_rng(11)
    n = 600
    enu = np.column_stack([rng.normal(0, 3, n), rng.normal(0, 3, n), rng.normal(0, 5, n)])
    naive = np.linalg.norm(np.diff(enu, axis=0), axis=1).sum()
    result = path_length(enu, np.zeros(n, np.int32), np.arange(n, dtype=float), np.full(n, 3.0))
    assert naive > 2000
    assert result.length_3d_m < 0.02 * naive


def test_a_stop_in_the_middle_of_a_walk_does_not_lengthen_it():
    # 500 m walked at 1.25 m/s, a 5-minute stop, 500 m more; 0.5 m receiver noise.
    rng = np.random.default_rng(5)
    leg = np.arange(400) * 1.25
    north = np.r_[leg, np.full(300, 500.0), 500.0 + leg]
    enu = np.column_stack([rng.normal(0, 0.5, north.size), north + rng.normal(0, 0.5, north.size), np.zeros(north.size)])
    t = np.arange(north.size, dtype=float)
    result = path_length(enu, np.zeros(north.size, np.int32), t, np.full(north.size, 0.5))
    moving_only = path_length(np.delete(enu, np.s_[400:700], axis=0), np.zeros(north.size - 300, np.int32),
                              np.delete(t, np.s_[400:700]), None)
    assert abs(result.plan_length_m - moving_only.plan_length_m) < 10.0
    # Debiased stride steps are unbiased to second order (closed form); 2 % allows for the
    # noise-sigma estimate and the ends of the stop.
    assert abs(result.plan_length_m / 1000.0 - 1) < 0.02


def test_receiver_noise_while_moving_does_not_lengthen_the_path():
    # 1 km walked at 1.25 m/s past 1 m white noise: raw steps of 1.25 m are inflated by about
    # sqrt(1.25^2 + 4 * 1^2) / 1.25 - 1 ~ 89 % in RMS (difference of two fixes, closed form).
    rng = np.random.default_rng(9)
    s = np.arange(800) * 1.25
    theta = s / 150.0  # a gentle 150 m radius bend
    enu = np.column_stack([150 * np.sin(theta), 150 * (1 - np.cos(theta)), np.zeros(s.size)])
    enu[:, :2] += rng.normal(0, 1.0, (s.size, 2))
    raw = np.linalg.norm(np.diff(enu[:, :2], axis=0), axis=1).sum()
    result = path_length(enu, np.zeros(s.size, np.int32), np.arange(s.size, dtype=float))
    truth = s[-1]
    assert raw > 1.3 * truth
    assert abs(result.plan_length_m / truth - 1) < 0.02


def test_no_length_is_counted_between_segments():
    enu = np.array([[0, 0, 0], [10, 0, 0], [1000, 0, 0], [1010, 0, 0]], float)
    result = path_length(enu, np.array([0, 0, 1, 1], np.int32))
    assert result.plan_length_m == 20.0
