"""`--imu` end to end: the fused path feeds the same profile, which gains the IMU columns."""

import csv
import io
from pathlib import Path

import numpy as np
import pytest

from tui.cli import main

DEMO = Path(__file__).resolve().parents[1] / "demo_tracks"
VAN = DEMO / "van_route_tunnel.nmea"
VAN_IMU = DEMO / "van_route_tunnel_imu.csv"


def _read_profile(path):
    rows = [line for line in path.read_text().splitlines() if not line.startswith("#")]
    table = list(csv.DictReader(io.StringIO("\n".join(rows))))
    return {k: np.array([float(r[k]) if r[k] != "" else np.nan for r in table]) for k in table[0] if k != "torsion_note"}


@pytest.fixture(scope="module")
def fused_profile(tmp_path_factory):
    out = tmp_path_factory.mktemp("imu") / "van.csv"
    assert main(["profile", str(VAN), "--imu", str(VAN_IMU), "-o", str(out)]) == 0
    return _read_profile(out)


def test_profile_with_imu_has_bank_twist_gyro_curvature_and_outage_columns(fused_profile):
    for name in ("bank_deg", "bank_sd_deg", "twist_deg_per_m", "gyro_plan_curvature_per_m", "pitch_deg", "imu_outage"):
        assert name in fused_profile


def test_bank_on_a_superelevated_arc_matches_its_design_within_one_degree(fused_profile):
    # The demo van's curves are superelevated with e = 15 m x curvature (demo_tracks/make_demo.py):
    # on the 250 m arc e = 0.06 and the bank is atan(e) (road cross-slope geometry, common
    # practice). Issue 6 target: bank within 1 degree. Arc core: chainage 420-560 m.
    p = fused_profile
    core = (p["chainage_m"] > 420) & (p["chainage_m"] < 560)
    assert np.abs(p["bank_deg"][core] - np.degrees(np.arctan(0.06))).max() < 1.0


def test_gyro_plan_curvature_agrees_with_the_gnss_plan_curvature_on_the_arc(fused_profile):
    # Steady turn: yaw rate / speed = plan curvature = 1/R (physics); R = 250 m on this arc.
    p = fused_profile
    core = (p["chainage_m"] > 420) & (p["chainage_m"] < 560)
    assert np.median(p["gyro_plan_curvature_per_m"][core]) == pytest.approx(1 / 250, rel=0.05)


def test_tunnel_stations_are_marked_as_bridged_by_the_imu(fused_profile):
    # The tunnel: 20 s without fixes on the straight after the first curve (make_demo.py).
    p = fused_profile
    inside = p["imu_outage"] == 1
    assert 300 < inside.sum() < 400  # 20 s at 60 km/h is 333 m
    assert np.isfinite(p["curvature_per_m"][inside]).all()


def test_without_imu_nothing_changes(tmp_path):
    out = tmp_path / "van.csv"
    assert main(["profile", str(VAN), "-o", str(out)]) == 0
    assert "bank_deg" not in _read_profile(out)


def test_an_imu_log_that_does_not_overlap_the_gnss_log_is_refused(tmp_path, capsys):
    shifted = tmp_path / "late_imu.csv"
    shifted.write_text("time,ax_mps2,ay_mps2,az_mps2,gx_radps,gy_radps,gz_radps\n"
                       + "".join(f"{1.9e9 + i * 0.01:.2f},0,0,9.81,0,0,0\n" for i in range(500)))
    code = main(["profile", str(VAN), "--imu", str(shifted), "-o", str(tmp_path / "x.csv")])
    err = capsys.readouterr().err
    assert code == 1 and err.count("\n") == 1 and "late_imu.csv" in err
    assert not (tmp_path / "x.csv").exists()


def test_course_from_true_north_is_turned_into_the_utm_grid_for_the_filter():
    # Oracle: PROJ's analytic meridian convergence and scale (pyproj Proj.get_factors) at a fix
    # near the edge of UTM zone 32N: a course measured from true north is that much off grid north.
    from pyproj import CRS, Proj

    from survey.frame import LocalFrame
    from survey.fusion_stage import frame_speed_course
    from survey.pipeline import LoadedLog
    from survey.track import make_track

    track = make_track("log.nmea", "nmea", [0.0, 1.0, 2.0], [61.7, 61.7001, 61.7002], [11.9, 11.9, 11.9],
                       speed_mps=[0.0, 12.0, 12.0], course_deg=[np.nan, 10.0, 350.0])
    frame = LocalFrame.projected("EPSG:32632", 61.7, 11.9, 0.0)
    loaded = LoadedLog(track, None, frame, np.zeros((3, 3)))
    speed, course = frame_speed_course(loaded)
    f = Proj(CRS("EPSG:32632")).get_factors(11.9, 61.7001)
    assert course[1] == pytest.approx(10.0 - f.meridian_convergence, abs=1e-5)
    assert course[2] == pytest.approx(350.0 - f.meridian_convergence, abs=1e-5)
    assert speed[1] == pytest.approx(12.0 * f.meridional_scale, rel=1e-6)
    assert np.isnan(course[0]) and speed[0] == 0.0  # no course: the speed alone, unchanged


def test_curvature_sd_is_positive_wherever_curvature_is_given(fused_profile):
    # A 1-sigma is a positive number (definition). The van's standing start makes kappa huge for
    # a moment; pooling the sd with a running sum carried its rounding into the next windows and
    # left NaN or zero there.
    k, sd = fused_profile["curvature_per_m"], fused_profile["curvature_sd_per_m"]
    given = np.isfinite(k)
    assert given.any() and np.all(sd[given] > 0)


def test_positions_only_leaves_speed_and_course_out_of_the_fusion(tmp_path):
    # The demo van's RMC sentences carry speed and course; --positions-only must keep them out.
    out = tmp_path / "van.csv"
    assert main(["profile", str(VAN), "--imu", str(VAN_IMU), "--positions-only", "-o", str(out)]) == 0
    header = "\n".join(line for line in out.read_text().splitlines() if line.startswith("#"))
    assert "fusion_velocity_updates=0" in header
