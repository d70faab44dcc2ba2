"""Does a jump at a fix explain the residuals around it, or does the path bend there?

Both jump tests (``survey.clean.jump_suspects`` and ``survey.smooth.screen_outliers``) predict
each fix from the cubic through its two neighbours on either side (Lagrange interpolation in
time) and flag a fix whose residual is large and the local peak. On a log whose fixes are
sparse for its bends (0.5 Hz on a 40 m radius at 15 m/s: 30 m between fixes) real motion
leaves residuals far above the receiver noise too, and the peak test alone flagged 9 of the
107 fixes of a dual-frequency drive at 0.5 Hz, and 10 of 43 at 0.2 Hz, all of them good
fixes on bends (``tests/test_jump_shape.py``).

The two leave different patterns over the five windows centred on the fix and its four
neighbours. A jump d at fix i enters the window of neighbour j only through j's prediction,
with the Lagrange weight w_j(i) of fix i there, so the five residuals are c d with c_i = 1
and c_j = -w_j(i): for even spacing c = (1/6, -2/3, 1, -2/3, 1/6), which sums to zero.
Smooth motion leaves residuals that change slowly from window to window (the Lagrange
remainder p''''(xi) / 24 prod (t - t_k); on a steady arc five residuals of one size, each
pointing out of the arc). The share of the five residuals' energy that the best jump at i
explains,

    share = sum_A (sum_j c_j r_jA)^2 / (sum_j c_j^2 sum_j sum_A r_jA^2),

is the squared cosine between the residuals and the jump's pattern: 1 for a lone jump (less
the noise's part); 0 for five equal residuals, as the pattern sums to zero (2e-7 on an arc
sampled every 0.3 rad, where the residual turns with the arc from window to window). A kink
at a fix (a bend much shorter than the fix spacing) leaves residuals (0, 1/3, -2/3, 1/3, 0)
times the kink's size and a share of (10/9)^2 / (35/18 x 2/3) = 0.95 (closed form, the sums
above): at that spacing it cannot be told from a jump from positions alone.

Two jumps a place or two apart spoil each other's pattern (a run of multipath fixes), so the
pattern decides only where motion could have made the residual. A path whose acceleration
never exceeds A leaves the cubic prediction of fix i a residual of at most
(A / 2) sum_k |w_k| (t_k - t_i)^2 (Taylor's theorem about t_i with the remainder bounded by
A (t_k - t_i)^2 / 2; the cubic reproduces the straight part exactly, as sum w_k = 1 and
sum w_k (t_k - t_i) = 0), (4/3) A dt^2 for even spacing dt: 0.13 m at 10 Hz, 13 m at 1 Hz,
53 m at 0.5 Hz for A = 1 g. A residual beyond that and the noise allowance is a jump whatever
its pattern, so at high rates the test is the peak test alone, as before.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from .jump_ends import lagrange_weights

__all__ = ["JUMP_SHARE_MIN", "MAX_ACCEL_MPS2", "jumps_among", "jump_share", "motion_residual_bound"]

#: A candidate is a jump only where a jump at it explains at least this share of the residual
#: energy of the windows around it. A lone jump at the test's own threshold (8 robust sigmas of
#: the residuals) leaves at most the noise of five windows unexplained: share about 0.93 on
#: average (expected noise energy 5 x 2 sigma^2 against 35/18 x 64 sigma^2 of jump); smooth
#: motion stays near 0 (a steady arc: 2e-7). Half is a round number between the two.
JUMP_SHARE_MIN = 0.5

#: Acceleration no ground vehicle's tyres can give (about 1 g, standard gravity 9.80665 m/s^2):
#: road tyres grip at a friction coefficient up to about 1 (common practice).
MAX_ACCEL_MPS2 = 9.80665

#: Fewer windows than this around a fix (at a chain end) cannot show a pattern: share 1.
_MIN_WINDOWS = 3


def jump_share(t: np.ndarray, axes: Sequence[np.ndarray], chain: np.ndarray, places: np.ndarray,
               seg: np.ndarray | None = None) -> np.ndarray:
    """Share of the residual energy around each tested fix that a jump at it explains.

    Parameters
    ----------
    t
        (n,) times of the fixes, s.
    axes
        A arrays (n,): the fixes' positions along each axis, m.
    chain
        (m,) indices into ``t`` of the fixes still in the chain, in time order (the jump tests
        drop fixes pass by pass).
    places
        (k,) places in ``chain`` to test; only the nine fixes around each are read.
    seg
        (n,) segment number of each fix, or None: a window must not cross segments.

    Returns
    -------
    (k,) share in [0, 1]; 1 where fewer than three of the five windows (the fix's own and its
    neighbours', each needing two fixes on either side, in one segment, in increasing time)
    exist, since there the pattern cannot be read.
    """
    t = np.asarray(t, float)
    places = np.asarray(places, np.int64)
    k = len(places)
    if k == 0:
        return np.ones(0)
    # the nine fixes around each candidate, (k, 9); a place beyond the chain repeats its end,
    # whose repeated time then fails the windows' strict order
    block = chain[np.clip(places[:, None] + np.arange(-4, 5), 0, len(chain) - 1)]
    T = t[block]
    P = np.stack([np.asarray(a, float)[block] for a in axes], axis=-1)
    num = np.zeros((k, len(axes)))
    cc = np.zeros(k)
    rr = np.zeros(k)
    windows = np.zeros(k, np.int64)
    S = seg[block] if seg is not None else None
    for off in (-2, -1, 0, 1, 2):  # the five windows, vectorised over the candidates
        b = 4 + off  # the window's centre, a column of the block
        cols = (b - 2, b - 1, b + 1, b + 2)
        ok = (T[:, cols[0]] < T[:, cols[1]]) & (T[:, cols[1]] < T[:, b]) & (T[:, b] < T[:, cols[2]]) \
            & (T[:, cols[2]] < T[:, cols[3]])
        if S is not None:
            ok &= (S[:, cols[0]] == S[:, b]) & (S[:, cols[3]] == S[:, b])
        if not ok.any():
            continue
        w = lagrange_weights(tuple(T[ok, c] for c in cols), T[ok, b])
        r = P[ok, b] - sum(wj[:, None] * P[ok, c] for wj, c in zip(w, cols))
        # the candidate's coefficient in this window: 1 in its own, minus its weight elsewhere
        c = np.ones(int(ok.sum())) if off == 0 else -w[cols.index(4)]
        num[ok] += c[:, None] * r
        cc[ok] += c * c
        rr[ok] += np.sum(r * r, axis=1)
        windows[ok] += 1
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.sum(num * num, axis=1) / (cc * rr)
    share = np.where(np.isfinite(share), share, 1.0)
    return np.where(windows >= _MIN_WINDOWS, np.clip(share, 0.0, 1.0), 1.0)


def motion_residual_bound(t: np.ndarray, chain: np.ndarray, places: np.ndarray, accel: float) -> np.ndarray:
    """Largest residual (m) that motion with acceleration at most ``accel`` (m/s^2) can leave
    in the cubic prediction of each fix at ``places`` of ``chain`` from its two neighbours on
    either side: (accel / 2) sum_k |w_k| (t_k - t_i)^2 (see the module docstring). (k,);
    inf where the window leaves the chain."""
    places = np.asarray(places, np.int64)
    ok = (places >= 2) & (places <= len(chain) - 3)
    out = np.full(len(places), np.inf)
    if not ok.any():
        return out
    i = chain[places[ok]]
    nodes = tuple(t[chain[places[ok] + q]] for q in (-2, -1, 1, 2))
    w = lagrange_weights(nodes, t[i])
    out[ok] = 0.5 * accel * sum(np.abs(wk) * (tk - t[i]) ** 2 for wk, tk in zip(w, nodes))
    return out


def jumps_among(t: np.ndarray, axes: Sequence[np.ndarray], chain: np.ndarray, places: np.ndarray,
                size_m: np.ndarray, noise_m: float, beyond_motion: np.ndarray, seg: np.ndarray | None = None,
                accel: float | None = MAX_ACCEL_MPS2) -> np.ndarray:
    """Which of the jump tests' candidates (residual peaks above the noise allowance) are jumps.

    A candidate whose residual ``size_m`` (m) exceeds ``noise_m`` plus the most that motion of
    acceleration ``accel`` can leave (``motion_residual_bound``) marks the five fixes of its
    window in ``beyond_motion`` ((n,) bool over all fixes, updated in place and kept from pass
    to pass): motion cannot have made that neighbourhood. A candidate so marked is a jump;
    the pattern cannot be trusted there, as a run of jumps spoils each one's, and the peak
    test peels the run from the outside in, changing the windows pass by pass. Elsewhere a
    candidate is a jump where a jump at it explains at least ``JUMP_SHARE_MIN`` of the
    residuals around it (``jump_share``). ``accel`` None (a log whose "time" is not time)
    leaves the pattern alone to decide. Other parameters as in ``jump_share``. Returns a (k,)
    bool mask.
    """
    places = np.asarray(places, np.int64)
    if accel is not None:
        beyond = np.asarray(size_m, float) > noise_m + motion_residual_bound(t, chain, places, accel)
        window = np.clip(places[beyond, None] + np.arange(-2, 3), 0, len(chain) - 1)
        beyond_motion[chain[window.ravel()]] = True
    jump = beyond_motion[chain[places]].copy()
    if not jump.all():
        rest = ~jump
        jump[rest] = jump_share(t, axes, chain, places[rest], seg) >= JUMP_SHARE_MIN
    return jump
