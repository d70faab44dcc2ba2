"""Which fix made a jump that shows first at the end of a chain of fixes.

Both jump tests (``survey.clean.jump_suspects`` before anything is smoothed, and
``survey.smooth.screen_outliers`` before the noise is fitted) predict each fix from the cubic
through its two neighbours on either side (Lagrange interpolation in time) and flag the fix
whose residual is the local peak: a jump at place k shows in the residuals of the windows
centred on k - 2 .. k + 2, most in its own. The first two fixes of a chain have no window of
their own, so a jump at place 0 or 1 shows only in the windows centred on places 2 and 3, and
its peak falls on place 2: a good fix is flagged, the jump stays, and each further pass
flags the next good fix (measured on a 10 Hz dual-frequency road log with a 30 m jump at its
second-to-last fix: seven good fixes flagged, the jump kept, and the noise fit then took the
jump for motion: snap density 3e5 m^2 s^-7 against about 1e-2).

Here the jump is put where a single jump explains the first fixes best: for each of places 0,
1 and 2 in turn, the cubic in time is fitted by least squares to the first seven fixes less
that one, and the place whose removal leaves the smallest residual sum of squares is the
jump's (a leave-one-out comparison: every wrong choice keeps the jump in the fit, and the
end fixes' leverage leaves most of it in the residual). Comparing the three windows'
residuals each on its own, as independent, put a jump at place 0 on place 1 in one draw of
20 (0.3 m noise, 30 m jump, ``tests/test_jump_ends.py``): the windows share fixes.
"""

from __future__ import annotations

from typing import Callable

import numpy as np

__all__ = ["lagrange_weights", "end_culprit", "end_place"]


def lagrange_weights(nodes: tuple[np.ndarray, ...], at: np.ndarray) -> list[np.ndarray]:
    """Weights of the Lagrange polynomial through ``nodes`` (each an (m,) array of times) at
    ``at`` ((m,) times): the interpolated value is sum_j w_j y_j."""
    weights = []
    for j, xj in enumerate(nodes):  # loops over the nodes, not over fixes
        w = np.ones_like(at)
        for q, xq in enumerate(nodes):
            if q != j:
                w *= (at - xq) / (xj - xq)
        weights.append(w)
    return weights


def end_place(place: int, m: int, window: Callable[[int, int], tuple[np.ndarray, np.ndarray]]) -> int:
    """Where the jump flagged at ``place`` of a chain of ``m`` fixes is: ``place`` itself,
    unless it is the third fix from either end (the first one the window test reaches there),
    in which case the fix among the three at that end that ``end_culprit`` picks.

    ``window(a, b)`` gives the times (b - a,) and positions (b - a, A) of places a .. b-1; only
    the seven fixes at the end in question are asked for. Chains under 6 fixes keep ``place``.
    """
    if m < 6:
        return place
    if place == 2:
        return end_culprit(*window(0, min(7, m)))
    if place == m - 3:
        return m - 1 - end_culprit(*window(max(m - 7, 0), m), from_end=True)
    return place


def end_culprit(t: np.ndarray, Y: np.ndarray, from_end: bool = False) -> int:
    """Place (0, 1 or 2, counted from the chain's end) of the single jump that best explains the
    fixes at one end of a chain.

    Parameters
    ----------
    t
        (m,) strictly increasing times of the fixes at that end (s; at least 6 are needed to
        tell the places apart, the 7 nearest the end are used).
    Y
        (m, A) their positions, m (any A axes).
    from_end
        False: ``t``, ``Y`` are the first fixes of the chain, places counted from the first.
        True: they are the last fixes, places counted back from the last.

    Returns
    -------
    The place whose removal leaves the cubic least-squares fit of the others the smallest
    residual sum of squares; 2 (the window's own centre, as the peak test says) when there
    are too few fixes to tell.
    """
    t, Y = np.asarray(t, float), np.asarray(Y, float)
    t, Y = (-t[-7:][::-1], Y[-7:][::-1]) if from_end else (t[:7], Y[:7])
    m = len(t)
    if m < 6:
        return 2
    x = (t - t.mean()) / max(float(np.ptp(t)), 1e-300)  # scaled: a well-conditioned fit
    misfit = []
    for k in range(3):
        keep = np.arange(m) != k
        V = np.vander(x[keep], 4)
        coef, *_ = np.linalg.lstsq(V, Y[keep], rcond=None)
        misfit.append(float(np.sum((Y[keep] - V @ coef) ** 2)))
    return int(np.argmin(misfit))
