"""Fixed-interval smoothing of GNSS positions with a constant-jerk motion model, solved as one
banded linear system, with the noise chosen by maximum likelihood.

Model (per axis; east and north share one noise model, up has its own)
----------------------------------------------------------------------
The path along one axis is driven by white "snap" (d^4 p / dt^4) of spectral density ``q``
(m^2 s^-7): the constant-jerk motion model of Mehrotra & Mahapatra (IEEE TAES 33(4), 1997), with
state x = (p, v, a, j). Its exact discretisation over an interval h is

    F = [[1, h, h^2/2, h^3/6], [0, 1, h, h^2/2], [0, 0, 1, h], [0, 0, 0, 1]],
    Q_ij = q h^(7-i-j) / ((3-i)! (3-j)! (7-i-j)).

The state is carried on a uniform grid of knots t_0 + k h. Between two knots the path is the
degree-7 Hermite polynomial that matches (p, v, a, j) at both ends -- exactly the posterior mean of
this model between two knots where the state is known (the posterior mean path of an
integrated-Wiener prior is a spline of degree 2*4-1 = 7; Wahba's spline correspondence). A fix at
time t_i measures the interpolated position: y_i = phi(t_i) . [x_k, x_k+1] + e_i, white e_i of
variance r_i. With knots spaced finer than the smoother's own scale (``knot_spacing``) this is a
faithful finite-dimensional version of the Rauch-Tung-Striebel fixed-interval smoother (Rauch,
Tung & Striebel, AIAA J. 3(8), 1965), and it keeps the linear system well conditioned and small
however high the logging rate. Irregular sampling is handled exactly (each fix carries its own
interpolation weights) and knots run through short outages, where the prior bridges the gap.

Optionally a fifth state b per knot models the receiver's slowly wandering error as a first-order
Gauss-Markov process (correlation time ``wander_tau_s``, variance ``wander_var_m2``), linearly
interpolated between knots; the fix measures p + b + e. This stops the known failure where
likelihood (or GCV) reads time-correlated receiver error as genuine bends (REFERENCES.md).

Solution
--------
The joint prior of the knot states has a block-tridiagonal precision matrix; the fixes add a
block-tridiagonal term. The posterior mean solves one symmetric positive-definite banded system
(LAPACK pbtrf/pbtrs through ``scipy.linalg``), O(n) and vectorised. Its Cholesky factor U
(Lambda = U^T U) also gives exact posterior samples x_hat + U^-1 z (banded triangular solve; used
for the 1-sigma of curvature and torsion by Monte Carlo) and the exact log marginal likelihood
(log det Lambda = 2 sum log diag U), maximised over q, the measurement-variance scale and the wander
(``fit_noise``). Fixes are re-weighted after each solve (Huber weights on the standardised
residual, rejection beyond ``reject_sigma``) so multipath outliers lose their pull.

Units: metres and seconds at the interface (or metres of raw chainage as the "time" of a log
without timestamps). Internally time is measured in knot intervals.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from math import factorial

import numpy as np
from numpy.typing import NDArray
from scipy.linalg import cho_solve_banded, cholesky_banded
from scipy.linalg.lapack import dtbtrs
from scipy.optimize import minimize

FloatArray = NDArray[np.float64]

N_PATH = 4  # p, v, a, j
_K = np.array([[1.0 / (factorial(3 - i) * factorial(3 - j) * (7 - i - j)) for j in range(4)] for i in range(4)])
_KINV = np.linalg.inv(_K)
_LOGDET_K = float(np.linalg.slogdet(_K)[1])
_F1 = np.array([[1.0 / factorial(j - i) if j >= i else 0.0 for j in range(4)] for i in range(4)])  # F at h = 1


def _hermite_matrix() -> FloatArray:
    """G (8, 8): monomial coefficients c_0..c_7 of the degree-7 Hermite polynomial on [0, 1] from
    [p, p', p'', p'''](0) and (1): c = G @ [xL, xR]."""
    N = np.zeros((4, 4))
    M = np.zeros((4, 4))
    for k in range(4):
        for m in range(4):
            if m >= k:
                N[k, m] = factorial(m) / factorial(m - k)
        for m in range(4, 8):
            M[k, m - 4] = factorial(m) / factorial(m - k)
    L = np.diag([1.0 / factorial(m) for m in range(4)])
    Minv = np.linalg.inv(M)
    G = np.zeros((8, 8))
    G[:4, :4] = L
    G[4:, :4] = -Minv @ N @ L
    G[4:, 4:] = Minv
    return G


_G = _hermite_matrix()


def hermite_weights(sigma: FloatArray, deriv: int = 0) -> FloatArray:
    """Weights (n, 8) on [xL, xR] giving the ``deriv``-th derivative (per unit of sigma) of the
    degree-7 Hermite interpolant at local coordinates ``sigma`` in [0, 1]."""
    m = np.arange(8)
    coef = np.array([factorial(k) / factorial(k - deriv) if k >= deriv else 0.0 for k in m])
    powers = np.where(m >= deriv, m - deriv, 0)
    mono = coef[None, :] * sigma[:, None] ** powers[None, :]
    return mono @ _G


def interpolate_states(knot_states: FloatArray, knot_t0: float, h: float, t: FloatArray) -> FloatArray:
    """Path (p, v, a, j) at times ``t`` from knot states.

    Parameters
    ----------
    knot_states
        (..., K, A, 4) SI states (p m, v m/s, a m/s^2, j m/s^3) at knots ``knot_t0 + k h``; any
        leading batch axes (posterior samples) are carried through; A axes.
    t
        (n,) query times inside the knot span.

    Returns
    -------
    (..., n, A, 4) SI states at ``t``.
    """
    K = knot_states.shape[-3]
    u = (np.asarray(t, float) - knot_t0) / h
    k = np.clip(np.floor(u).astype(np.int64), 0, K - 2)
    sigma = u - k
    scale = h ** np.arange(4)  # SI derivative -> per-knot-interval derivative
    xl = knot_states[..., k, :, :] * scale
    xr = knot_states[..., k + 1, :, :] * scale
    out = np.empty(knot_states.shape[:-3] + (len(u),) + knot_states.shape[-2:])
    for d in range(4):
        W = hermite_weights(sigma, d)  # (n, 8)
        val = np.einsum("nk,...nak->...na", W[:, :4], xl) + np.einsum("nk,...nak->...na", W[:, 4:], xr)
        out[..., d] = val / h**d
    return out


# --------------------------------------------------------------------------------------------
# The banded system
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class NoiseModel:
    """Noise of one axis group, in SI units.

    Attributes
    ----------
    snap_psd
        Spectral density q of the white snap driving the path, m^2 s^-7 (per axis).
    var_scale
        Measurement variance of fix i is ``var_scale * base_var[i]`` (base_var = accuracy^2 when
        the log gives accuracy, else 1 m^2 so that var_scale is the white variance in m^2).
    wander_var_m2
        Stationary variance of the Gauss-Markov wander, m^2 (0 = not modelled).
    wander_tau_s
        Correlation time of the wander, s.
    """

    snap_psd: float
    var_scale: float
    wander_var_m2: float = 0.0
    wander_tau_s: float = 60.0

    @property
    def dim(self) -> int:
        return N_PATH + (1 if self.wander_var_m2 > 0 else 0)

    def smoothing_scale_s(self, white_var_m2: float, interval_s: float) -> float:
        """Equivalent-kernel scale (r dt / q)^(1/8) of the smoother, s: the time over which it
        averages fixes of variance ``white_var_m2`` logged every ``interval_s``."""
        return float((white_var_m2 * interval_s / self.snap_psd) ** 0.125)


def knot_spacing(model: NoiseModel, white_var_m2: float, interval_s: float, span_s: float) -> float:
    """Knot interval h: a quarter of the smoother's scale (fine enough that the Hermite pieces
    represent the posterior path; coarse enough that the banded system stays well conditioned),
    never finer than half the median fix interval nor coarser than span/4."""
    h = model.smoothing_scale_s(white_var_m2, interval_s) / 4.0
    return float(np.clip(h, 0.5 * interval_s, max(span_s / 4.0, 0.5 * interval_s)))


def clamp_snap(model: NoiseModel, white_var_m2: float, interval_s: float, span_s: float) -> NoiseModel:
    """Raise q so that the smoother's scale never exceeds the stretch length (a straight or
    evenly graded stretch drives the likelihood towards q = 0, which would leave the banded
    system singular; the clamp changes nothing measurable on such a stretch)."""
    q_min = white_var_m2 * interval_s / max(span_s, interval_s) ** 8
    return model if model.snap_psd >= q_min else replace(model, snap_psd=q_min)


@dataclass
class Design:
    """Where each fix falls on the knot grid."""

    t0: float
    h: float
    n_knots: int
    interval: NDArray[np.int64]  # (n,) knot interval index of each fix
    phi: FloatArray  # (n, 8) Hermite weights on [xL, xR] (states per knot interval)
    sigma: FloatArray  # (n,)


def make_design(t: FloatArray, h: float) -> Design:
    """Uniform knots from t[0] covering t[-1]; Hermite weights of every fix."""
    t0 = float(t[0])
    n_int = max(int(np.ceil((t[-1] - t0) / h - 1e-9)), 1)
    u = (t - t0) / h
    k = np.clip(np.floor(u).astype(np.int64), 0, n_int - 1)
    sigma = u - k
    return Design(t0, h, n_int + 1, k, hermite_weights(sigma, 0), sigma)


def _rows(design: Design, dim: int) -> FloatArray:
    """Measurement rows (n, 2 dim) on [x_k, x_k+1] (wander interpolated linearly)."""
    n = len(design.interval)
    rows = np.zeros((n, 2 * dim))
    rows[:, :4] = design.phi[:, :4]
    rows[:, dim : dim + 4] = design.phi[:, 4:]
    if dim > N_PATH:
        rows[:, 4] = 1.0 - design.sigma
        rows[:, dim + 4] = design.sigma
    return rows


def _prior_blocks(m: NoiseModel, h: float) -> tuple[FloatArray, FloatArray, float]:
    """F, Q^-1 (d, d) per knot interval (time unit = h, so the interval is 1) and log det Q^-1."""
    d = m.dim
    q = m.snap_psd * h**7
    F = np.zeros((d, d))
    F[:4, :4] = _F1
    Qinv = np.zeros((d, d))
    Qinv[:4, :4] = _KINV / q
    logdet = -4.0 * np.log(q) - _LOGDET_K
    if d > N_PATH:
        tau = m.wander_tau_s / h
        F[4, 4] = np.exp(-1.0 / tau)
        qw = m.wander_var_m2 * (-np.expm1(-2.0 / tau))
        Qinv[4, 4] = 1.0 / qw
        logdet -= np.log(qw)
    return F, Qinv, float(logdet)


def _prior0(m: NoiseModel, pos_sd: float) -> FloatArray:
    """Diagonal prior precision of the first knot state (vague path, stationary wander)."""
    prec = np.array([1.0 / pos_sd**2, 1e-6, 1e-6, 1e-6])
    if m.dim > N_PATH:
        prec = np.append(prec, 1.0 / m.wander_var_m2)
    return prec


@dataclass
class AxisSystem:
    """Banded posterior precision of one axis (upper storage), right-hand side and bookkeeping."""

    ab: FloatArray
    rhs: FloatArray
    dim: int
    F: FloatArray
    Qinv: FloatArray
    logdet_prior: float
    prior0: FloatArray
    w: FloatArray
    y: FloatArray
    rows: FloatArray
    design: Design


def build_system(design: Design, y: FloatArray, var: FloatArray, m: NoiseModel, pos_sd: float = 1e4) -> AxisSystem:
    """Posterior precision and right-hand side for one axis.

    ``y`` (n,) positions with the offset removed (NaN = no measurement); ``var`` (n,) measurement
    variances in m^2 (inf = no measurement).
    """
    d = m.dim
    K = design.n_knots
    u = 2 * d - 1
    ok = np.isfinite(y) & np.isfinite(var) & (var > 0)
    w = np.where(ok, 1.0 / np.where(ok, var, 1.0), 0.0)
    yy = np.where(ok, y, 0.0)
    rows = _rows(design, d)
    F, Qinv, logdet_q = _prior_blocks(m, design.h)
    A = F.T @ Qinv @ F
    B = -F.T @ Qinv
    diag = np.zeros((K, d, d))
    diag[:-1] += A
    diag[1:] += Qinv
    p0 = _prior0(m, pos_sd)
    diag[0] += np.diag(p0)
    off = np.broadcast_to(B, (K - 1, d, d)).copy()
    # data: sum over fixes of w rows^T rows, split into the (k,k), (k,k+1), (k+1,k+1) blocks
    kk = design.interval
    wr = rows * w[:, None]
    for a in range(2 * d):
        for b in range(a, 2 * d):
            s = np.bincount(kk, weights=wr[:, a] * rows[:, b], minlength=K - 1)
            if a < d and b < d:
                diag[:-1, a, b] += s
                if a != b:
                    diag[:-1, b, a] += s
            elif a >= d and b >= d:
                diag[1:, a - d, b - d] += s
                if a != b:
                    diag[1:, b - d, a - d] += s
            else:
                off[:, a, b - d] += s
    rhs = np.zeros((K, d))
    wy = w * yy
    for a in range(2 * d):
        s = np.bincount(kk, weights=wy * rows[:, a], minlength=K - 1)
        if a < d:
            rhs[:-1, a] += s
        else:
            rhs[1:, a - d] += s
    ab = np.zeros((u + 1, K * d))
    for i in range(d):
        for j in range(i, d):
            ab[u + i - j, j::d] = diag[:, i, j]
        for j in range(d):
            ab[u + i - j - d, d + j :: d] = off[:, i, j]
    logdet_prior = float(np.sum(np.log(p0)) + (K - 1) * logdet_q)
    return AxisSystem(ab, rhs.ravel(), d, F, Qinv, logdet_prior, p0, w, yy, rows, design)


def factor(system: AxisSystem) -> FloatArray:
    """Upper banded Cholesky factor U of the posterior precision (Lambda = U^T U)."""
    return cholesky_banded(system.ab, lower=False, check_finite=False)


def solve_mean(system: AxisSystem, U: FloatArray) -> FloatArray:
    """Posterior mean of the knot states, (K, d), in per-knot-interval units."""
    return cho_solve_banded((U, False), system.rhs, check_finite=False).reshape(-1, system.dim)


def fitted(system: AxisSystem, x: FloatArray) -> FloatArray:
    """Model position (path + wander) at every fix, (n,)."""
    k = system.design.interval
    both = np.concatenate((x[k], x[k + 1]), axis=1)
    return np.einsum("nk,nk->n", both, system.rows)


def log_likelihood(system: AxisSystem, U: FloatArray, x: FloatArray) -> float:
    """Log marginal likelihood of the fixes (up to a constant shared by all noise models).

    The quadratic form y^T R^-1 y - b^T Lambda^-1 b is evaluated in its numerically stable
    minimum form: weighted residuals plus the prior penalty of the posterior mean.
    """
    res = system.y - fitted(system, x)
    e = x[1:] - x[:-1] @ system.F.T
    quad = (
        float(np.sum(system.w * res**2))
        + float(np.einsum("ki,ij,kj->", e, system.Qinv, e))
        + float(np.sum(system.prior0 * x[0] ** 2))
    )
    ok = system.w > 0
    logdet_post = 2.0 * float(np.sum(np.log(U[-1])))
    return -0.5 * (
        quad + logdet_post - system.logdet_prior - float(np.sum(np.log(system.w[ok]))) + ok.sum() * np.log(2 * np.pi)
    )


def draw_samples(U: FloatArray, dim: int, n_samples: int, rng: np.random.Generator) -> FloatArray:
    """Zero-mean posterior deviations U^-1 z of the knot states, (n_samples, K, dim)."""
    z = rng.standard_normal((U.shape[1], n_samples))
    x, info = dtbtrs(U, z, uplo="U", trans="N", diag="N", overwrite_b=1)
    if info != 0:
        raise np.linalg.LinAlgError("banded triangular solve failed")
    return x.T.reshape(n_samples, -1, dim)


# --------------------------------------------------------------------------------------------
# Maximum-likelihood noise
# --------------------------------------------------------------------------------------------


def robust_white_var(y: FloatArray) -> float:
    """Rough white-noise variance from third differences (Var(d^3 e) = 20 var for white e), by
    the median absolute deviation (robust to outliers). Only a starting value for ML."""
    d3 = np.diff(y[np.isfinite(y)], 3)
    if len(d3) < 3:
        return 1.0
    mad = np.median(np.abs(d3 - np.median(d3))) / 0.6745
    return max(float(mad**2 / 20.0), 1e-10)


@dataclass(frozen=True)
class FitResult:
    model: NoiseModel
    log_likelihood: float
    evaluations: int


def fit_noise(
    pieces: list[tuple[FloatArray, FloatArray, FloatArray]],
    estimate_scale: bool,
    scale_floor: float,
    wander_tau_s: float | None,
    start_var: float,
) -> FitResult:
    """Choose q (and the variance scale, and the wander size) by maximum marginal likelihood.

    Parameters
    ----------
    pieces
        Independent stretches of data, each (t (n,), Y (n, A), base_var (n,)); the A axes share one
        noise model (east and north) and their log-likelihoods add. Times strictly increasing.
    estimate_scale
        Estimate the variance scale s >= ``scale_floor`` (else s = ``scale_floor``).
    scale_floor
        Lower bound of the variance scale: with per-fix accuracy, 1 means "never trust a fix more
        than its stated accuracy", a floor that also guards against reading wander as bends.
    wander_tau_s
        Model a Gauss-Markov wander with this correlation time (None: white noise only).
    start_var
        Rough white variance (m^2) to start from.
    """
    evals = 0
    interval = float(np.median(np.concatenate([np.diff(t) for t, _, _ in pieces])))
    med_base = float(np.median(np.concatenate([b for _, _, b in pieces])))
    prepared = []
    for t, Y, b in pieces:
        prepared.append((t, Y - np.nanmean(Y, axis=0), b, float(t[-1] - t[0])))

    def unpack(theta):
        i = 1
        if estimate_scale:
            s = scale_floor + float(np.exp(theta[i]))
            i += 1
        else:
            s = scale_floor
        wv = float(np.exp(theta[i])) if wander_tau_s else 0.0
        return NoiseModel(float(np.exp(theta[0])), s, wv, wander_tau_s or 60.0)

    def negll(theta):
        nonlocal evals
        evals += 1
        if np.any(np.abs(theta) > 90):
            return 1e300
        m0 = unpack(theta)
        total = 0.0
        for t, Y, b, span in prepared:
            m = clamp_snap(m0, m0.var_scale * med_base, interval, span)
            h = knot_spacing(m, m.var_scale * med_base, interval, span)
            design = make_design(t, h)
            for k in range(Y.shape[1]):
                sysm = build_system(design, Y[:, k], b * m.var_scale, m)
                try:
                    U = factor(sysm)
                except np.linalg.LinAlgError:
                    return 1e300
                total += log_likelihood(sysm, U, solve_mean(sysm, U))
        return -total if np.isfinite(total) else 1e300

    base = []
    if estimate_scale:
        base.append(np.log(max(start_var - scale_floor * med_base, 1e-3 * start_var) / med_base))
    if wander_tau_s:
        base.append(np.log(max(start_var, 1e-8)))
    # Coarse grid over q first (the likelihood is flat far from its maximum), then refine.
    grid = np.arange(-16.0, 10.01, 1.0) * np.log(10.0)
    scores = [negll(np.array([g] + base)) for g in grid]
    theta0 = np.array([grid[int(np.argmin(scores))]] + base)
    if len(theta0) == 1:
        from scipy.optimize import minimize_scalar

        r = minimize_scalar(lambda x: negll(np.array([x])), bounds=(theta0[0] - 2.5, theta0[0] + 2.5),
                            method="bounded", options={"xatol": 1e-2})
        best, ll = np.array([r.x]), -float(r.fun)
    else:
        r = minimize(negll, theta0, method="Nelder-Mead", options={"xatol": 1e-2, "fatol": 1e-2, "maxfev": 300})
        best, ll = r.x, -float(r.fun)
    return FitResult(unpack(best), ll, evals)


# --------------------------------------------------------------------------------------------
# Smoothing one stretch (all three axes), with robust re-weighting
# --------------------------------------------------------------------------------------------


@dataclass
class AxisGroup:
    """Posterior of some axes (east+north, or up) on their own knot grid.

    Knots sit at ``t0 + k h``; ``states`` (K, A, 4) is the posterior mean of (p, v, a, j) per axis
    in SI units; ``factors`` per axis (U, dim) for posterior samples.
    """

    axes: tuple[int, ...]
    t0: float
    h: float
    states: FloatArray
    factors: list

    def samples(self, n_samples: int, rng: np.random.Generator) -> FloatArray:
        """Posterior samples of the knot states, (n_samples, K, A, 4), SI units."""
        out = np.empty((n_samples,) + self.states.shape)
        conv = self.h ** -np.arange(N_PATH)
        for a, (U, dim) in enumerate(self.factors):
            out[:, :, a, :] = draw_samples(U, dim, n_samples, rng)[:, :, :N_PATH] * conv
        return out + self.states[None]


@dataclass
class Smoothed:
    """Posterior of one stretch of fixes: east/north on one knot grid, up on another.

    ``groups`` holds the smoothed axis groups (up is absent for a log without heights: it then
    reads as 0 with zero derivatives). ``weight_h``/``weight_v`` are the final robust weights of
    the fixes (0 = rejected).
    """

    groups: list[AxisGroup]
    weight_h: FloatArray
    weight_v: FloatArray

    def at(self, t: FloatArray) -> FloatArray:
        """Posterior mean (p, v, a, j) per axis at times ``t``, (n, 3, 4), SI units."""
        out = np.zeros((len(t), 3, N_PATH))
        for g in self.groups:
            out[:, list(g.axes), :] = interpolate_states(g.states, g.t0, g.h, t)
        return out

    def draw(self, n_samples: int, rng: np.random.Generator) -> list[FloatArray]:
        """Posterior samples of every group's knot states (see ``samples_at``)."""
        return [g.samples(n_samples, rng) for g in self.groups]

    def samples_at(self, drawn: list[FloatArray], t: FloatArray) -> FloatArray:
        """Sampled (p, v, a, j) at times ``t`` from ``draw`` output, (n_samples, n, 3, 4).

        Between knots the samples are Hermite-interpolated (the small bridge variance between
        knots spaced a quarter of the smoothing scale apart is neglected).
        """
        ns = drawn[0].shape[0] if drawn else 0
        out = np.zeros((ns, len(t), 3, N_PATH))
        for g, d in zip(self.groups, drawn):
            out[:, :, list(g.axes), :] = interpolate_states(d, g.t0, g.h, t)
        return out


def _smooth_group(
    t: FloatArray, Y: FloatArray, var: FloatArray, w: FloatArray, m: NoiseModel, design: Design
) -> tuple[list[FloatArray], list, FloatArray]:
    means, factors, fits = [], [], []
    v = np.where(w > 0, var / np.maximum(w, 1e-12), np.inf)
    for a in range(Y.shape[1]):
        sysm = build_system(design, Y[:, a], v, m)
        U = factor(sysm)
        x = solve_mean(sysm, U)
        means.append(x)
        factors.append((U, m.dim))
        fits.append(fitted(sysm, x))
    return means, factors, np.column_stack(fits)


def smooth_stretch(
    t: FloatArray,
    enu_m: FloatArray,
    base_var_h: FloatArray,
    base_var_v: FloatArray,
    model_h: NoiseModel,
    model_v: NoiseModel | None,
    robust_iterations: int = 3,
    huber_c: float = 2.5,
    reject_sigma: float = 6.0,
) -> Smoothed:
    """Smooth one stretch of fixes (strictly increasing ``t``) on all three axes.

    ``model_v`` None means no heights. Fixes are re-weighted ``robust_iterations`` times with the
    Huber weight min(1, c/d) of the standardised residual d (2D for east/north, 1D for up) and
    weight 0 beyond ``reject_sigma``; a fix rejected horizontally is rejected in height too
    (multipath that throws a fix sideways spoils its height as well).
    """
    n = len(t)
    interval = float(np.median(np.diff(t))) if n > 1 else 1.0
    span = float(t[-1] - t[0])
    offset = np.array([np.nanmean(enu_m[:, k]) if np.isfinite(enu_m[:, k]).any() else 0.0 for k in range(3)])
    Y = enu_m - offset
    specs = [((0, 1), model_h, base_var_h)]
    if model_v is not None:
        specs.append(((2,), model_v, base_var_v))
    prepared = []
    for axes, m, bvar in specs:
        var = bvar * m.var_scale
        m = clamp_snap(m, float(np.median(var)), interval, span)
        prepared.append((axes, m, var, make_design(t, knot_spacing(m, float(np.median(var)), interval, span))))
    w_h = np.ones(n)
    w_v = np.ones(n) if model_v is not None else np.zeros(n)
    for it in range(robust_iterations + 1):
        results = []
        for axes, m, var, design in prepared:
            w = w_h if axes[0] < 2 else w_v
            results.append(_smooth_group(t, Y[:, list(axes)], var, w, m, design))
        if it == robust_iterations:
            break
        res_h = Y[:, :2] - results[0][2]
        dh = np.sqrt(np.sum(res_h**2, axis=1) / (2.0 * prepared[0][2]))
        w_h = _huber(np.where(np.isfinite(dh), dh, 0.0), huber_c, reject_sigma)
        if model_v is not None:
            dv = np.abs(Y[:, 2] - results[1][2][:, 0]) / np.sqrt(prepared[1][2])
            w_v = _huber(np.where(np.isfinite(dv), dv, 0.0), huber_c, reject_sigma)
            w_v = np.where(w_h == 0, 0.0, w_v)
    groups = []
    for (axes, m, var, design), (means, factors, _) in zip(prepared, results):
        conv = design.h ** -np.arange(N_PATH)
        states = np.stack([mm[:, :N_PATH] * conv for mm in means], axis=1)
        states[:, :, 0] += offset[list(axes)]
        groups.append(AxisGroup(axes, design.t0, design.h, states, factors))
    return Smoothed(groups, w_h, w_v)


def _huber(d: FloatArray, c: float, reject: float) -> FloatArray:
    w = np.minimum(1.0, c / np.maximum(d, 1e-12))
    return np.where(d > reject, 0.0, w)
