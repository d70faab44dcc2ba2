"""Cleaning a raw Track: order, duplicates, segments at gaps, impossible jumps. Counted, never silent.

Steps, in order (all vectorised):

1. Sort by time (stable). Local disorder is sorted and counted; a backward jump longer than the
   gap limit is not a late fix but a clock reset or two joined logs, and is refused.
2. Drop exact duplicate fixes (same time and position), counted.
3. Fixes at the same time but a different position: keep the first, count the rest.
4. Split segments at gaps longer than ``gap_s`` (source segments such as GPX ``trkseg`` are kept).
5. Mark physically impossible jumps (multipath) in ``Track.suspect`` with a robust, median-based
   test on how far each fix lies from the smooth motion of its neighbours (``jump_suspects``).

Distances here use a local equirectangular approximation around each fix pair (adjacent fixes are
metres apart, where its relative error is below 1e-6); the run's real frame is ``survey.frame``.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from .errors import InputError
from .jump_ends import end_place, lagrange_weights
from .jump_shape import jumps_among
from .track import Track

#: Mean Earth radius for the equirectangular step approximation, m (IUGG mean radius R1,
#: common practice).
EARTH_RADIUS_M = 6_371_008.8

#: Default gap that starts a new segment, s.
DEFAULT_GAP_S = 30.0

#: Robust z-score above which a fix's departure from its neighbours is judged impossible for the
#: log. For a 2D Gaussian residual, P(|r| > 8 sigma) = exp(-32), about 1e-14 (Rayleigh tail,
#: closed form).
JUMP_Z = 8.0


@dataclass(frozen=True)
class CleanReport:
    """What cleaning did, as counts (shown by ``trackframe info``)."""

    fixes_read: int
    fixes_kept: int
    exact_duplicates: int
    same_time_conflicts: int
    out_of_order: int
    untimed_dropped: int
    gap_splits: int
    segments: int
    suspect_jumps: int
    gap_limit_s: float
    has_time: bool

    def as_dict(self) -> dict:
        return asdict(self)


def clean_track(track: Track, gap_s: float = DEFAULT_GAP_S) -> tuple[Track, CleanReport]:
    """Clean ``track`` (see module doc); returns the cleaned Track and the counts.

    Parameters
    ----------
    track
        Raw Track from a reader.
    gap_s
        A time gap longer than this, in seconds, starts a new segment.
    """
    if not gap_s > 0:
        raise InputError(None, f"gap limit must be positive, not {gap_s}")
    path = track.source.path
    n_read = len(track)
    has_time = track.has_time
    out_of_order = 0
    untimed = 0
    if has_time:
        t = track.time_s
        if not np.isfinite(t).all():
            # Mixed timed and untimed fixes: untimed ones cannot be placed in time.
            untimed = int(np.count_nonzero(~np.isfinite(t)))
            track = track.take(np.isfinite(t))
            t = track.time_s
        if np.any(np.diff(t) < 0):
            running_max = np.maximum.accumulate(t)
            # A fix is out of order when an earlier record has a later time.
            out_of_order = int(np.count_nonzero(t < running_max))
            lag = running_max[:-1] - t[1:]
            worst = int(np.argmax(lag))
            if lag[worst] > gap_s:
                raise InputError(
                    path,
                    f"time goes backwards by {lag[worst]:.0f} s (clock reset or joined logs?); "
                    "split the file or raise --gap",
                    where=f"fix {worst + 2}",
                )
            track = track.take(np.argsort(t, kind="stable"))

    track, exact, conflicts = _drop_duplicates(track, has_time)
    track, splits = _split_segments(track, gap_s, has_time)
    suspect = jump_suspects(track) if has_time and len(track) >= 3 else np.zeros(len(track), bool)
    track = track.with_arrays(suspect=suspect)
    report = CleanReport(
        fixes_read=n_read,
        fixes_kept=len(track),
        exact_duplicates=exact,
        same_time_conflicts=conflicts,
        out_of_order=out_of_order,
        untimed_dropped=untimed,
        gap_splits=splits,
        segments=int(np.unique(track.segment).size) if len(track) else 0,
        suspect_jumps=int(suspect.sum()),
        gap_limit_s=float(gap_s),
        has_time=has_time,
    )
    return track, report


def _drop_duplicates(track: Track, has_time: bool) -> tuple[Track, int, int]:
    """Drop exact duplicates and same-time conflicts (time-sorted input)."""
    if len(track) < 2:
        return track, 0, 0
    h = track.height_m
    if has_time:
        # Compare each fix with the first fix of its run of equal times.
        t = track.time_s
        run_start = np.r_[True, np.diff(t) != 0]
        first = np.maximum.accumulate(np.where(run_start, np.arange(len(t)), 0))
        in_run = ~run_start
        exact_pos = (
            (track.lat_deg == track.lat_deg[first])
            & (track.lon_deg == track.lon_deg[first])
            & ((h == h[first]) | (np.isnan(h) & np.isnan(h[first])))
        )
        exact = in_run & exact_pos
        conflict = in_run & ~exact_pos
    else:
        # Without time, only consecutive identical records are duplicates.
        same_pos = (np.diff(track.lat_deg) == 0) & (np.diff(track.lon_deg) == 0)
        same_h = (np.diff(h) == 0) | (np.isnan(h[1:]) & np.isnan(h[:-1]))
        exact = np.r_[False, same_pos & same_h]
        conflict = np.zeros(len(track), bool)
    keep = ~(exact | conflict)
    return track.take(keep), int(exact.sum()), int(conflict.sum())


def _split_segments(track: Track, gap_s: float, has_time: bool) -> tuple[Track, int]:
    """Renumber segments 0..k-1: a new one at each source segment change and each long gap."""
    if len(track) == 0:
        return track, 0
    src_change = np.r_[False, np.diff(track.segment) != 0]
    gap = np.r_[False, np.diff(track.time_s) > gap_s] if has_time else np.zeros(len(track), bool)
    new = src_change | gap
    segment = np.cumsum(new).astype(np.int32)
    return track.with_arrays(segment=segment), int(np.count_nonzero(gap & ~src_change))


def local_steps_m(track: Track) -> np.ndarray:
    """(n-1, 3) east/north/up steps between consecutive fixes, metres (equirectangular)."""
    lat = np.radians(track.lat_deg)
    lon = np.radians(track.lon_deg)
    dlon = (np.diff(lon) + np.pi) % (2 * np.pi) - np.pi
    mid_lat = 0.5 * (lat[1:] + lat[:-1])
    de = EARTH_RADIUS_M * np.cos(mid_lat) * dlon
    dn = EARTH_RADIUS_M * np.diff(lat)
    du = np.nan_to_num(np.diff(track.height_m))
    return np.column_stack([de, dn, du])


def robust_sigma(x: np.ndarray) -> float:
    """Median absolute deviation scaled to a Gaussian standard deviation (factor 1.4826,
    Rousseeuw & Croux 1993, common practice)."""
    x = x[np.isfinite(x)]
    if x.size == 0:
        return 0.0
    return float(1.4826 * np.median(np.abs(x - np.median(x))))


def jump_suspects(track: Track, z: float = JUMP_Z, passes: int = 4) -> np.ndarray:
    """Boolean mask of fixes whose position is impossible given their neighbours in time.

    Each interior fix is predicted by the cubic through the two fixes before and the two after it
    (Lagrange interpolation in time, so irregular sampling is handled exactly). Real motion, even a
    hard bend, is smooth over five fixes and leaves a residual of the order of the receiver noise;
    a multipath jump leaves its full size. A fix is suspect where its horizontal residual exceeds
    ``z`` robust sigmas of the log's residuals (MAD of the per-axis components, which are about
    Gaussian with zero mean) *and* is the local peak (a jump also shows, at 2/3 of its size, in
    the prediction of its neighbours). Where the fixes are sparse for the log's bends, real
    motion leaves large residuals too; a candidate that motion at up to 1 g could have made is
    a jump only if its residuals around it have a jump's pattern (``survey.jump_shape``).
    Repeated ``passes`` times with suspects removed, so a cluster of jumps is peeled one by
    one. The two fixes at each segment end have no window of their own: a peak on the third is
    put on whichever of the three explains it best (``survey.jump_ends``).

    Work: the first pass predicts every fix, in blocks of ``_JUMP_BLOCK`` (small temporaries);
    a later pass predicts again only the fixes within two places of a fix just removed (no other
    fix has a new neighbour, so its residual is the same), while the robust sigma is taken over
    all residuals each pass, as the test asks.
    """
    n = len(track)
    suspect = np.zeros(n, bool)
    if n < 5:
        return suspect
    # Horizontal positions in metres along the chain of fixes (equirectangular per step), once:
    # dropping a fix later does not move the others.
    pe, pn = _chain_positions(track)
    t, seg = track.time_s, track.segment
    res = np.zeros((2, n))  # residual (east, north) of every fix, where tested
    size = np.zeros(n)  # its norm; 0 where not tested
    tested = np.zeros(n, bool)
    chain = np.arange(n)  # the fixes still in the chain, in order
    beyond_motion = np.zeros(n, bool)  # in a window whose residual no motion can make (jumps_among)
    for a in range(2, n - 2, _JUMP_BLOCK):  # first pass: every interior fix, chain = all fixes
        b = min(n - 2, a + _JUMP_BLOCK)
        _predict(pe, pn, t, seg, [slice(a + q, b + q) for q in (-2, -1, 0, 1, 2)], res, size, tested)
    for p in range(passes):
        m = len(chain)
        if m < 5 or not tested.any():
            break
        sigma = robust_sigma(res[:, tested].ravel())  # both axes' components
        if not sigma > 0:
            break
        cand = np.flatnonzero(size > z * sigma)  # tested fixes only: the others have size 0
        at = np.searchsorted(chain, cand)  # their places in the chain
        before = np.where(at > 0, size[chain[np.maximum(at - 1, 0)]], 0.0)
        after = np.where(at < m - 1, size[chain[np.minimum(at + 1, m - 1)]], 0.0)
        hit = (size[cand] >= before) & (size[cand] >= after)  # the local peak
        bad, at = cand[hit], at[hit]
        if bad.size == 0:
            break
        bad, at = _blame_segment_ends(bad, at, chain, seg, t, pe, pn)
        jump = jumps_among(t, (pe, pn), chain, at, size[bad], z * sigma, beyond_motion, seg)  # not a bend
        bad, at = bad[jump], at[jump]
        if bad.size == 0:
            break
        suspect[bad] = True
        if p == passes - 1:
            break
        # fixes within two places of a removed one get new neighbours: predict them again
        near = np.unique(np.clip(at[:, None] + np.arange(-2, 3), 0, m - 1))
        redo = np.setdiff1d(chain[near], bad, assume_unique=True)
        tested[bad] = False
        size[bad] = 0.0
        chain = np.flatnonzero(~suspect)
        m = len(chain)
        places = np.searchsorted(chain, redo)
        inner = (places >= 2) & (places <= m - 3)
        tested[redo[~inner]] = False
        size[redo[~inner]] = 0.0
        places = places[inner]
        if places.size:
            _predict(pe, pn, t, seg, [chain[places + q] for q in (-2, -1, 0, 1, 2)], res, size, tested)
    return suspect


#: Fixes per block of the first prediction pass of ``jump_suspects``.
_JUMP_BLOCK = 65_536


def _chain_positions(track: Track) -> tuple[np.ndarray, np.ndarray]:
    """East and north (n,) of every fix along the chain of fixes, m from the first: the running
    sum of the equirectangular steps of ``local_steps_m`` (same arithmetic, east and north only)."""
    lat = np.radians(track.lat_deg)
    dlon = np.diff(np.radians(track.lon_deg))
    dlon += np.pi
    dlon %= 2 * np.pi
    dlon -= np.pi
    mid = lat[1:] + lat[:-1]
    mid *= 0.5
    de = np.cos(mid, out=mid)
    de *= EARTH_RADIUS_M
    de *= dlon
    dn = np.diff(lat)
    dn *= EARTH_RADIUS_M
    out = []
    for step in (de, dn):
        pos = np.empty(len(lat))
        pos[0] = 0.0
        np.cumsum(step, out=pos[1:])
        out.append(pos)
    return out[0], out[1]


def _predict(pe, pn, t, seg, sel, res, size, tested) -> None:
    """Test the fixes ``sel[2]`` (index array or slice) against the cubic through ``sel[0]``,
    ``sel[1]`` (the two before) and ``sel[3]``, ``sel[4]`` (the two after): where the five are
    in one segment with strictly increasing times, store the residual and its norm and mark the
    fix tested; elsewhere mark it untested (in place)."""
    i = np.arange(sel[2].start, sel[2].stop) if isinstance(sel[2], slice) else sel[2]
    t0, t1, ti, t2, t3 = (t[s] for s in sel)
    si = seg[sel[2]]
    ok = (seg[sel[0]] == si) & (seg[sel[4]] == si) & (t0 < t1) & (t1 < ti) & (ti < t2) & (t2 < t3)
    tested[i] = ok
    size[i[~ok]] = 0.0
    if not ok.any():
        return
    w0, w1, w2, w3 = lagrange_weights((t0[ok], t1[ok], t2[ok], t3[ok]), ti[ok])
    i = i[ok]
    for axis, p in enumerate((pe, pn)):
        p0, p1, pi, p2, p3 = (p[s][ok] for s in sel)
        res[axis, i] = pi - (w0 * p0 + w1 * p1 + w2 * p2 + w3 * p3)
    size[i] = np.hypot(res[0, i], res[1, i])


def _blame_segment_ends(bad, at, chain, seg, t, pe, pn):
    """Flagged fixes ``bad`` at chain places ``at``, with a flag on the first (last) tested fix
    of a segment moved to the one of its first (last) three fixes whose jump explains the
    residuals best (``survey.jump_ends.end_place``): the two fixes at a segment end have no
    window of their own, so their jump peaks on the third. A loop over flagged fixes, not over
    fixes."""
    segc = seg[chain]
    bad, at = bad.copy(), at.copy()
    for i, a in enumerate(at):
        s0 = int(np.searchsorted(segc, segc[a], "left"))
        s1 = int(np.searchsorted(segc, segc[a], "right"))
        own = chain[s0:s1]  # the segment's places (a view)

        def window(lo, hi, own=own):
            return t[own[lo:hi]], np.column_stack([pe[own[lo:hi]], pn[own[lo:hi]]])

        at[i] = s0 + end_place(int(a) - s0, s1 - s0, window)
        bad[i] = chain[at[i]]
    order = np.argsort(at, kind="stable")
    return bad[order], at[order]
