"""Path length through raw fixes without letting receiver noise add length.

While a receiver stands still its fixes wander by the receiver noise; summing the steps between
them adds metres of path that nobody walked. Here a fix counts as *stationary* when the
displacement across a short window around it is within what noise alone explains; each run of
stationary fixes is collapsed to its mean position. While moving, noise lengthens short steps;
``path_length`` measures over strides long enough for the noise and removes its expected share.
The smoothed chainage of ``trackframe profile`` is the better figure; this one is quick.
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
    still = disp <= limit
    # A real stop lasts at least a window; shorter runs are a slow walker seen through noise.
    return _drop_short_runs(still, 2 * half + 1)


def _drop_short_runs(mask: np.ndarray, min_len: int) -> np.ndarray:
    """``mask`` with runs of True shorter than ``min_len`` set to False."""
    edges = np.diff(np.r_[0, mask.astype(np.int8), 0])
    starts = np.flatnonzero(edges == 1)
    ends = np.flatnonzero(edges == -1)
    keep = np.zeros(len(mask) + 1, np.int32)
    long_runs = (ends - starts) >= min_len
    np.add.at(keep, starts[long_runs], 1)
    np.add.at(keep, ends[long_runs], -1)
    return np.cumsum(keep[:-1]) > 0


def path_length(
    enu_m: np.ndarray,
    segment: np.ndarray,
    time_s: np.ndarray | None = None,
    accuracy_m: np.ndarray | None = None,
) -> PathLength:
    """Length of the path through the fixes within segments (see module doc).

    Two biases of summing raw steps are removed:

    * standing still: runs of stationary fixes are collapsed to their mean position;
    * receiver noise while moving: every step picks up the noise of two fixes, and
      E|d + e|^2 = |d|^2 + tr(Cov e) (closed form for zero-mean e), so a raw sum over short steps
      grows with the noise. Steps are taken over a stride of ``k`` fixes, long enough that the
      noise is small beside them (``STRIDE_SIGMAS``), each squared step is debiased by
      tr(Cov e), and the ``k`` phase-shifted stride polylines are averaged. Noise-free input gets
      ``k = 1`` and the plain sum.

    Parameters
    ----------
    enu_m
        (n, 3) positions in a local metric frame, m.
    segment
        (n,) segment number per fix; no length is counted between segments.
    time_s, accuracy_m
        Optional per-fix time (s) and horizontal accuracy (m, used for the stationarity test).
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
    sigma_h, sigma_v = white_noise_m(centres, group_seg)
    # A step is a difference of two fixes: per-axis variance 2 s^2. Only the variance across the
    # step lengthens it on average; removing exactly that share leaves the debiased step
    # unbiased to second order (Taylor expansion of |d + e|, closed form).
    across_3d = 2.0 * (sigma_h**2 + sigma_v**2)
    across_plan = 2.0 * sigma_h**2
    k = _stride(centres, group_seg, np.sqrt(2.0 * (2.0 * sigma_h**2 + sigma_v**2)))
    return PathLength(
        length_3d_m=_stride_length(centres, group_seg, k, across_3d, slice(0, 3)),
        plan_length_m=_stride_length(centres, group_seg, k, across_plan, slice(0, 2)),
        stationary_fixes=int(still.sum()),
        noise_m=float(noise),
    )


#: A stride step must be this many times the noise of a step, so that the second-order
#: expansion behind the debiasing holds (third-order terms ~ (1/4)^4, below 0.5 %).
STRIDE_SIGMAS = 4.0
MAX_STRIDE = 50


def white_noise_m(enu_m: np.ndarray, segment: np.ndarray) -> tuple[float, float]:
    """Robust white-noise sigma (horizontal per axis, vertical) from second differences, m.

    For white noise of sigma s a second difference has sigma s*sqrt(6) in every direction
    (closed form). Real bends put their second difference across the track, so the horizontal
    sigma is taken from the along-track component only; a sparse but exact route (points tens
    of metres apart round tight bends) is then not mistaken for a noisy one.
    """
    if len(enu_m) < 3:
        return 0.0, 0.0
    same = segment[2:] == segment[:-2]
    d2 = (enu_m[2:] - 2 * enu_m[1:-1] + enu_m[:-2])[same]
    chord = (enu_m[2:, :2] - enu_m[:-2, :2])[same]
    norm = np.linalg.norm(chord, axis=1)
    ok = norm > 0
    if not ok.any():
        return 0.0, 0.0
    along = np.sum(d2[ok, :2] * chord[ok], axis=1) / norm[ok]
    return robust_sigma(along) / np.sqrt(6.0), robust_sigma(d2[:, 2]) / np.sqrt(6.0)


def _stride(centres: np.ndarray, seg: np.ndarray, step_noise_m: float) -> int:
    same = seg[1:] == seg[:-1]
    steps = np.linalg.norm(np.diff(centres, axis=0), axis=1)[same]
    if steps.size == 0 or step_noise_m <= 0:
        return 1
    typical = float(np.median(steps))
    if typical <= 0:
        return 1
    return int(np.clip(np.ceil(STRIDE_SIGMAS * step_noise_m / typical), 1, MAX_STRIDE))


def _stride_length(c: np.ndarray, seg: np.ndarray, k: int, var: float, axes: slice) -> float:
    """Average over the k phases of the stride-k polyline, squared steps debiased by ``var``.

    For fixes c[0..m-1] of one segment this is
    (1/k) [sum_i |c[i+k]-c[i]| + sum_{j<k} (|c[j]-c[0]| + |c[m-1]-c[m-1-j]|)],
    which equals the plain sum for evenly spaced points on a line (closed form).
    """
    pts = c[:, axes]

    def debiased(a: np.ndarray, b: np.ndarray) -> np.ndarray:
        sq = np.sum((pts[a] - pts[b]) ** 2, axis=1) - var
        return np.sqrt(np.clip(sq, 0.0, None))

    n = len(pts)
    i = np.arange(max(n - k, 0))
    inside = seg[i] == seg[np.minimum(i + k, n - 1)]
    total = debiased(i[inside] + k, i[inside]).sum() if k < n else 0.0
    first = np.flatnonzero(np.r_[True, seg[1:] != seg[:-1]])
    last = np.r_[first[1:] - 1, n - 1]
    for j in range(1, k):  # at most MAX_STRIDE passes, each vectorised over segments
        ok = first + j <= last
        if not ok.any():
            break
        total += debiased(first[ok] + j, first[ok]).sum() + debiased(last[ok], last[ok] - j).sum()
    return float(total / k)
