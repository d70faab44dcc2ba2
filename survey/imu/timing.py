"""GNSS-IMU time offset from the turns both sensors see.

The gyro's rotation about the vertical, integrated, is the heading change; the GNSS course (the
direction of the smoothed velocity) shows the same changes. For a trial offset o (IMU time + o =
GNSS time) the two heading series are compared after removing a constant and a linear drift (the
drift absorbs a gyro bias); the offset with the smallest residual wins (a least-squares form of
the cross-correlation of yaw rate with course rate, which is better behaved on noisy fixes
because it compares angles instead of differentiated angles). A parabola through the three best
trial offsets refines the minimum.

Its 1-sigma comes from the curvature of the residual sum of squares, inflated for the smoothing
window (neighbouring course values share fixes). The offset is "significant" when it is more than
three sigma from zero and not at the edge of the search range.

Rotation about the local vertical: with an attitude history (``attitude``, e.g. from a first
fusion pass) the gyro is projected on the local vertical sample by sample; without one, on the
direction of the mean specific force in the body (gravity dominates it, so a tilted mount still
works). The second form mixes pitch rate into yaw rate in proportion to the bank angle: on a
4.6 deg superelevated crest it biased the estimate by about 0.06 s in the tests, which is why
``fuse`` refines the offset with its own attitude.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy.signal import savgol_filter

from .reader import ImuLog

FloatArray = NDArray[np.float64]


@dataclass(frozen=True)
class OffsetEstimate:
    """Result of ``estimate_time_offset`` (offset is added to IMU times)."""

    offset_s: float
    sigma_s: float
    significant: bool
    used_fixes: int
    message: str


def _course(t: FloatArray, en: FloatArray, window_s: float) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Uniform time grid, unwrapped course (rad) and horizontal speed from smoothed fixes."""
    dt = float(np.median(np.diff(t)))
    grid = np.arange(t[0], t[-1], dt)
    e = np.interp(grid, t, en[:, 0])
    n = np.interp(grid, t, en[:, 1])
    win = max(5, int(round(window_s / dt)) | 1)
    if win > len(grid):
        win = len(grid) - (1 - len(grid) % 2)
    ve = savgol_filter(e, win, 2, deriv=1, delta=dt)
    vn = savgol_filter(n, win, 2, deriv=1, delta=dt)
    return grid, np.unwrap(np.arctan2(vn, ve)), np.hypot(ve, vn)


def estimate_time_offset(time_s: FloatArray, enu_m: FloatArray, imu: ImuLog, max_lag_s: float = 2.0,
                         step_s: float = 0.01, window_s: float = 5.0, min_speed_mps: float = 2.0,
                         attitude: tuple[FloatArray, FloatArray] | None = None) -> OffsetEstimate:
    """Offset o (s) such that IMU time + o = GNSS time, from heading changes (module docstring).

    ``attitude`` is an optional ``(time_s, C_nb (m, 3, 3))`` history on the IMU's clock.
    """
    t = np.asarray(time_s, float)
    ok = np.isfinite(t) & np.isfinite(enu_m[:, 0]) & np.isfinite(enu_m[:, 1])
    t, en = t[ok], np.asarray(enu_m, float)[ok, :2]
    inside = (t > imu.time_s[0] + max_lag_s) & (t < imu.time_s[-1] - max_lag_s)
    t, en = t[inside], en[inside]
    if len(t) < 20:
        return OffsetEstimate(0.0, np.inf, False, len(t), "time offset: too few fixes overlap the IMU to estimate it")
    grid, course, speed = _course(t, en, window_s)
    if attitude is None:
        up_b = imu.accel_mps2.mean(axis=0)
        up_b /= np.linalg.norm(up_b)
        yaw_rate = imu.gyro_radps @ up_b
    else:
        ta, Ra = attitude
        ia = np.clip(np.searchsorted(ta, imu.time_s), 0, len(ta) - 1)
        yaw_rate = np.einsum("ni,ni->n", Ra[ia, 2, :], imu.gyro_radps)
    ti = imu.time_s
    heading = np.concatenate(([0.0], np.cumsum(0.5 * (yaw_rate[1:] + yaw_rate[:-1]) * np.diff(ti))))
    moving = speed > min_speed_mps
    if moving.sum() < 20:
        return OffsetEstimate(0.0, np.inf, False, int(moving.sum()), "time offset: the mover is too slow to estimate it")
    dt = float(np.median(np.diff(grid)))
    win = max(5, int(round(window_s / dt)) | 1)
    if win > len(grid):
        win = len(grid) - (1 - len(grid) % 2)
    X = np.column_stack((np.ones(moving.sum()), grid[moving] - grid[0]))
    lags = np.arange(-max_lag_s, max_lag_s + step_s / 2, step_s)

    def rss(o: float) -> float:
        hg = savgol_filter(np.interp(grid - o, ti, heading), win, 2)
        e = course[moving] - hg[moving]
        coef, *_ = np.linalg.lstsq(X, e, rcond=None)
        r = e - X @ coef
        return float(r @ r)

    cost = np.array([rss(o) for o in lags])
    i = int(np.argmin(cost))
    best = float(lags[i])
    at_edge = i == 0 or i == len(lags) - 1
    sigma = np.inf
    if not at_edge:
        c0, c1, c2 = cost[i - 1], cost[i], cost[i + 1]
        curv = (c0 - 2 * c1 + c2) / step_s**2
        if curv > 0:
            best += 0.5 * step_s * (c0 - c2) / (c0 - 2 * c1 + c2)
            res_var = c1 / max(int(moving.sum()) - 2, 1)
            sigma = float(np.sqrt(2.0 * res_var / curv * win))
    significant = bool(not at_edge and np.isfinite(sigma) and abs(best) > 3.0 * sigma)
    if at_edge:
        msg = f"time offset: no clear optimum within +-{max_lag_s:g} s (gyro yaw rate vs GNSS course); 0 used"
    else:
        msg = f"time offset: estimated {best:+.3f} s +- {sigma:.3f} s (gyro yaw rate vs GNSS course)"
    return OffsetEstimate(best, sigma, significant, int(moving.sum()), msg)
