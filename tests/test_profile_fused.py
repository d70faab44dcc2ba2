"""build_profile on a GNSS/IMU fused path (survey.imu.fuse) instead of its own smoothing.

Scene: a level circle of radius R = 60 m (survey.synthetic.helix_curve with zero rise) driven at
12 m/s after a 10 s static start, IMU at 100 Hz with the MPU-9250 datasheet noise
(PS-MPU-9250A-01, survey.imu.synth.MPU9250), 1 Hz dual-frequency white GNSS error
(survey.synthetic.GNSS_GRADES "dual"), with a 12 s GNSS outage on the circle.
Closed form: a circle has kappa = 1/R (helix kappa = a/(a^2+c^2) with c = 0; do Carmo 1976).
"""

import numpy as np
import pytest

from survey.frame import LocalFrame
from survey.imu.fuse import fuse
from survey.imu.synth import MPU9250, imu_truth, make_motion, simulate_imu
from survey.profile_build import build_profile, outage_mask
from survey.synthetic import add_gnss_error, add_outage, fixes_to_track, helix_curve

FRAME = LocalFrame.enu(46.2, 7.9, 600.0)  # invented test pad
R, SPEED = 60.0, 12.0


@pytest.fixture(scope="module")
def run():
    rng = np.random.default_rng(7)
    motion = make_motion(helix_curve(R, 0.0, 1.2), SPEED)
    imu, _ = simulate_imu(imu_truth(motion, 100.0), MPU9250, rng)
    traj = imu_truth(motion, 100.0).trajectory(np.arange(0.0, motion.duration_s, 1.0))
    fixes = add_outage(add_gnss_error(traj, "dual", rng, wander_m=0.0), 25.0, 12.0)
    fp = fuse(fixes.time_s, fixes.enu_m, fixes.accuracy_m, imu, time_offset_s=0.0)
    track = fixes_to_track(fixes, FRAME.inverse)
    e, n, u = FRAME.forward(track.lat_deg, track.lon_deg, track.height_m)
    prof = build_profile(track, np.column_stack([e, n, u]), FRAME, step_m=2.0, smoothed=fp)
    return fp, prof


def test_fused_profile_has_the_circle_curvature(run):
    fp, prof = run
    moving = prof.speed_mps > 0.9 * SPEED
    # circle: kappa = 1/R (closed form); the fused path's own low-pass sets the tolerance
    assert np.median(np.abs(prof.curvature_per_m[moving] * R - 1.0)) < 0.05
    assert np.all(np.isfinite(prof.curvature_sd_per_m[moving]))


def test_fused_profile_spans_the_outage_as_one_stretch_and_reports_it(run):
    fp, prof = run
    assert any(a <= 25.0 and b >= 36.0 for a, b in fp.outages)  # the 25-37 s gap made above
    inside = outage_mask(prof.time_s, fp.outages)
    ours = outage_mask(prof.time_s, [(25.0, 36.0)])
    assert np.all(inside[ours]) and ours.sum() > 0.8 * 11.0 * SPEED / 2.0  # stations every 2 m
    assert np.all(np.isfinite(prof.curvature_per_m[inside]))  # the IMU measured the shape there
    assert np.all(prof.segment == prof.segment[0])
    assert prof.settings["imu_outage_stations"] == int(inside.sum())
    assert any("bridged by the IMU" in m for m in prof.messages)
    assert "GNSS/IMU" in prof.settings["method"]
