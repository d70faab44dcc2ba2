"""Rauch-Tung-Striebel fixed-interval smoother for the error-state filter.

Rauch, Tung & Striebel, "Maximum likelihood estimates of linear dynamic systems", AIAA J. 3(8),
1445-1450, 1965, applied to the error state about the filter's own linearisation (the EKF smoother
needs the per-step transition matrices, which ``run_filter`` keeps):

    C_k   = P_f,k Phi_k^T P_p,k+1^-1                         (all gains in one batched solve)
    x_s,k = x_f,k [+] C_k (x_s,k+1 [-] x_p,k+1)
    P_s,k = P_f,k + C_k (P_s,k+1 - P_p,k+1) C_k^T            (symmetrised every step)

where [-] is the error-state difference (attitude: Log(R_p^T R_s), local like the filter's error)
and [+] its injection. Covariances are symmetrised at every step so they stay symmetric positive
definite over long logs (a reported failure of general Kalman libraries: REFERENCES.md).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from .eskf import BA, BG, NX, P_, TH, V_, WB, FilterRun, NavStates, inject
from .preint import so3_log

FloatArray = NDArray[np.float64]


def smoother_gains(run: FilterRun) -> FloatArray:
    """(N-1, NX, NX) RTS gains C_k, from one batched linear solve."""
    # C_k^T = P_p,k+1^-1 Phi_k P_f,k  (P symmetric)
    rhs = run.Phi @ run.Pf[:-1]
    return np.swapaxes(np.linalg.solve(run.Pp[1:], rhs), 1, 2)


def rts_smooth(run: FilterRun) -> tuple[NavStates, FloatArray]:
    """Smoothed states and covariances at every epoch."""
    N = len(run.Pf)
    xs = run.xf.copy()
    Ps = run.Pf.copy()
    if N < 2:
        return xs, Ps
    C = smoother_gains(run)
    dP_next = np.zeros((NX, NX))
    d = np.empty(NX)
    for k in range(N - 2, -1, -1):
        d[P_] = xs.p[k + 1] - run.xp.p[k + 1]
        d[V_] = xs.v[k + 1] - run.xp.v[k + 1]
        d[TH] = so3_log(run.xp.R[k + 1].T @ xs.R[k + 1])
        d[BA] = xs.ba[k + 1] - run.xp.ba[k + 1]
        d[BG] = xs.bg[k + 1] - run.xp.bg[k + 1]
        d[WB] = xs.wb[k + 1] - run.xp.wb[k + 1]
        Ck = C[k]
        xs.set(k, inject(run.xf.get(k), Ck @ d))
        dP_next = Ps[k + 1] - run.Pp[k + 1]
        Pk = run.Pf[k] + Ck @ dP_next @ Ck.T
        Ps[k] = 0.5 * (Pk + Pk.T)
    return xs, Ps
