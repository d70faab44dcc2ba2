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
