"""Path length of raw fixes without letting stationary jitter add length.

While a receiver stands still its fixes wander by the receiver noise; summing the steps between
them adds metres of path that nobody walked. Here a fix counts as *stationary* when the
displacement across a short window around it is within what noise alone explains; each run of
stationary fixes is collapsed to its mean position before the steps are summed.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .clean import robust_sigma

#: Half-width of the stationarity window, s (or 2 fixes when the log has no time).
STATIONARY_HALF_WINDOW_S = 3.0

#: 99.9 % quantile factor of a Rayleigh distribution, sqrt(2 ln 1000): a 2D displacement made
#: of noise alone stays below this many sigmas 999 times in 1000 (closed form).
RAYLEIGH_999 = float(np.sqrt(2.0 * np.log(1000.0)))


@dataclass(frozen=True)
class PathLength:
    """Length summary of a track in its local frame.

    Attributes
    ----------
    length_3d_m
        Slope length: sum of 3D steps, stationary runs collapsed, within segments.
    plan_length_m
        The same in plan (east/north only).
    stationary_fixes
        Fixes judged stationary.
    noise_m
        Per-axis horizontal noise sigma used for the stationarity test.
    """

    length_3d_m: float
    plan_length_m: float
    stationary_fixes: int
    noise_m: float


def horizontal_noise_m(enu_m: np.ndarray, segment: np.ndarray, accuracy_m: np.ndarray | None = None) -> float:
    """Per-axis horizontal noise sigma, m: the log's median accuracy when it has one, else a
    robust estimate from second differences (white noise sigma s gives s*sqrt(6) there)."""
    if accuracy_m is not None and np.isfinite(accuracy_m).any():
        return float(np.nanmedian(accuracy_m))
    if len(enu_m) < 3:
        return 0.0
    d2 = enu_m[2:, :2] - 2 * enu_m[1:-1, :2] + enu_m[:-2, :2]
    same = (segment[2:] == segment[:-2])
    return robust_sigma(d2[same].ravel()) / np.sqrt(6.0)


def stationary_mask(
    enu_m: np.ndarray, segment: np.ndarray, time_s: np.ndarray | None, noise_m: float
) -> np.ndarray:
    """True where the horizontal displacement across the window is explained by noise alone."""
    n = len(enu_m)
    if n < 3:
        return np.zeros(n, bool)
    if time_s is not None and np.isfinite(time_s).all():
        dt = np.diff(time_s)
        typical = float(np.median(dt[dt > 0])) if (dt > 0).any() else 1.0
        half = max(1, int(np.ceil(STATIONARY_HALF_WINDOW_S / typical)))
    else:
        half = 2
    i = np.arange(n)
    # Window ends clipped to the fix's own segment.
    seg_start = np.maximum.accumulate(np.where(np.r_[True, np.diff(segment) != 0], i, 0))
    seg_end = np.minimum.accumulate(np.where(np.r_[np.diff(segment) != 0, True], i, n - 1)[::-1])[::-1]
    lo = np.maximum(i - half, seg_start)
    hi = np.minimum(i + half, seg_end)
    disp = np.linalg.norm(enu_m[hi, :2] - enu_m[lo, :2], axis=1)
    # difference of two independent fixes: per-axis sigma noise*sqrt(2)
    limit = RAYLEIGH_999 * np.sqrt(2.0) * noise_m
    return disp <= limit


def path_length(
    enu_m: np.ndarray,
    segment: np.ndarray,
    time_s: np.ndarray | None = None,
    accuracy_m: np.ndarray | None = None,
) -> PathLength:
    """Length of the fixes' polyline within segments, stationary runs collapsed (see module doc).

    Parameters
    ----------
    enu_m
        (n, 3) positions in a local metric frame, m.
    segment
        (n,) segment number per fix; no length is counted between segments.
    time_s, accuracy_m
        Optional per-fix time (s) and horizontal accuracy (m).
    """
    n = len(enu_m)
    if n < 2:
        return PathLength(0.0, 0.0, 0, 0.0)
    noise = horizontal_noise_m(enu_m, segment, accuracy_m)
    still = stationary_mask(enu_m, segment, time_s, noise)
    seg_change = np.r_[True, np.diff(segment) != 0]
    # A new group starts at every moving fix, at the first fix of each stationary run, and at
    # every segment change; each group is represented by its mean position.
    new_group = seg_change | ~still | np.r_[True, ~still[:-1]]
    starts = np.flatnonzero(new_group)
    counts = np.diff(np.r_[starts, n])
    centres = np.add.reduceat(enu_m, starts, axis=0) / counts[:, None]
    group_seg = segment[starts]
    steps = np.diff(centres, axis=0)
    inside = group_seg[1:] == group_seg[:-1]
    steps = steps[inside]
    return PathLength(
        length_3d_m=float(np.linalg.norm(steps, axis=1).sum()),
        plan_length_m=float(np.linalg.norm(steps[:, :2], axis=1).sum()),
        stationary_fixes=int(still.sum()),
        noise_m=float(noise),
    )
