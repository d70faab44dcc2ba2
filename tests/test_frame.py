"""Local metric frame: checked against pymap3d and by round trips."""

import numpy as np
import pymap3d
import pytest
from geographiclib.geodesic import Geodesic

from survey.errors import InputError
from survey.frame import LocalFrame, utm_crs_for
from survey.track import make_track

ORIGIN = (47.25, 11.40, 650.0)  # arbitrary alpine-valley origin for the checks


def _fan_of_points(n=200, radius_m=25_000.0, seed=1):
    """Points scattered up to ``radius_m`` from ORIGIN (placed with geographiclib's direct problem)."""
    rng = np.random.default_rng(seed)
    az = rng.uniform(-180, 180, n)
    dist = rng.uniform(0, radius_m, n)
    lat = np.empty(n)
    lon = np.empty(n)
    for i in range(n):
        g = Geodesic.WGS84.Direct(ORIGIN[0], ORIGIN[1], az[i], dist[i])
        lat[i], lon[i] = g["lat2"], g["lon2"]
    h = ORIGIN[2] + rng.uniform(-400, 1500, n)
    return lat, lon, h


def test_enu_matches_pymap3d_within_a_millimetre():
    # Oracle: pymap3d.geodetic2enu (independent implementation of geodetic -> ENU).
    lat, lon, h = _fan_of_points()
    frame = LocalFrame.enu(*ORIGIN)
    e, n, u = frame.forward(lat, lon, h)
    e_ref, n_ref, u_ref = pymap3d.geodetic2enu(lat, lon, h, *ORIGIN)
    err = np.sqrt((e - e_ref) ** 2 + (n - n_ref) ** 2 + (u - u_ref) ** 2)
    assert err.max() < 1e-3


def test_enu_round_trip_error_below_a_millimetre_over_50_km():
    # Issue requirement: inverse back to lat/lon/height with < 1 mm error over a 50 km track.
    lat, lon, h = _fan_of_points(radius_m=25_000.0)
    frame = LocalFrame.enu(*ORIGIN)
    lat2, lon2, h2 = frame.inverse(*frame.forward(lat, lon, h))
    # Express the geodetic error in metres with geographiclib (Karney 2013).
    horiz = np.array([Geodesic.WGS84.Inverse(a, b, c, d)["s12"] for a, b, c, d in zip(lat, lon, lat2, lon2)])
    assert np.max(np.hypot(horiz, h2 - h)) < 1e-3


def test_enu_origin_maps_to_zero():
    # Definition of a topocentric frame: the origin is (0, 0, 0).
    frame = LocalFrame.enu(*ORIGIN)
    e, n, u = frame.forward(np.array([ORIGIN[0]]), np.array([ORIGIN[1]]), np.array([ORIGIN[2]]))
    assert np.allclose([e[0], n[0], u[0]], 0.0, atol=1e-6)


def test_projected_frame_round_trip_below_a_millimetre():
    lat, lon, h = _fan_of_points()
    frame = LocalFrame.projected("EPSG:32632", *ORIGIN)
    lat2, lon2, h2 = frame.inverse(*frame.forward(lat, lon, h))
    horiz = np.array([Geodesic.WGS84.Inverse(a, b, c, d)["s12"] for a, b, c, d in zip(lat, lon, lat2, lon2)])
    assert horiz.max() < 1e-3
    assert np.array_equal(h2, h)  # heights pass through a projected frame unchanged


def test_projected_frame_keeps_distances_within_utm_scale_error():
    # UTM scale factor lies between 0.9996 and about 1.0010 inside a zone (common practice):
    # grid distance vs geodesic distance (geographiclib) must agree within 0.1 %.
    frame = LocalFrame.projected("EPSG:32632", *ORIGIN)
    g = Geodesic.WGS84.Direct(ORIGIN[0], ORIGIN[1], 60.0, 10_000.0)
    e, n, _ = frame.forward(np.array([ORIGIN[0], g["lat2"]]), np.array([ORIGIN[1], g["lon2"]]))
    grid = np.hypot(np.diff(e)[0], np.diff(n)[0])
    assert abs(grid / 10_000.0 - 1) < 1e-3


def test_automatic_utm_zone_follows_the_six_degree_rule():
    # UTM zone number = floor((lon + 180) / 6) + 1; northern hemisphere WGS 84 zones are
    # EPSG:326NN, southern EPSG:327NN (common practice, EPSG registry).
    north = make_track("t", "csv", [0, 1], [47.2, 47.3], [11.4, 11.5])
    south = make_track("t", "csv", [0, 1], [-33.9, -33.8], [151.1, 151.2])
    assert utm_crs_for(north) == "EPSG:32632"
    assert utm_crs_for(south) == "EPSG:32756"


def test_geographic_crs_is_refused_with_a_clear_message():
    with pytest.raises(InputError, match="not a projected CRS"):
        LocalFrame.projected("EPSG:4326", *ORIGIN)


def test_unknown_crs_is_refused_with_a_clear_message():
    with pytest.raises(InputError, match="not a coordinate reference system"):
        LocalFrame.projected("EPSG:99999999", *ORIGIN)


def test_default_origin_is_the_centre_of_the_extent_at_median_height():
    track = make_track("t", "csv", [0, 1, 2], [10.0, 10.2, 10.1], [20.0, 20.4, 20.1], [5.0, 7.0, 100.0])
    frame = LocalFrame.for_track(track)
    assert (frame.origin_lat_deg, frame.origin_lon_deg, frame.origin_h_m) == pytest.approx((10.1, 20.2, 7.0))


def test_default_origin_takes_the_short_way_across_the_antimeridian():
    track = make_track("t", "csv", [0, 1], [-16.0, -16.1], [179.9, -179.9])
    frame = LocalFrame.for_track(track)
    assert abs(abs(frame.origin_lon_deg) - 180.0) < 0.2


def test_true_north_course_in_a_utm_grid_turns_by_the_meridian_convergence():
    # Oracle: PROJ's own analytic projection factors (pyproj Proj.get_factors): meridian
    # convergence 2.55 deg and point scale k at 61.7 N, 11.9 E in UTM zone 32N (central meridian
    # 9 E). East of the central meridian in the northern hemisphere true north lies west of grid
    # north (common practice), so a true-north course has grid azimuth -convergence.
    from pyproj import CRS, Proj

    factors = Proj(CRS("EPSG:32632")).get_factors(11.9, 61.7)
    frame = LocalFrame.projected("EPSG:32632", 61.7, 11.9, 0.0)
    ve, vn = frame.ground_velocity(np.array([61.7]), np.array([11.9]), np.array([10.0]), np.array([0.0]))
    assert np.degrees(np.arctan2(ve[0], vn[0])) == pytest.approx(-factors.meridian_convergence, abs=1e-6)
    assert np.hypot(ve[0], vn[0]) == pytest.approx(10.0 * factors.meridional_scale, rel=1e-7)


def test_true_east_course_far_from_the_enu_origin_follows_the_geodesic_east():
    # Oracle: geographiclib (a geodesic 1 m long at azimuth 90 deg = true east) placed in the
    # origin's ENU frame by pymap3d; 150 km east of the origin the frame's east is ~2.5 deg off.
    lat, lon = 61.7, 11.9
    frame = LocalFrame.enu(61.7, 9.0, 0.0)
    g = Geodesic.WGS84.Direct(lat, lon, 90.0, 1.0)
    e0, n0, _ = pymap3d.geodetic2enu(lat, lon, 0.0, 61.7, 9.0, 0.0)
    e1, n1, _ = pymap3d.geodetic2enu(g["lat2"], g["lon2"], 0.0, 61.7, 9.0, 0.0)
    ve, vn = frame.ground_velocity(np.array([lat]), np.array([lon]), np.array([1.0]), np.array([90.0]))
    assert np.degrees(np.arctan2(ve[0], vn[0])) == pytest.approx(np.degrees(np.arctan2(e1 - e0, n1 - n0)), abs=1e-4)
    assert np.hypot(ve[0], vn[0]) == pytest.approx(np.hypot(e1 - e0, n1 - n0), rel=1e-5)


def test_ground_velocity_is_nan_where_the_course_is_missing():
    frame = LocalFrame.enu(61.7, 9.0, 0.0)
    ve, vn = frame.ground_velocity(np.array([61.7, 61.7]), np.array([9.0, 9.0]), np.array([2.0, 2.0]),
                                   np.array([np.nan, 45.0]))
    assert np.isnan(ve[0]) and np.isnan(vn[0]) and np.isfinite(ve[1])
