"""Pipeline stage for an IMU log beside the GNSS log: read, check, fuse, and add the IMU columns.

The fused path (``survey.imu.fuse.FusedPath``) replaces the GNSS-only smoother inside
``build_profile`` (``smoothed=``), so curvature, torsion and the Frenet frame come from the same
geometry code. What only an IMU can tell -- bank (roll), its rate per metre, the gyro's own plan
curvature, pitch, and where the IMU carried the path alone -- is added here at the stations.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from .imu.fuse import FusedPath, fuse
from .imu.reader import read_imu_csv
from .pipeline import LoadedLog
from .stations import Profile


def fuse_loaded(
    loaded: LoadedLog,
    imu_path: str,
    imu_time_offset_s: float | None = None,
    imu_axes: str = "flu",
    imu_accel_unit: str | None = None,
    imu_gyro_unit: str | None = None,
    clock_offset_s: float | None = None,
    use_velocity: bool = True,
) -> FusedPath:
    """Fuse an IMU CSV log with a loaded GNSS log.

    Parameters
    ----------
    imu_time_offset_s
        Seconds added to the IMU file's times (needed for relative ``time_s`` columns).
    imu_axes
        ``"flu"`` (x forward, y left, z up) or ``"frd"`` (forward, right, down).
    clock_offset_s
        Remaining GNSS-IMU clock offset, s; ``None`` estimates it from the data.
    use_velocity
        False: leave the log's speed and course over ground out of the fusion (positions only).
    """
    imu = read_imu_csv(imu_path, time_offset_s=imu_time_offset_s, axes=imu_axes,
                       accel_unit=imu_accel_unit, gyro_unit=imu_gyro_unit)
    track = loaded.track
    enu = loaded.enu_m.copy()
    if track.suspect is not None:
        enu[track.suspect] = np.nan  # multipath jumps take no part in the fusion
    keep = np.isfinite(enu[:, 0])
    # speed and course over ground, when the log has them, become GNSS velocity updates; the
    # course is from true north, so it is turned into the frame's own north first
    speed, course = frame_speed_course(loaded) if use_velocity else (None, None)
    return fuse(track.time_s[keep], enu[keep],
                None if track.accuracy_m is None else track.accuracy_m[keep],
                imu, time_offset_s=clock_offset_s,
                speed_mps=None if speed is None else speed[keep],
                course_deg=None if course is None else course[keep])


def frame_speed_course(loaded: LoadedLog) -> tuple[np.ndarray | None, np.ndarray | None]:
    """The log's speed (m/s) and course over ground (degrees clockwise from the frame's north)
    in the run's frame (``LocalFrame.ground_velocity``: meridian convergence and grid scale);
    the speed alone where the log has no course; (None, None) without a speed."""
    track = loaded.track
    if track.speed_mps is None:
        return None, None
    if track.course_deg is None:
        return track.speed_mps, None
    ve, vn = loaded.frame.ground_velocity(track.lat_deg, track.lon_deg, track.speed_mps, track.course_deg)
    has_course = np.isfinite(ve)
    speed = np.where(has_course, np.hypot(ve, vn), track.speed_mps)
    course = np.where(has_course, np.degrees(np.arctan2(ve, vn)) % 360.0, np.nan)
    return speed, course


def add_imu_fields(profile: Profile, fused: FusedPath) -> Profile:
    """Return ``profile`` with bank, twist, gyro plan curvature, pitch and outage at its stations."""
    t = profile.time_s
    if len(profile) == 0:
        return profile
    inside = np.isfinite(t) & (t >= fused.time_s[0]) & (t <= fused.time_s[-1])
    tt = np.where(inside, t, fused.time_s[0])

    def at(values: np.ndarray) -> np.ndarray:
        return np.where(inside, fused.interp(np.asarray(values, float), tt), np.nan)

    outage = at(fused.outage.astype(float)) >= 0.5
    # the fusion's settings are already in the profile's (``fusion_*``, from build_profile)
    return replace(
        profile,
        bank_deg=np.degrees(at(fused.bank_rad)),
        bank_sd_deg=np.degrees(at(fused.bank_sd_rad)),
        twist_deg_per_m=np.degrees(at(fused.bank_rate_per_m)),
        gyro_plan_curvature_per_m=at(fused.gyro_plan_curvature_per_m),
        pitch_deg=np.degrees(at(fused.pitch_rad)),
        imu_outage=outage & inside,
    )
