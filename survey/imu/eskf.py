"""Loosely coupled error-state extended Kalman filter, run at the epoch rate on preintegrated IMU
increments.

Nominal state: position p and velocity v in the local frame (east, north, up; m, m/s), attitude
R = C_nb (body x forward, y left, z up -> local), accelerometer bias ba (m/s^2), gyro bias bg
(rad/s) and the GNSS receiver's slow position error ("wander") b (east, north, up; m). Error state
(18): dx = [dp, dv, dtheta, dba, dbg, db] with the attitude error local to the body,
R_true = R Exp(dtheta) (Sola, "Quaternion kinematics for the error-state Kalman filter",
arXiv:1711.02508, 2017, sec. 5 and 7; Groves, *Principles of GNSS, Inertial, and Multisensor
Integrated Navigation Systems*, 2nd ed., 2013, ch. 14 for the loosely coupled structure).

Receiver wander: each axis of b is a first-order Gauss-Markov process with correlation time tau
and stationary variance sigma^2, b_j = exp(-T/tau) b_i + w, var(w) = sigma^2 (1 - exp(-2T/tau))
(Groves 2013, ch. 14 augments the state with correlated GNSS range/position errors the same way).
A GNSS position measures p + b + white noise; a GNSS (Doppler) velocity measures v. The IMU and
the velocities carry the shape of the path, the positions only its slow offset, so the wander is
told apart from the motion instead of being pulled into the path.

Prediction over an epoch interval uses the preintegrated increments corrected to the current bias
estimate (``survey.imu.preint``); its transition matrix, to first order in the error state, is

    dp_j  = dp_i + T dv_i - R_i [dp x] dtheta_i + R_i Jp_ba dba + R_i Jp_bg dbg
    dv_j  = dv_i          - R_i [dv x] dtheta_i + R_i Jv_ba dba + R_i Jv_bg dbg
    dth_j = dR^T dtheta_i + JR_bg dbg,           dba, dbg: random walks.

Updates: GNSS position, GNSS horizontal velocity (east, north from speed and course over ground;
loosely coupled velocity update, Groves 2013 ch. 14) and zero velocity while stationary (ZUPT,
Groves 2013 ch. 15), all with the Joseph-form covariance update; a chi-square gate on the
normalised innovation squared rejects outliers in positions and velocities separately (after
``max_rejects`` rejections in a row the next one is taken anyway, so a filter that has drifted
during an outage is pulled back instead of locking out every fix). After each injection the covariance is reset
with G = diag(I, I, I - [dtheta/2 x], I, I) (Sola 2017 eq. 287) and symmetrised.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy.stats import chi2

from .preint import Preintegrated, skew, so3_exp
from .reader import STANDARD_GRAVITY_MPS2

FloatArray = NDArray[np.float64]
GRAVITY = np.array([0.0, 0.0, -STANDARD_GRAVITY_MPS2])
NX = 18
P_, V_, TH, BA, BG, WB = slice(0, 3), slice(3, 6), slice(6, 9), slice(9, 12), slice(12, 15), slice(15, 18)


@dataclass
class NavStates:
    """A sequence of nominal states (N leading)."""

    p: FloatArray  # (N, 3)
    v: FloatArray  # (N, 3)
    R: FloatArray  # (N, 3, 3)
    ba: FloatArray  # (N, 3)
    bg: FloatArray  # (N, 3)
    wb: FloatArray  # (N, 3) GNSS position wander, m

    @classmethod
    def empty(cls, n: int) -> "NavStates":
        z = lambda: np.zeros((n, 3))  # noqa: E731
        return cls(z(), z(), np.zeros((n, 3, 3)), z(), z(), z())

    def copy(self) -> "NavStates":
        return NavStates(self.p.copy(), self.v.copy(), self.R.copy(), self.ba.copy(), self.bg.copy(), self.wb.copy())

    def get(self, k: int) -> tuple:
        return (self.p[k].copy(), self.v[k].copy(), self.R[k].copy(), self.ba[k].copy(), self.bg[k].copy(),
                self.wb[k].copy())

    def set(self, k: int, x: tuple) -> None:
        self.p[k], self.v[k], self.R[k], self.ba[k], self.bg[k], self.wb[k] = x


def inject(x: tuple, dx: FloatArray) -> tuple:
    """Nominal state (+) error: x [+] dx."""
    p, v, R, ba, bg, wb = x
    return p + dx[P_], v + dx[V_], R @ so3_exp(dx[TH]), ba + dx[BA], bg + dx[BG], wb + dx[WB]


@dataclass(frozen=True)
class Wander:
    """Gauss-Markov receiver wander per axis (east, north, up): stationary 1-sigma, m, and
    correlation time, s."""

    sigma_m: FloatArray
    tau_s: float

    def step(self, T: float) -> tuple[float, FloatArray]:
        """(exp(-T/tau), per-axis driving-noise variance sigma^2 (1 - exp(-2T/tau)))."""
        phi = float(np.exp(-T / self.tau_s))
        return phi, np.asarray(self.sigma_m, float) ** 2 * (1.0 - phi * phi)


def predict(x: tuple, P: FloatArray, pre: Preintegrated, k: int, q_ba: float, q_bg: float, wander: Wander):
    """Propagate state and covariance over interval ``k``.

    ``q_ba``/``q_bg`` are the bias random-walk densities squared ((m/s^2)^2/s, (rad/s)^2/s).
    Returns (x_pred, P_pred, Phi).
    """
    p, v, R, ba, bg, wb = x
    T = pre.T[k]
    dba = ba - pre.ba_lin[k]
    dbg = bg - pre.bg_lin[k]
    dR = pre.dR[k] @ so3_exp(pre.JR_bg[k] @ dbg)
    dv = pre.dv[k] + pre.Jv_ba[k] @ dba + pre.Jv_bg[k] @ dbg
    dp = pre.dp[k] + pre.Jp_ba[k] @ dba + pre.Jp_bg[k] @ dbg
    phi_w, q_w = wander.step(T)
    x_new = (p + v * T + 0.5 * GRAVITY * T * T + R @ dp, v + GRAVITY * T + R @ dv, R @ dR, ba, bg, phi_w * wb)
    Phi = np.eye(NX)
    Phi[P_, V_] = np.eye(3) * T
    Phi[P_, TH] = -R @ skew(dp)
    Phi[P_, BA] = R @ pre.Jp_ba[k]
    Phi[P_, BG] = R @ pre.Jp_bg[k]
    Phi[V_, TH] = -R @ skew(dv)
    Phi[V_, BA] = R @ pre.Jv_ba[k]
    Phi[V_, BG] = R @ pre.Jv_bg[k]
    Phi[TH, TH] = dR.T
    Phi[TH, BG] = pre.JR_bg[k]
    Phi[WB, WB] = np.eye(3) * phi_w
    # preintegration noise (dtheta, dv, dp) -> (dp, dv, dtheta) in the local frame
    c = pre.cov[k]
    G = np.zeros((NX, 9))
    G[P_, 6:9] = R
    G[V_, 3:6] = R
    G[TH, 0:3] = np.eye(3)
    Q = G @ c @ G.T
    Q[BA, BA] += np.eye(3) * q_ba * T
    Q[BG, BG] += np.eye(3) * q_bg * T
    Q[WB, WB] += np.diag(q_w)
    P_new = Phi @ P @ Phi.T + Q
    return x_new, 0.5 * (P_new + P_new.T), Phi


def update(x: tuple, P: FloatArray, H: FloatArray, innov: FloatArray, Rm: FloatArray, gate: float | None):
    """Kalman update of the error state; returns (x, P, nis, accepted)."""
    S = H @ P @ H.T + Rm
    S = 0.5 * (S + S.T)
    try:
        Sinv_y = np.linalg.solve(S, innov)
    except np.linalg.LinAlgError:
        return x, P, float("nan"), False
    nis = float(innov @ Sinv_y)
    if gate is not None and nis > gate:
        return x, P, nis, False
    K = np.linalg.solve(S, H @ P).T  # P H^T S^-1 (S, P symmetric)
    dx = K @ innov
    IKH = np.eye(NX) - K @ H
    P = IKH @ P @ IKH.T + K @ Rm @ K.T
    x = inject(x, dx)
    G = np.eye(NX)
    G[TH, TH] -= skew(0.5 * dx[TH])
    P = G @ P @ G.T
    return x, 0.5 * (P + P.T), nis, True


@dataclass
class FilterRun:
    """Everything the smoother needs, per epoch (N) or interval (N-1)."""

    xf: NavStates
    Pf: FloatArray
    xp: NavStates  # predicted state at epoch k (k >= 1); xp[0] = xf[0]
    Pp: FloatArray
    Phi: FloatArray  # (N-1, NX, NX)
    nis: FloatArray  # (N,) NIS of the position update (NaN = none)
    accepted: NDArray[np.bool_]  # (N,) position fix used
    rejected: NDArray[np.bool_]  # (N,) position fix refused by the gate
    vel_accepted: NDArray[np.bool_]  # (N,) GNSS velocity used
    vel_rejected: NDArray[np.bool_]  # (N,) GNSS velocity refused by the gate
    zupt: NDArray[np.bool_]  # (N,) zero-velocity update applied


def run_filter(x0: tuple, P0: FloatArray, pre: Preintegrated, z_pos: FloatArray, r_pos: FloatArray,
               zupt: NDArray[np.bool_], q_ba: float, q_bg: float, wander: Wander, gate_prob: float | None = 0.9999,
               max_rejects: int = 5, zupt_sigma_mps: float = 0.02, z_vel: FloatArray | None = None,
               r_vel: FloatArray | None = None, still: NDArray[np.bool_] | None = None,
               zupt_max_speed_mps: float = 0.5) -> FilterRun:
    """Forward pass over N epochs.

    Parameters
    ----------
    z_pos
        (N, 3) GNSS position per epoch in the local frame (NaN rows = no fix; NaN up = no height).
        It measures p + b (position plus receiver wander).
    r_pos
        (N, 3) variances of the white part of the position error, east, north, up, m^2.
    zupt
        (N,) zero-velocity update at the epoch, unconditional (the static start).
    wander
        Gauss-Markov model of the receiver wander b.
    gate_prob
        Chi-square gate on the NIS: a fix is refused when its NIS exceeds this quantile of the
        chi-square distribution with as many degrees of freedom as measured axes (scipy.stats.chi2;
        0.9999 gives 21.1 for 3 axes, 18.4 for 2). None disables the gate.
    z_vel, r_vel
        (N, 2) GNSS horizontal velocity east, north, m/s (NaN = none) and (N,) its per-axis
        variance, (m/s)^2.
    still
        (N,) the IMU says the mover stands still at the epoch: a zero-velocity update is applied
        when the predicted speed is also below ``zupt_max_speed_mps`` (a steady cruise on a
        straight looks still to an IMU too).
    """
    N = len(z_pos)
    xf, xp = NavStates.empty(N), NavStates.empty(N)
    Pf = np.empty((N, NX, NX))
    Pp = np.empty((N, NX, NX))
    Phi = np.empty((max(N - 1, 0), NX, NX))
    nis = np.full(N, np.nan)
    acc = np.zeros(N, bool)
    rej = np.zeros(N, bool)
    vacc = np.zeros(N, bool)
    vrej = np.zeros(N, bool)
    zu = np.zeros(N, bool)
    x, P = x0, P0.copy()
    run = vrun = 0
    gates = {d: (None if gate_prob is None else float(chi2.ppf(gate_prob, d))) for d in (1, 2, 3)}
    H_all = np.zeros((3, NX))
    H_all[:, P_] = np.eye(3)
    H_all[:, WB] = np.eye(3)
    Hv = np.zeros((2, NX))
    Hv[:, 3:5] = np.eye(2)
    Hz = np.zeros((3, NX))
    Hz[:, V_] = np.eye(3)
    Rz = np.eye(3) * zupt_sigma_mps**2
    has_vel = z_vel is not None and r_vel is not None
    for k in range(N):
        if k > 0:
            x, P, Phi[k - 1] = predict(x, P, pre, k - 1, q_ba, q_bg, wander)
        xp.set(k, x)
        Pp[k] = P
        z = z_pos[k]
        ok = np.isfinite(z)
        if ok[0] and ok[1]:
            H = H_all[ok]
            Rm = np.diag(r_pos[k][ok])
            innov = z[ok] - (x[0] + x[5])[ok]
            g = None if run >= max_rejects else gates[int(ok.sum())]
            x, P, nis[k], acc[k] = update(x, P, H, innov, Rm, g)
            rej[k] = not acc[k]
            run = run + 1 if rej[k] else 0
        if has_vel and np.isfinite(z_vel[k]).all():
            g = None if vrun >= max_rejects else gates[2]
            x, P, _, vacc[k] = update(x, P, Hv, z_vel[k] - x[1][:2], np.eye(2) * r_vel[k], g)
            vrej[k] = not vacc[k]
            vrun = vrun + 1 if vrej[k] else 0
        if zupt[k] or (still is not None and still[k] and np.linalg.norm(x[1]) < zupt_max_speed_mps):
            x, P, _, _ = update(x, P, Hz, -x[1], Rz, None)
            zu[k] = True
        xf.set(k, x)
        Pf[k] = P
    return FilterRun(xf, Pf, xp, Pp, Phi, nis, acc, rej, vacc, vrej, zu)
