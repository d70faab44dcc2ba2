"""IMU preintegration between filter epochs, vectorised across all epochs at once.

Between two epochs t_i < t_j the IMU samples are folded into relative motion increments that do
not depend on the (unknown) state at t_i (Forster, Carlone, Dellaert & Scaramuzza, "On-manifold
preintegration for real-time visual-inertial odometry", IEEE Trans. Robotics 33(1), 2017):

    dR_ij = prod_k Exp((w_k - bg) dt_k)
    dv_ij = sum_k dR_ik (a_k - ba) dt_k
    dp_ij = sum_k [dv_ik dt_k + 1/2 dR_ik (a_k - ba) dt_k^2]

so that, in a local level frame with gravity g = (0, 0, -9.80665) m/s^2 (flat-earth mechanisation,
Groves 2013 ch. 5 without Earth rate and transport rate),

    R_j = R_i dR_ij,   v_j = v_i + g T + R_i dv_ij,   p_j = p_i + v_i T + g T^2/2 + R_i dp_ij.

The bias Jacobians (d dR/d bg, d dv/d ba, d dv/d bg, d dp/d ba, d dp/d bg) let the filter change
the bias without re-integrating (first-order correction, Forster et al. 2017 eqs. 44-45), and the
9x9 covariance of (dtheta, dv, dp) carries the white sensor noise (their eq. 63).

Vectorisation: every epoch interval is one row of padded (n_intervals, m) arrays of sub-steps;
the loop runs over the m sub-steps (about rate_imu / rate_gnss of them), each step one batched
numpy operation over all intervals. Sub-step boundaries are the IMU sample times plus the epoch
times; the measurement of a sub-step is the IMU signal linearly interpolated to its midpoint
(second-order accurate, and it bridges IMU gaps by interpolation).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy.spatial.transform import Rotation

FloatArray = NDArray[np.float64]


def skew(v: FloatArray) -> FloatArray:
    """(..., 3) -> (..., 3, 3) cross-product matrices, [v x] w = v x w."""
    z = np.zeros(v.shape[:-1])
    return np.stack(
        (np.stack((z, -v[..., 2], v[..., 1]), -1),
         np.stack((v[..., 2], z, -v[..., 0]), -1),
         np.stack((-v[..., 1], v[..., 0], z), -1)),
        -2,
    )


def so3_exp(phi: FloatArray) -> FloatArray:
    """Rotation vectors (..., 3) -> matrices (..., 3, 3) (scipy Rotation)."""
    shp = phi.shape[:-1]
    return Rotation.from_rotvec(phi.reshape(-1, 3)).as_matrix().reshape(shp + (3, 3))


def so3_log(R: FloatArray) -> FloatArray:
    """Matrices (..., 3, 3) -> rotation vectors (..., 3) (scipy Rotation)."""
    shp = R.shape[:-2]
    return Rotation.from_matrix(R.reshape(-1, 3, 3)).as_rotvec().reshape(shp + (3,))


@dataclass
class SubSteps:
    """Padded sub-steps of every epoch interval.

    Attributes
    ----------
    dt
        (n_int, m) sub-step lengths, s (0 = padding).
    accel, gyro
        (n_int, m, 3) IMU signal at each sub-step midpoint (body frame, SI).
    noise_scale
        (n_int, m) multiplier of the white-noise variance (> 1 on saturated samples).
    t_end
        (n_int, m) time at the end of each sub-step (padding repeats the interval end).
    """

    dt: FloatArray
    accel: FloatArray
    gyro: FloatArray
    noise_scale: FloatArray
    t_end: FloatArray


def make_substeps(imu_t: FloatArray, accel: FloatArray, gyro: FloatArray, epoch_t: FloatArray,
                  noise_scale: FloatArray | None = None) -> SubSteps:
    """Split [epoch_t[0], epoch_t[-1]] at IMU sample times and epochs; pad per interval."""
    lo, hi = epoch_t[0], epoch_t[-1]
    inner = imu_t[(imu_t > lo) & (imu_t < hi)]
    grid = np.union1d(inner, epoch_t)
    seg = np.searchsorted(epoch_t, grid[:-1], side="right") - 1  # interval of each sub-step
    n_int = len(epoch_t) - 1
    counts = np.bincount(seg, minlength=n_int)
    m = int(counts.max())
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    col = np.arange(len(seg)) - starts[seg]
    mid = 0.5 * (grid[:-1] + grid[1:])
    dt = np.zeros((n_int, m))
    dt[seg, col] = np.diff(grid)
    acc = np.zeros((n_int, m, 3))
    gyr = np.zeros((n_int, m, 3))
    for k in range(3):
        acc[seg, col, k] = np.interp(mid, imu_t, accel[:, k])
        gyr[seg, col, k] = np.interp(mid, imu_t, gyro[:, k])
    ns = np.ones((n_int, m))
    if noise_scale is not None:
        idx = np.clip(np.searchsorted(imu_t, mid, side="right") - 1, 0, len(imu_t) - 1)
        ns[seg, col] = noise_scale[idx]
    t_end = np.repeat(epoch_t[1:, None], m, axis=1)
    t_end[seg, col] = grid[1:]
    return SubSteps(dt, acc, gyr, ns, t_end)


@dataclass
class Preintegrated:
    """Increments, bias Jacobians and noise covariance of every epoch interval (n_int leading).

    ``path_*`` hold the running increments after each sub-step (only with ``keep_path``).
    """

    T: FloatArray
    dR: FloatArray
    dv: FloatArray
    dp: FloatArray
    JR_bg: FloatArray
    Jv_ba: FloatArray
    Jv_bg: FloatArray
    Jp_ba: FloatArray
    Jp_bg: FloatArray
    cov: FloatArray  # (n_int, 9, 9) over (dtheta, dv, dp)
    ba_lin: FloatArray
    bg_lin: FloatArray
    path_dR: FloatArray | None = None
    path_dv: FloatArray | None = None
    path_dp: FloatArray | None = None


def preintegrate(steps: SubSteps, ba_lin: FloatArray, bg_lin: FloatArray, gyro_psd: float, accel_psd: float,
                 keep_path: bool = False) -> Preintegrated:
    """Preintegrate every interval (see module docstring).

    Parameters
    ----------
    ba_lin, bg_lin
        (n_int, 3) bias linearisation points per interval (m/s^2, rad/s).
    gyro_psd, accel_psd
        White-noise spectral densities squared: (rad/s)^2/Hz and (m/s^2)^2/Hz.
    """
    n, m = steps.dt.shape
    eye = np.broadcast_to(np.eye(3), (n, 3, 3))
    dR = eye.copy()
    dv = np.zeros((n, 3))
    dp = np.zeros((n, 3))
    JR = np.zeros((n, 3, 3))
    Jva = np.zeros((n, 3, 3))
    Jvg = np.zeros((n, 3, 3))
    Jpa = np.zeros((n, 3, 3))
    Jpg = np.zeros((n, 3, 3))
    cov = np.zeros((n, 9, 9))
    A = np.zeros((n, 9, 9))
    A[:, 3:6, 3:6] = np.eye(3)
    A[:, 6:9, 6:9] = np.eye(3)
    if keep_path:
        pR = np.empty((n, m, 3, 3))
        pv = np.empty((n, m, 3))
        pp = np.empty((n, m, 3))
    for k in range(m):
        h = steps.dt[:, k]
        h3 = h[:, None, None]
        a = steps.accel[:, k] - ba_lin
        w = steps.gyro[:, k] - bg_lin
        phi = w * h[:, None]
        dRk = so3_exp(phi)
        Jr = eye - 0.5 * skew(phi)  # right Jacobian of SO(3) to first order (|phi| << 1)
        # rotate the specific force with the mid-step attitude, dR Exp(phi/2) a ~ dR (a + phi x a / 2)
        Ra = np.einsum("nij,nj->ni", dR, a + 0.5 * np.cross(phi, a))
        Rax = dR @ skew(a)
        # covariance (before the increments move on)
        A[:, 0:3, 0:3] = np.swapaxes(dRk, 1, 2)
        A[:, 3:6, 0:3] = -Rax * h3
        A[:, 6:9, 0:3] = -0.5 * Rax * h3**2
        A[:, 6:9, 3:6] = np.eye(3) * h3
        cov = A @ cov @ np.swapaxes(A, 1, 2)
        s = steps.noise_scale[:, k] * h
        qg = gyro_psd * s
        qa = accel_psd * s
        for i in range(3):
            cov[:, i, i] += qg
            cov[:, 3 + i, 3 + i] += qa
            cov[:, 3 + i, 6 + i] += 0.5 * qa * h
            cov[:, 6 + i, 3 + i] += 0.5 * qa * h
            cov[:, 6 + i, 6 + i] += 0.25 * qa * h * h
        # bias Jacobians (old dR, old JR)
        RaxJR = Rax @ JR
        Jpa += Jva * h3 - 0.5 * dR * h3**2
        Jpg += Jvg * h3 - 0.5 * RaxJR * h3**2
        Jva -= dR * h3
        Jvg -= RaxJR * h3
        JR = np.swapaxes(dRk, 1, 2) @ JR - Jr * h3
        # increments
        dp += dv * h[:, None] + 0.5 * Ra * (h**2)[:, None]
        dv += Ra * h[:, None]
        dR = dR @ dRk
        if keep_path:
            pR[:, k] = dR
            pv[:, k] = dv
            pp[:, k] = dp
    cov = 0.5 * (cov + np.swapaxes(cov, 1, 2))
    out = Preintegrated(steps.dt.sum(axis=1), dR, dv, dp, JR, Jva, Jvg, Jpa, Jpg, cov,
                        np.asarray(ba_lin, float), np.asarray(bg_lin, float))
    if keep_path:
        out.path_dR, out.path_dv, out.path_dp = pR, pv, pp
    return out
