"""Standard reference: per-axis constant-jerk Kalman filter + RTS smoother, noise by maximum likelihood.

This is the textbook method the accuracy targets are measured against ("a standard per-axis
constant-jerk RTS smoother with noise chosen by maximum likelihood"), built on filterpy
(``KalmanFilter.batch_filter``, ``KalmanFilter.rts_smoother``, ``filterpy.common.
Q_continuous_white_noise``, ``kinematic_state_transition``) -- nothing of the filter is
hand-written here.

Model, per axis of the local frame (east, north, up; metres, seconds)
    state       (position, velocity, acceleration, jerk), driven by white snap of spectral
                density q (m^2/s^7): the jerk motion model (Mehrotra & Mahapatra, IEEE Trans.
                AES 33(4), 1997; REFERENCES.md). F and Q come from each step's own dt
                (irregular sampling and outages work); Q is filterpy's closed-form discretised
                continuous white noise for a 4-state chain (filterpy documentation of
                ``Q_continuous_white_noise``: Q[0,0] = q dt^7/252, ... Q[3,3] = q dt).
    measurement the position, white noise of variance r (m^2).
    start       vague: the first fix's position, zero derivatives, large P.
East and north share one (q, r) (their log-likelihoods summed: one 8-state block-diagonal
filter with a 2-vector measurement); up has its own (q, r).

Noise by maximum likelihood: the Gaussian innovation log-likelihood
    log L = -1/2 sum_k [ log det(2 pi S_k) + y_k' S_k^-1 y_k ],  y_k = z_k - H x_k|k-1,
    S_k = H P_k|k-1 H' + R,
computed (vectorised over steps) from the filter's predicted means and covariances that
``batch_filter`` returns, leaving out the first four steps (they only pin down the vague start:
the diffuse-start likelihood, common practice), maximised over (log q, log r) with scipy's
Nelder-Mead. Starting values: r from the robust (median absolute deviation) variance of the
second differences of the positions (a white error e gives var(e_{k+1} - 2 e_k + e_{k-1}) =
6 r); q from a coarse grid of the ratio q dt^7 / r with r held at that value.

Then the Rauch-Tung-Striebel fixed-interval smoother (Rauch, Tung & Striebel, AIAA J. 3(8),
1965; REFERENCES.md) gives velocity, acceleration and jerk at the fix times, and kappa, tau
follow from ``survey.geometry.curvature_torsion``. No outlier handling, no model of a slowly
wandering receiver error, no chainage: it is the textbook method, nothing more.
"""

from __future__ import annotations

import numpy as np
from filterpy.common import Q_continuous_white_noise, inv_diagonal, kinematic_state_transition
from filterpy.kalman import KalmanFilter
from scipy.linalg import block_diag
from scipy.optimize import minimize

from survey.geometry import curvature_torsion

#: vague start: 1-sigma of position (m), velocity (m/s), acceleration (m/s^2), jerk (m/s^3)
#: around (first fix, 0, 0, 0) -- far wider than any survey vehicle's motion
VAGUE_SIGMA = np.array([100.0, 100.0, 30.0, 10.0])
#: innovations left out of the likelihood: they only pin down the 4-state vague start
DIFFUSE_STEPS = 4
#: coarse grid of log10(q dt^7 / r) for the starting value of q (dt = median step); the
#: search then refines q by factors of 10 and less
_RATIO_GRID = np.arange(-9.0, 1.01, 2.0)


class AxisGroup:
    """One constant-jerk filter over ``d`` axes that share (q, r), on fixed times and data.

    The per-step transition matrices and unit-density process noise are built once; every
    likelihood evaluation only scales them and runs filterpy's ``batch_filter``.
    """

    def __init__(self, time_s: np.ndarray, z_m: np.ndarray):
        self.n, self.d = z_m.shape
        dt = np.diff(time_s, prepend=time_s[0])  # step 0: dt = 0 -> F = I, Q = 0 (no move before the first fix)
        self.dt_med = float(np.median(dt[1:])) if self.n > 1 else 1.0
        self.Fs = np.array([block_diag(*[kinematic_state_transition(3, h)] * self.d) for h in dt])
        self.Q1s = np.array([Q_continuous_white_noise(4, h, 1.0, block_size=self.d) for h in dt])
        self.zs = z_m[:, :, None]  # (n, d, 1): batch_filter hands each z to update() unchanged
        # measured: the position of every axis (state order per axis: p, v, a, j)
        self.H = block_diag(*[np.array([[1.0, 0.0, 0.0, 0.0]])] * self.d)
        self.pos = np.arange(self.d) * 4
        self.evaluations = 0

    def _filter(self, q: float, r: float):
        kf = KalmanFilter(dim_x=4 * self.d, dim_z=self.d)
        kf.x = np.zeros((4 * self.d, 1))
        kf.x[self.pos, 0] = self.zs[0, :, 0]
        kf.P = np.diag(np.tile(VAGUE_SIGMA**2, self.d))
        kf.H = self.H
        kf.R = np.eye(self.d) * r
        # the axes are independent blocks, so S = H P H' + R is exactly diagonal: filterpy's own
        # faster inverse for that case (its documentation: identical to np.linalg.inv there)
        kf.inv = inv_diagonal
        Qs = self.Q1s * q
        means, covs, means_p, covs_p = kf.batch_filter(self.zs, Fs=self.Fs, Qs=Qs)
        return kf, means, covs, means_p, covs_p, Qs

    def neg_log_likelihood(self, log_q: float, log_r: float) -> float:
        """-log L of the innovations after the vague start (summed over the group's axes)."""
        q, r = np.exp(log_q), np.exp(log_r)
        _, _, _, means_p, covs_p, _ = self._filter(q, r)
        self.evaluations += 1
        k = slice(DIFFUSE_STEPS, None)
        y = self.zs[k, :, 0] - means_p[k][:, self.pos, 0]  # (m, d)
        S = covs_p[k][:, self.pos[:, None], self.pos[None, :]] + np.eye(self.d) * r  # H P H' + R
        sign, logdet = np.linalg.slogdet(S)
        if np.any(sign <= 0):
            return np.inf
        maha = np.einsum("ki,ki->k", y, np.linalg.solve(S, y[:, :, None])[:, :, 0])
        return float(0.5 * np.sum(logdet + maha + self.d * np.log(2.0 * np.pi)))

    def start(self) -> tuple[float, float]:
        """(log q, log r) to start the search from: robust second-difference r, grid for q."""
        d2 = np.diff(self.zs[:, :, 0], 2, axis=0)
        mad = np.median(np.abs(d2 - np.median(d2, axis=0)), axis=0)
        r0 = max(float(np.mean((1.4826 * mad) ** 2) / 6.0), 1e-8)
        log_r = np.log(r0)
        log_qs = np.log(10.0**_RATIO_GRID * r0 / self.dt_med**7)
        nll = [self.neg_log_likelihood(lq, log_r) for lq in log_qs]
        return float(log_qs[int(np.argmin(nll))]), float(log_r)

    def fit(self) -> tuple[float, float]:
        """Maximum-likelihood (q, r): m^2/s^7 and m^2."""
        x0 = np.array(self.start())
        # simplex steps of about a factor 10 in q and 2 in r; stop at ~2 % in each
        simplex = np.array([x0, x0 + [np.log(10.0), 0.0], x0 + [0.0, np.log(2.0)]])
        res = minimize(lambda p: self.neg_log_likelihood(p[0], p[1]), x0, method="Nelder-Mead",
                       options={"initial_simplex": simplex, "xatol": 0.02, "fatol": 0.01, "maxfev": 200})
        return float(np.exp(res.x[0])), float(np.exp(res.x[1]))

    def smooth(self, q: float, r: float) -> np.ndarray:
        """RTS-smoothed states (n, d, 4): position, velocity, acceleration, jerk per axis."""
        kf, means, covs, _, _, Qs = self._filter(q, r)
        xs, _, _, _ = kf.rts_smoother(means, covs, Fs=self.Fs, Qs=Qs)
        return xs[:, :, 0].reshape(self.n, self.d, 4)


def standard_fit(time_s: np.ndarray, enu_m: np.ndarray) -> dict:
    """Fit and smooth; returns times, smoothed states (n, 3, 4), the ML noise and evaluation counts.

    Duplicate times keep their first fix (as ``baseline.baseline_kappa_tau``); fixes are put in
    time order.
    """
    t, idx = np.unique(time_s, return_index=True)
    y = np.asarray(enu_m, float)[idx]
    out = {"time_s": t, "noise": {}, "evaluations": {}}
    states = []
    for name, cols in (("horizontal", [0, 1]), ("vertical", [2])):
        g = AxisGroup(t, y[:, cols])
        q, r = g.fit()
        states.append(g.smooth(q, r))
        out["noise"][name] = (q, r)
        out["evaluations"][name] = g.evaluations
    out["states"] = np.concatenate(states, axis=1)
    return out


def standard_kappa_tau(time_s: np.ndarray, enu_m: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(t, kappa 1/m, tau 1/m) at the (unique, sorted) fix times from the ML constant-jerk RTS smoother."""
    fit = standard_fit(time_s, enu_m)
    s = fit["states"]
    kappa, tau = curvature_torsion(s[:, :, 1], s[:, :, 2], s[:, :, 3])
    return fit["time_s"], kappa, tau
