"""The one pipeline the CLI and the TUI share: read -> clean -> local frame -> (profile).

Every stage is a pure function elsewhere in ``survey``; this module only strings them together
and checks the few conditions under which there is nothing to measure.
"""

from __future__ import annotations

from contextlib import contextmanager
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from .clean import DEFAULT_GAP_S, CleanReport, clean_track
from .errors import InputError
from .frame import LocalFrame
from .readers import read_log
from .track import Track


@dataclass(frozen=True, eq=False)
class LoadedLog:
    """A cleaned log placed in its local frame.

    Attributes
    ----------
    track
        Cleaned Track (time-sorted, duplicates removed, segments split, suspects marked).
    report
        Cleaning counts.
    frame
        The run's local frame.
    enu_m
        (n, 3) east/north/up of every fix of ``track`` in ``frame``, m.
    """

    track: Track
    report: CleanReport
    frame: LocalFrame
    enu_m: np.ndarray


class ProfileRun(NamedTuple):
    """Everything ``run_profile`` produced (unpacks as a 4-tuple)."""

    track: Track
    report: CleanReport
    frame: LocalFrame
    profile: "object"


def load_log(
    path: str,
    fmt: str | None = None,
    csv_columns: dict[str, str] | None = None,
    height_ref: str | None = None,
    gap_s: float = DEFAULT_GAP_S,
    crs: str | None = None,
    origin: tuple[float, ...] | None = None,
) -> LoadedLog:
    """Read, clean and place one log in its local frame (see ``survey.readers.read_log``,
    ``survey.clean.clean_track`` and ``survey.frame.LocalFrame.for_track`` for the options).

    Raises ``InputError`` when the log has fewer than two distinct positions.
    """
    raw = read_log(path, fmt=fmt, csv_columns=csv_columns, height_ref=height_ref)
    track, report = clean_track(raw, gap_s=gap_s)
    if len(track) < 2:
        raise InputError(path, f"only {len(track)} usable fix after cleaning; need at least 2")
    if np.ptp(track.lat_deg) == 0 and np.ptp(track.lon_deg) == 0:
        raise InputError(path, f"all {len(track)} fixes are at one position; there is no path to measure")
    try:
        frame = LocalFrame.for_track(track, crs=crs, origin=origin)
    except InputError as exc:
        raise InputError(exc.path or path, exc.message, exc.where) from None
    e, n, u = frame.forward(track.lat_deg, track.lon_deg, track.height_m)
    return LoadedLog(track, report, frame, np.column_stack([e, n, u]))


def run_profile(
    path: str,
    crs: str | None = None,
    step_m: float = 1.0,
    gap_s: float = DEFAULT_GAP_S,
    fmt: str | None = None,
    csv_columns: dict[str, str] | None = None,
    height_ref: str | None = None,
    origin: tuple[float, ...] | None = None,
    **profile_options,
) -> ProfileRun:
    """Load a log and compute its station profile (``load_log`` then ``compute_profile``)."""
    loaded = load_log(path, fmt=fmt, csv_columns=csv_columns, height_ref=height_ref, gap_s=gap_s, crs=crs, origin=origin)
    profile = compute_profile(loaded, step_m=step_m, **profile_options)
    return ProfileRun(loaded.track, loaded.report, loaded.frame, profile)


@contextmanager
def _singular_as_input_error(path: str | None):
    """A smoothing system that is numerically singular on this log becomes a one-line error
    naming the log (exit status 1), not a traceback."""
    try:
        yield
    except np.linalg.LinAlgError as exc:
        raise InputError(path, f"the smoothed path could not be solved on this log (numerically singular system: {exc})") from None


def compute_profile(
    loaded: LoadedLog,
    step_m: float = 1.0,
    imu: str | None = None,
    imu_time_offset_s: float | None = None,
    imu_axes: str = "flu",
    imu_accel_unit: str | None = None,
    imu_gyro_unit: str | None = None,
    **settings,
):
    """Station profile of a loaded log (``survey.profile_build.build_profile``).

    With ``imu`` (an IMU CSV log) the path comes from GNSS/IMU fusion
    (``survey.fusion_stage``) and the profile gains the IMU columns; without it nothing changes.
    ``settings`` go to ``build_profile``.

    BLAS is held to one thread here: the smoother's many small banded and matrix products run
    about 1.6x faster that way on 2 cores than with threaded OpenBLAS contending for them
    (measured on a 1M-fix GPX, whole `trackframe profile`, one BLAS thread vs the default, same
    loaded machine: 16.6 s vs 27.0 s wall).
    """
    from threadpoolctl import threadpool_limits

    from .profile_build import build_profile

    with threadpool_limits(limits=1, user_api="blas"), _singular_as_input_error(loaded.track.source.path):
        if imu is None:
            return build_profile(loaded.track, loaded.enu_m, loaded.frame, step_m=step_m, **settings)
        from .fusion_stage import add_imu_fields, fuse_loaded

        if not loaded.track.has_time:
            raise InputError(loaded.track.source.path, "an IMU log can only be fused with a GNSS log that has times")
        fused = fuse_loaded(loaded, imu, imu_time_offset_s, imu_axes, imu_accel_unit, imu_gyro_unit,
                            use_velocity=settings.get("use_velocity") is not False)
        profile = build_profile(loaded.track, loaded.enu_m, loaded.frame, step_m=step_m, smoothed=fused, **settings)
        return add_imu_fields(profile, fused)
