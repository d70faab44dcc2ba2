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
(Lambda = U^T U) also gives exact posterior samples x_hat + U^-1 z (banded triangular solve),
repeated-noise estimates (below) and the exact log marginal likelihood
(log det Lambda = 2 sum log diag U), maximised over q, the white variance and the wander variance
(``fit_noise``); a stated per-fix accuracy bounds the total of the two.

Turn-aware plan prior
---------------------
The constant-jerk prior charges steady motion on a circle for its snap (v^4 kappa^3), so on a
long arc it keeps the smoothing window short and still flattens the arc a little. After the
robust passes the plan smoother may be solved once more with the prior D^2 (D^2 + omega^2) per
axis at each knot interval's turn rate omega, taken from the constant-jerk estimate
(``plan_turn_rate``, ``apply_turn_prior``): a steady arc of that turn rate costs nothing, so the
likelihood can choose a far smaller snap density, a long window along the arc. Whether to, and
with which snap density, is chosen by marginal likelihood on the fit pieces
(``choose_turn_prior``, kept only with a gain of ``TURN_MIN_GAIN``). Measured (accuracy
benchmark, seeds 2024-2028): helix RTK kappa 0.19 % -> 0.04 %, tau 1.84 % -> 0.11 %; phone helix
kappa 4.5 % -> 3.1 %, tau 13 % -> 9.6 %; phone switchbacks radius 39 % -> 35 % (by time 23 % ->
26 %), chainage 5.4 % -> 2.3 %; the benchmark's road of 400 m arcs keeps the constant-jerk
prior (gain about 2), a drive with arcs of 40-600 m takes it (gain 21). The
estimate is no longer linear in the fixes (the turn rate comes from the fixes), so its 1-sigma
draws follow the whole procedure (``turn_refit_draws``): each draw's receiver error through
the first pass gives its turn rates, and their effect on the turn-aware estimate enters as a
change of the prior's precision, to first order in one solve where that is accurate, else
solved for each draw by conjugate gradients (``_exact_in_turn_rates``; no factorisation per
draw). The linear draws of the turn-aware system alone covered the truth of a helix only 34 %
of the time, those of the first pass 100 %; the exact repeated procedure (a factorisation per
draw, three times slower at 1M fixes) 62-75 %, the first-order one 70-86 % (curvature) and
70-71 % (torsion), solved per draw 68-75 % and 64-70 % (``tests/test_geometry.py`` coverage
set-up, seed sets 100, 200, 300). With receiver velocity the draws add white velocity error of
the stated 1-sigma. On a 1M-fix drive where the likelihood chooses it, the turn-aware prior
costs about 2.5 s more than the constant-jerk one (benchmarks/bench_scale.py).

Wander without stated accuracy
------------------------------
The wander is identified only by its slow error on steady stretches: at short lags its
increments are a random walk of diffusion 2 var / tau, which bends as cheaply as a real turn, and
at long lags it cannot be told from the path at all. On a short log (a few tau) with tight turns
the free likelihood therefore lets it soak up the turns (measured on phone switchbacks, 216 s at
1 Hz: 24-37 m^2 fitted against a true 9 m^2; on a 2000 s straight with the same error it finds
8.5-12 m^2). When the log states an accuracy, that bound (``cap``) settles it. Without one,
``wander_ratio_max`` bounds the wander variance by a multiple of the white variance -- a prior
choice, since nothing in such a log can identify it; the white variance itself is well
identified by the high-frequency residual (measured within ~15 % of the truth on the same
logs). The default multiple 4 (wander 1-sigma at most twice the white 1-sigma) is the largest
split of the receiver grades in REFERENCES.md's accuracy lines as modelled in
``survey.synthetic.GNSS_GRADES`` (phone 1.5 m white + 3 m wander; dual-frequency ratio 2.8,
RTK 1); it is a judgement, not a published constant. A heavy-tailed (Student-t) snap prior
fitted by re-weighting from the posterior mean was tried and did not help: the posterior mean's
snap increments are shrunk alike on turns and straights, so the weights do not find the turns.

Receiver velocity
-----------------
A receiver's Doppler velocity (speed and course over ground) at a fix measures the path's
velocity there: the derivative of the fix's Hermite row (``_vtables``; the wander, a slow position
error, is not in it), added to the same banded system with its own variance (``build_system``
``vel``), re-weighted like the positions and drawn like them in ``noise_draws``.

Heights on the local grade plane
--------------------------------
Heights are smoothed more strongly than plan position (their own, noisier, fit). On a path in a
tilted plane z = c + g . en that bends the same bend by two different amounts, S_v z = g . S_v en
against S_h en in plan, and the path leaves its plane: false torsion (measured p95 |tau| 6-11 %
of kappa on a 6-degree tilted loop, dual-frequency). Smoothing both alike instead lets the noisier
heights through (120-200 %). So the vertical smoother also carries the east/north fixes, and the
height is moved along the local grade plane from where S_v puts the mover to the horizontal
estimate: z = S_v z + g . (S_h en - S_v en) (``grade_plane_correction``). For a plane path this is
c + g . S_h en + S_v e_z exactly: in-plane bends get the horizontal strength, the out-of-plane
noise the vertical one. The grade g comes from a local fit over a few vertical smoothing scales
(``local_grade``), so real grade changes are followed; where the path is not locally planar the
fit explains little of the vertical motion and the correction fades out.

Gross multipath jumps are screened before the fit (``screen_outliers``: otherwise the likelihood
explains them with a path that swerves through them), and fixes are re-weighted after
each solve (Huber weights on the standardised residual, rejection beyond ``reject_sigma``).
The 1-sigma of derived quantities comes from ``noise_draws``: fresh receiver-error realisations
passed through the same linear smoother (its sampling error for a fixed path), which covers the
truth at the stated rate on repeated logs; the Bayesian posterior spread (``draw_samples``)
over-covers torsion (measured 96 % for a 1-sigma band).

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

from .jump_ends import end_place, lagrange_weights
from .jump_shape import MAX_ACCEL_MPS2, jumps_among

FloatArray = NDArray[np.float64]

N_PATH = 4  # p, v, a, j
KNOTS_PER_SCALE = 2.0  # knot intervals per smoothing scale (see knot_spacing)
COARSEST_KNOTS_PER_SCALE = 1.0  # ... on dense logs where the wander allows (knot_spacing)
COARSE_FIXES_PER_SCALE = 8.0  # a dense log: at least this many fixes per smoothing scale
WANDER_KNOTS_PER_TAU = 40.0  # knot intervals per wander correlation time, at least (knot_spacing)
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
#: _DERIV[d] (8, 8): monomial coefficients of the d-th derivative from those of the polynomial.
_DERIV = [np.linalg.matrix_power(np.diag(np.arange(1.0, 8.0), 1), d) for d in range(4)]


def _powers(sigma: FloatArray) -> FloatArray:
    """(n, 8) sigma^0 .. sigma^7 by repeated multiplication (no float power)."""
    out = np.empty((len(sigma), 8))
    out[:, 0] = 1.0
    for m in range(1, 8):
        np.multiply(out[:, m - 1], sigma, out=out[:, m])
    return out


def hermite_weights(sigma: FloatArray, deriv: int = 0) -> FloatArray:
    """Weights (n, 8) on [xL, xR] giving the ``deriv``-th derivative (per unit of sigma) of the
    degree-7 Hermite interpolant at local coordinates ``sigma`` in [0, 1]."""
    return _powers(np.asarray(sigma, float)) @ (_DERIV[deriv] @ _G)


def interpolate_states(knot_states: FloatArray, knot_t0: float, h: float, t: FloatArray,
                       chunk: int = 32_768) -> FloatArray:
    """Path (p, v, a, j) at times ``t`` from knot states.

    Parameters
    ----------
    knot_states
        (..., K, A, 4) SI states (p m, v m/s, a m/s^2, j m/s^3) at knots ``knot_t0 + k h``; any
        leading batch axes (repeated-noise draws) are carried through; A axes.
    t
        (n,) query times inside the knot span (clamped to it).

    Returns
    -------
    (..., n, A, 4) SI states at ``t``. Every knot interval's degree-7 polynomial is turned into
    monomial coefficients once; each query is then one gather and Horner's scheme, in chunks of
    about ``chunk`` values (queries x batch x axes) so temporaries stay small
    (``evaluate_intervals``). When ``t`` are the knots themselves, a read-only view of
    ``knot_states`` (no copy of a long array).
    """
    K = knot_states.shape[-3]
    t = np.asarray(t, float)
    if len(t) == K and np.array_equal(t, knot_t0 + h * np.arange(K)):
        view = knot_states.view()  # the knots themselves: no interpolation
        view.flags.writeable = False
        return view
    return evaluate_intervals(interval_coefficients(knot_states, h), knot_t0, h, t, chunk)


def interval_coefficients(knot_states: FloatArray, h: float) -> FloatArray:
    """Monomial coefficients in sigma of every knot interval's degree-7 path, (8, K-1, ..., A),
    from (..., K, A, 4) SI knot states (coefficient first: each is gathered contiguously)."""
    xs = knot_states * h ** np.arange(4)  # SI derivative -> per-knot-interval derivative
    both = np.concatenate((xs[..., :-1, :, :], xs[..., 1:, :, :]), axis=-1)
    return np.ascontiguousarray(np.moveaxis(both @ _G.T, (-1, -3), (0, 1)))


def evaluate_intervals(coef: FloatArray, knot_t0: float, h: float, t: FloatArray, chunk: int = 32_768) -> FloatArray:
    """(..., n, A, 4) SI (p, v, a, j) at times ``t`` from ``interval_coefficients`` output.

    Per chunk of queries: one gather of the eight coefficients, then Horner's scheme carried
    for the value and its first three derivatives together (each step multiplies the running
    Taylor coefficients by sigma and adds the next lower one; p^(d) = d! x the d-th, per knot
    interval^d). The chunk holds ``chunk`` query-axis values so every temporary stays in cache:
    about five times faster on a million queries than summing weighted gathers over whole
    arrays (benchmarks/bench_profile.py). The result is a view of a derivative-major array."""
    K = coef.shape[1] + 1
    inner = coef.shape[2:]  # (..., A)
    t = np.asarray(t, float)
    out = np.empty((4, len(t)) + inner)  # derivative first: every write below is contiguous
    chunk = max(256, chunk // max(int(np.prod(inner)), 1))
    scale = np.array([1.0, 1.0 / h, 2.0 / h**2, 6.0 / h**3])  # d! / h^d: Taylor coefficient -> SI
    ones = (1,) * len(inner)
    for a in range(0, len(t), chunk):
        u = (t[a : a + chunk] - knot_t0) / h
        k = np.clip(np.floor(u).astype(np.int64), 0, K - 2)
        cc = coef[:, k]  # (8, m, ..., A)
        p0 = cc[7].copy()
        # sigma spread to the full (m, ..., A) shape: same-shape operands run as one flat loop
        s = np.broadcast_to(np.clip(u - k, 0.0, 1.0).reshape((-1,) + ones), p0.shape).copy()
        p1, p2, p3 = np.zeros_like(p0), np.zeros_like(p0), np.zeros_like(p0)
        for c in range(6, -1, -1):  # c = 6: only p0 and p1 are non-zero yet, and so on
            if c <= 4:
                p3 *= s
                p3 += p2
            if c <= 5:
                p2 *= s
                p2 += p1
            p1 *= s
            p1 += p0
            p0 *= s
            p0 += cc[c]
        for d, p in enumerate((p0, p1, p2, p3)):
            np.multiply(p, scale[d], out=out[d, a : a + chunk])
    return np.moveaxis(np.moveaxis(out, 0, -1), 0, -3)  # a (..., n, A, 4) view


# --------------------------------------------------------------------------------------------
# Legendre bookkeeping: every fix row is a polynomial of degree <= 7 in its interval coordinate
# --------------------------------------------------------------------------------------------

N_LEG = 15  # products of two degree-7 rows have degree 14


def _legendre_columns(x: FloatArray, count: int) -> FloatArray:
    """(count, len(x)): P_0(x) .. P_{count-1}(x) by Bonnet's recursion (stable on [-1, 1]);
    row j is P_j."""
    out = np.empty((count, len(x)))
    out[0] = 1.0
    if count > 1:
        out[1] = x
    for j in range(1, count - 1):
        p = out[j + 1]
        np.multiply(2 * j + 1, x, out=p)  # ((2j+1) x p_j - j p_{j-1}) / (j+1), same rounding order
        p *= out[j]
        p -= j * out[j - 1]
        p /= j + 1
    return out


def _row_polys(dim: int) -> list[np.polynomial.Polynomial]:
    """The 2 dim measurement-row functions of sigma on [x_k, x_k+1]: Hermite weights of the path
    states, and (with a wander state) the linear interpolation weights 1 - sigma, sigma."""
    P = np.polynomial.Polynomial
    rows = [P(_G[:, b]) for b in range(8)]
    left, right = rows[:4], rows[4:]
    if dim > N_PATH:
        left.append(P([1.0, -1.0]))
        right.append(P([0.0, 1.0]))
    return left + right


def _leg(poly, size: int) -> FloatArray:
    """Coefficients in P_j(2 sigma - 1), j < size."""
    c = np.polynomial.Legendre.cast(poly, domain=[0.0, 1.0]).coef
    out = np.zeros(size)
    out[: len(c)] = c
    return out


_TABLES: dict[int, tuple[FloatArray, FloatArray, FloatArray, FloatArray]] = {}


def _tables(dim: int):
    """(B (2d, 8), C (15, 2d*2d), W0 (15, 2d), W1 (15, 2d)) Legendre tables: row a is
    sum_j B[a, j] P_j; row a times row b is sum_j C[j, ab] P_j; row a times (1 - sigma) and
    times sigma are sum_j W0[j, a] P_j and W1[j, a] P_j."""
    if dim not in _TABLES:
        P = np.polynomial.Polynomial
        rows = _row_polys(dim)
        B = np.array([_leg(r, 8) for r in rows])
        C = np.array([[_leg(ra * rb, N_LEG) for rb in rows] for ra in rows])  # (2d, 2d, 15)
        W0 = np.array([_leg(r * P([1.0, -1.0]), N_LEG) for r in rows]).T
        W1 = np.array([_leg(r * P([0.0, 1.0]), N_LEG) for r in rows]).T
        _TABLES[dim] = (B, C.reshape(-1, N_LEG).T.copy(), W0, W1)
    return _TABLES[dim]


_VTABLES: dict[int, tuple[FloatArray, FloatArray]] = {}


def _vtables(dim: int):
    """(Bv (2d, 8), Cv (15, 2d*2d)) Legendre tables of the velocity rows: the sigma-derivative of
    every measurement row of the path states (a receiver's Doppler velocity measures the path's
    velocity; the wander, a slow position error, does not enter it: its rows are 0)."""
    if dim not in _VTABLES:
        P = np.polynomial.Polynomial
        rows = _row_polys(dim)
        drows = [r.deriv() if (i % dim) < N_PATH else P([0.0]) for i, r in enumerate(rows)]
        Bv = np.array([_leg(r, 8) for r in drows])
        Cv = np.array([[_leg(ra * rb, N_LEG) for rb in drows] for ra in drows])
        _VTABLES[dim] = (Bv, Cv.reshape(-1, N_LEG).T.copy())
    return _VTABLES[dim]


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
    """Knot interval h: the smoother's scale / ``KNOTS_PER_SCALE`` (fine enough that the Hermite
    pieces represent the posterior path -- its frequency response falls off like 1/(1 + (w s)^8)
    beyond 1/s, so a degree-7 piece over half a scale is ample; an early measurement with
    benchmarks/bench_accuracy.py --quick found kappa and radius errors at h = s/4, s/2 and s
    within 0.1 percentage point, but see below for h = s on sparse logs -- and coarse enough
    that the banded system stays well conditioned and small), never finer than half the median
    fix interval nor coarser than span/4.

    On a dense log (at least ``COARSE_FIXES_PER_SCALE`` fixes per scale s) the knots may be up
    to s / ``COARSEST_KNOTS_PER_SCALE`` apart, as far as the wander allows: it is linear
    between knots, and a Gauss-Markov wander of variance g^2 and correlation time tau has
    increments of variance 2 g^2 (1 - exp(-d/tau)) ~ 2 g^2 d / tau over d << tau (from its
    covariance g^2 exp(-|d|/tau)), so between knots h apart it leaves the chord by a Brownian
    bridge of variance up to g^2 h / (2 tau) at mid-interval, which the model does not hold;
    h <= tau / ``WANDER_KNOTS_PER_TAU`` keeps that at 1.25 % of g^2 or less. Measured with
    benchmarks/bench_accuracy.py (10 seeds) against h = s/2 everywhere, the two cases that take
    the coarser knots: 10 Hz dual-frequency road radius 1.52 % -> 1.49 % (corrupted 1.74 % ->
    1.80 %); phone helix (its plan) kappa 3.06 % -> 2.98 %, torsion 11.1 % -> 11.2 %
    (corrupted 8.0 % -> 8.8 %); every other case unchanged. h = s on every log instead cost the
    1 Hz phone road 0.45 point of radius (7.55 % -> 8.00 %) and the phone helix 2 points of
    torsion (11.1 % -> 13.2 %, its heights' scale s of 5-8 s against tau / 40 = 1.5 s). Finer
    knots than s/2 are no remedy: the banded system's conditioning grows like (s/h)^7 (at s/6
    on phone heights its condition number reached 6e14 and the sampling-error draws blew up).
    On the 1M-fix scale drive (10 Hz, dual-frequency; benchmarks/bench_scale.py) the knots are
    twice as far apart and the whole profile takes 0.69x the time (interleaved runs of
    benchmarks/bench_profile.py --split-log)."""
    s = model.smoothing_scale_s(white_var_m2, interval_s)
    h = s / KNOTS_PER_SCALE
    if s >= COARSE_FIXES_PER_SCALE * interval_s:
        wander_limit = model.wander_tau_s / WANDER_KNOTS_PER_TAU if model.wander_var_m2 > 0 else np.inf
        h = max(h, min(s / COARSEST_KNOTS_PER_SCALE, wander_limit))
    return float(np.clip(h, 0.5 * interval_s, max(span_s / 4.0, 0.5 * interval_s)))


def clamp_snap(model: NoiseModel, white_var_m2: float, interval_s: float, span_s: float) -> NoiseModel:
    """Raise q so that the smoother's scale never exceeds the stretch length (a straight or
    evenly graded stretch drives the likelihood towards q = 0, which would leave the banded
    system singular; the clamp changes nothing measurable on such a stretch)."""
    q_min = white_var_m2 * interval_s / max(span_s, interval_s) ** 8
    return model if model.snap_psd >= q_min else replace(model, snap_psd=q_min)


@dataclass
class Design:
    """Where each fix falls on the knot grid: interval index and Legendre coordinate
    x = 2 sigma - 1 in [-1, 1] (sigma = position inside the interval)."""

    t0: float
    h: float
    n_knots: int
    interval: NDArray[np.int64]  # (n,) knot interval index of each fix (non-decreasing)
    x: FloatArray  # (n,)

    @property
    def sigma(self) -> FloatArray:
        return 0.5 * (self.x + 1.0)


def make_design(t: FloatArray, h: float) -> Design:
    """Uniform knots from t[0] covering t[-1]; interval and local coordinate of every fix."""
    t0 = float(t[0])
    n_int = max(int(np.ceil((t[-1] - t0) / h - 1e-9)), 1)
    u = (t - t0) / h
    k = np.clip(np.floor(u).astype(np.int64), 0, n_int - 1)
    return Design(t0, h, n_int + 1, k, np.clip(2.0 * (u - k) - 1.0, -1.0, 1.0))


#: Fixes per block in the per-interval sums and fitted values: the block's temporaries (up to 15
#: Legendre rows) stay in cache and are reused, so no fresh pages are touched; measured on 1M
#: fixes, first call in a process: 15 moments 177 -> 47 ms, 4-column sums 218 -> 53 ms at 8192
#: instead of 65536 (benchmarks/bench_profile.py).
_SUM_BLOCK = 8192


def _interval_blocks(k: NDArray[np.int64]):
    """Yield (a, b, starts) for blocks of about ``_SUM_BLOCK`` fixes cut at interval starts:
    fixes a..b-1 of non-decreasing interval indices ``k``, ``starts`` the block's run starts
    relative to a (the first fix of each of its non-empty intervals)."""
    n = len(k)
    if n == 0:
        return
    starts = np.flatnonzero(np.r_[True, k[1:] != k[:-1]])
    cuts = np.unique(np.r_[np.searchsorted(starts, np.arange(0, n, _SUM_BLOCK)), len(starts)])
    for i0, i1 in zip(cuts[:-1], cuts[1:]):
        a = starts[i0]
        yield a, (starts[i1] if i1 < len(starts) else n), starts[i0:i1] - a


def _interval_sums(design: Design, weights, count: int, columns: int | None = None) -> FloatArray:
    """(K-1, count): sum over the fixes of each knot interval of weights * P_j(x), j < count.
    ``weights`` (n,) or (n, c) -> (K-1, count) or (K-1, c, count). ``weights`` may instead be a
    function (a, b) -> weights of fixes a..b-1, (b - a, ``columns``): it is called once per block,
    in order of the fixes, so a long weight array is never held whole (``noise_draws``).

    The fixes are sorted by interval and summed in blocks of about ``_SUM_BLOCK`` fixes (cut at
    interval starts) so the Legendre values stay in cache. One weight column: one ``bincount``
    per P_j. Several: one sparse product per block for all ``count`` x c sums -- row (j,
    interval) of a CSR matrix holds P_j(x_i) of the interval's fixes, a contiguous run
    (scipy.sparse). Intervals without fixes stay 0."""
    from scipy.sparse import csr_matrix

    k, K1 = design.interval, design.n_knots - 1
    block = weights if callable(weights) else (lambda a, b: weights[a:b])
    if not callable(weights) and weights.ndim == 1:
        out = np.zeros((K1, count))
        for a, b, _ in _interval_blocks(k):
            k0, span = k[a], k[b - 1] - k[a] + 1
            kk, wa = k[a:b] - k0, weights[a:b]
            for j, pj in enumerate(_legendre_columns(design.x[a:b], count)):
                out[k0 : k0 + span, j] = np.bincount(kk, weights=wa * pj, minlength=span)
        return out
    c = columns if callable(weights) else weights.shape[1]
    out = np.zeros((K1, c, count))
    for a, b, runs in _interval_blocks(k):
        m, r = b - a, len(runs)
        indptr = np.r_[(np.arange(count)[:, None] * m + runs).ravel(), count * m]
        P = csr_matrix((_legendre_columns(design.x[a:b], count).ravel(), np.tile(np.arange(m), count), indptr),
                       shape=(count * r, m))
        out[k[a + runs]] = np.moveaxis((P @ block(a, b)).reshape(count, r, c), 0, 2)
    return out


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


#: Resolution of the turn-rate grid on which the turn-aware prior blocks are computed, rad per
#: knot interval (blocks are computed once per distinct value on this grid and cached).
TURN_STEP = 1e-3
_TURN_CACHE: dict[int, tuple[FloatArray, FloatArray, float]] = {}
#: Below this speed the plan turn rate is not trusted (``plan_turn_rate``), m/s.
TURN_SLOW_MPS = 0.5
#: Snap-density factors tried under the turn-aware prior (``choose_turn_prior``): 1 to 4^-8.
TURN_Q_FACTORS = tuple(float(f) for f in 4.0 ** -np.arange(0, 9))
#: Log-likelihood gain the turn-aware prior must show over the constant-jerk one to be used:
#: 2 ln B >= 6, "strong" evidence on the scale of Kass & Raftery (JASA 90(430), 1995; from
#: memory). A smaller gain (a road drive of gentle arcs: +2.4) changes nothing measurable and
#: would cost a second solve and a factorisation per sampling-error draw.
TURN_MIN_GAIN = 3.0


def _turn_unit_blocks(key: int) -> tuple[FloatArray, FloatArray, float]:
    """F, Q^-1 (4, 4) and log det Q^-1 of the turn-aware path prior at unit snap density over one
    knot interval, for the turn rate omega = ``key`` x ``TURN_STEP`` rad per interval.

    Each plan axis obeys p'''' + omega^2 p'' = w (white w): the operator D^2 (D^2 + omega^2)
    annihilates p = c0 + c1 t + c2 cos(omega t) + c3 sin(omega t), so steady motion on a circle
    of that turn rate (and on a steady grade) costs the prior nothing, where the constant-jerk
    prior (omega = 0) charges circular motion for its snap v^4 kappa^3 and so flattens arcs.
    This is an L-spline prior (Kimeldorf & Wahba 1971; Wahba 1990, Spline Models for
    Observational Data, sec. 1.2; both from memory) with a turn rate that varies along the
    path. F = exp(A) and Q = int_0^1 exp(A s) e4 e4^T exp(A s)^T ds by Van Loan's block
    exponential (Van Loan, IEEE TAC 23(3), 1978; from memory)."""
    if key not in _TURN_CACHE:
        from scipy.linalg import expm

        w = key * TURN_STEP
        A = np.diag(np.ones(3), 1)
        A[3, 2] = -(w**2)
        M = np.zeros((8, 8))
        M[:4, :4] = -A
        M[3, 7] = 1.0
        M[4:, 4:] = A.T
        E = expm(M)
        F = E[4:, 4:].T
        Q = F @ E[:4, 4:]
        Q = 0.5 * (Q + Q.T)
        Qinv = np.linalg.inv(Q)
        _TURN_CACHE[key] = (F, 0.5 * (Qinv + Qinv.T), -float(np.linalg.slogdet(Q)[1]))
    return _TURN_CACHE[key]


def plan_turn_rate(x: FloatArray, slow_per_interval: float, max_turn: float = 1.5) -> FloatArray:
    """Plan turn rate per knot interval, rad per interval, (K-1,), from horizontal knot states
    ``x`` (K, d, A >= 2) in per-interval units (east, north first).

    omega = (v x a) / |v|^2 at the knots, with |v|^4 regularised by ``slow_per_interval``^4 (a
    speed in metres per knot interval) so that a mover near a stop (heading undefined) gets no
    turn rate; then the root mean square of the two knots of each interval, capped at
    ``max_turn``."""
    ve, vn, ae, an = x[:, 1, 0], x[:, 1, 1], x[:, 2, 0], x[:, 2, 1]
    w2 = (ve * an - vn * ae) ** 2 / ((ve * ve + vn * vn) ** 2 + slow_per_interval**4)
    return np.minimum(np.sqrt(0.5 * (w2[:-1] + w2[1:])), max_turn)


def _turn_tables(turn: FloatArray, q: float) -> tuple[FloatArray, FloatArray, FloatArray, NDArray[np.int64]]:
    """Path blocks of the turn-aware prior for turn rates ``turn`` (K-1,) rad per interval at
    snap density ``q`` (per knot interval units): F (u, 4, 4), Q^-1 (u, 4, 4) and log det Q^-1
    (u,) per distinct rate on the ``TURN_STEP`` grid, and the index (K-1,) of each interval's."""
    keys = np.rint(np.abs(turn) / TURN_STEP).astype(np.int64)
    uniq, inv = np.unique(keys, return_inverse=True)
    Fu = np.empty((len(uniq), N_PATH, N_PATH))
    Qu = np.empty((len(uniq), N_PATH, N_PATH))
    ld = np.empty(len(uniq))
    for i, k in enumerate(uniq):  # one block per distinct turn rate on the grid
        F, Qinv, logdet = _turn_unit_blocks(int(k))
        Fu[i], Qu[i], ld[i] = F, Qinv / q, logdet - 4.0 * np.log(q)
    return Fu, Qu, ld, inv


def apply_turn_prior(system: "AxisSystem", turn: FloatArray, overwrite: bool = False,
                     model: NoiseModel | None = None) -> "AxisSystem":
    """The same system with the turn-aware path prior (``_turn_unit_blocks``) at the turn rates
    ``turn`` (K-1,) rad per knot interval in place of its constant-jerk prior, at the same snap
    density q of its model: the differences of the prior blocks are added to the band, one
    table per distinct turn rate gathered per band slot. ``turn_blocks`` holds the tables; ``F``
    and ``Qinv`` stay the constant-jerk ones (the wander state is unchanged). ``overwrite``: the
    band of ``system`` is changed in place (the caller no longer needs it). ``model``: the
    turn-aware prior takes this model's snap density instead (same wander), so a smoother's
    band serves for another snap density without assembling the data terms again."""
    if system.turn_blocks is not None:
        raise ValueError("apply_turn_prior needs a system with the constant-jerk prior")
    d, K = system.dim, system.design.n_knots
    model = system.model if model is None else model
    q_old = system.model.snap_psd * system.design.h**7
    q = model.snap_psd * system.design.h**7
    F0, Qi0 = system.F[:N_PATH, :N_PATH], system.Qinv[:N_PATH, :N_PATH]
    Fu, Qu, ld, inv = _turn_tables(turn, q)
    FtQ = np.swapaxes(Fu, 1, 2) @ Qu
    dA = FtQ @ Fu - F0.T @ Qi0 @ F0  # per distinct rate
    dQ = Qu - Qi0
    dB = F0.T @ Qi0 - FtQ
    u = 2 * d - 1
    ab = system.ab if overwrite else system.ab.copy()
    abk = ab.reshape(u + 1, K, d)
    for i in range(N_PATH):
        for j in range(N_PATH):
            if i <= j:
                abk[u + i - j, :-1, j] += dA[inv, i, j]  # own block of the interval's left knot
                abk[u + i - j, 1:, j] += dQ[inv, i, j]  # own block of its right knot
            abk[u + i - j - d, 1:, j] += dB[inv, i, j]  # between the two knots
    logdet0 = -4.0 * np.log(q_old) - _LOGDET_K  # the constant-jerk path block's log det Q^-1
    logdet_prior = system.logdet_prior + float(np.sum(ld[inv])) - len(turn) * logdet0
    Qinv = system.Qinv.copy()
    Qinv[:N_PATH, :N_PATH] *= q_old / q  # the constant-jerk block at the new snap density
    return replace(system, ab=ab, Qinv=Qinv, model=model, logdet_prior=logdet_prior, turn_blocks=(Fu, Qu, inv))


def _interval_blocks_of(system: "AxisSystem") -> tuple[FloatArray, FloatArray]:
    """The prior's F and Q^-1 per knot interval, (K-1, d, d) (for the likelihood of small
    systems; a constant-jerk system gives its one block, (d, d))."""
    if system.turn_blocks is None:
        return system.F, system.Qinv
    Fu, Qu, inv = system.turn_blocks
    F = np.repeat(system.F[None], len(inv), axis=0)
    Q = np.repeat(system.Qinv[None], len(inv), axis=0)
    F[:, :N_PATH, :N_PATH] = Fu[inv]
    Q[:, :N_PATH, :N_PATH] = Qu[inv]
    return F, Q


def _path_prior_times(Fu: FloatArray, Qu: FloatArray, inv: NDArray[np.int64], x: FloatArray) -> FloatArray:
    """The path prior's precision times knot states: (K, 4, c) from path-block tables F, Q^-1
    (u, 4, 4) with each interval's index ``inv`` (K-1,) and states x (K, 4, c). With
    r_k = x_(k+1) - F_k x_k the prior's quadratic form is sum r_k^T Q_k^-1 r_k, so knot k gets
    -F_k^T Q_k^-1 r_k and knot k+1 gets Q_k^-1 r_k. Entry by entry over the 4 x 4 blocks, each a
    gathered column of the tables (measured in the 1M profile: gathering whole (K, 4, 4) blocks
    for a stacked product took 120 ms a call against 87 ms)."""
    def times(M, v, transpose=False):
        out = np.zeros_like(v)
        for a in range(N_PATH):
            for b in range(N_PATH):
                m = M[:, b, a] if transpose else M[:, a, b]
                if np.any(m):
                    out[:, a] += m[inv][:, None] * v[:, b]
        return out

    r = x[1:] - times(Fu, x[:-1])
    qr = times(Qu, r)
    out = np.zeros_like(x)
    out[1:] += qr
    out[:-1] -= times(Fu, qr, transpose=True)
    return out


@dataclass
class TurnRefit:
    """What the sampling-error draws of a turn-aware estimate need (``turn_refit_draws``)."""

    first_factor: FloatArray  # of the constant-jerk first pass (same fixes and weights), float32
    first_states: FloatArray  # (K, d, A) its estimate, per knot-interval units
    states: FloatArray  # (K, d, A) the turn-aware estimate
    turn: FloatArray  # (K-1,) the turn rates of its prior, rad per interval
    slow: float  # speed below which the turn rate is not trusted, m per knot interval
    vel_sd: FloatArray | None = None  # (n,) 1-sigma of a receiver velocity per axis, m/s
    prior_states: FloatArray | None = None  # (K, 4, A) the prior's precision times the estimate
    #: Whether the first-order draws are accurate enough on this system (``_exact_in_turn_rates``;
    #: None = not yet tested, on the first draw of the first call)
    linear_ok: bool | None = None


def turn_refit_draws(system: "AxisSystem", U: FloatArray, refit: TurnRefit, white_var: FloatArray,
                     model: NoiseModel, n_samples: int, rng: np.random.Generator) -> FloatArray:
    """Sampling error of a turn-aware estimate, (n_samples, K, dim, A).

    The estimate is not linear in the fixes: its turn rates come from a constant-jerk first
    pass of the same fixes. Each draw takes a fresh receiver error e (white of ``white_var``,
    the model's Gauss-Markov wander on the knot grid, white velocity error of ``vel_sd``), the
    first pass's response to it (hence the draw's turn rates omega'), and the turn-aware
    smoother's, to first order in both (a linearised parametric bootstrap; Efron & Tibshirani
    1993, ch. 6 and 21, chapters from memory): with Lambda the turn-aware posterior precision at the estimate's rates
    and Delta the change of its prior precision at omega',
    x(omega', y + e) - x(omega, y) ~ Lambda^-1 H^T W e - Lambda^-1 Delta x_hat.
    One right-hand side per draw (the first pass has the same fixes and weights), batched
    solves with the two factors and one more with Lambda's: no factorisation per draw.
    Where the turn-aware prior is stiff against the data, Lambda^-1 Delta is not small and
    that first-order step overshoots; each draw is then solved with its own rates' prior,
    (Lambda + Delta) x = H^T W e - Delta x_hat (``_exact_in_turn_rates``)."""
    design = system.design
    K, d = design.n_knots, system.dim
    A = refit.states.shape[2]
    vel_scale = None
    if refit.vel_sd is not None:  # H^T W of a velocity error of that 1-sigma, per knot interval
        vel_scale = system.wv * design.h * refit.vel_sd
    rhs = _noise_rhs(system, white_var, model, n_samples * A, rng, vel_scale).reshape(K, d, n_samples, A)
    q = system.model.snap_psd * design.h**7
    xp = refit.states[:, :N_PATH, :]
    if refit.prior_states is None:  # the same for every batch of draws
        refit.prior_states = _path_prior_times(*system.turn_blocks, xp)
    # all draws' first passes in one call (LAPACK still solves them column by column: a draw
    # costs about as much as the first)
    if refit.first_factor.dtype != np.float64:  # kept in single precision; in double from the first draw on
        refit.first_factor = refit.first_factor.astype(np.float64)
    first = cho_solve_banded((refit.first_factor, False), rhs.reshape(K * d, -1),
                             check_finite=False).reshape(K, d, n_samples, A)
    tables = []
    for j in range(n_samples):  # each draw's turn rates change the prior: into its right-hand side
        Fj, Qj, _, ij = _turn_tables(plan_turn_rate(first[:, :, j] + refit.first_states, refit.slow), q)
        tables.append((Fj, Qj, ij))
        rhs[:, :N_PATH, j] -= _path_prior_times(Fj, Qj, ij, xp) - refit.prior_states
    del first
    out = cho_solve_banded((U, False), rhs.reshape(K * d, -1), check_finite=False).reshape(K, d, n_samples, A)
    out = _exact_in_turn_rates(system, U, tables, rhs, out, refit)
    return np.moveaxis(out, 2, 0)


#: Relative residual, in the norm of Lambda^-1, to which ``_exact_in_turn_rates`` solves each
#: draw; a draw's 1-sigma needs no more (its deviation is then within 1 % of the exact one).
TURN_DRAW_TOL = 1e-2
#: Most conjugate-gradient steps per draw (``_exact_in_turn_rates``); measured: 3-5 reach the
#: tolerance on the phone helix.
TURN_DRAW_MAXITER = 30


def _exact_in_turn_rates(system: "AxisSystem", U: FloatArray, tables: list, rhs: FloatArray, x: FloatArray,
                         refit: TurnRefit) -> FloatArray:
    """Each draw's deviation (K, d, S, A) with its own turn rates' prior: solves
    (Lambda + Delta_j) x_j = rhs_j, Lambda the turn-aware posterior precision (factor ``U``) and
    Delta_j the change of its path prior at draw j's turn rates (``tables[j]``: F, Q^-1 tables and
    index, ``_turn_tables``), from the first-order answer x_j = Lambda^-1 rhs_j.

    Lambda + Delta_j is draw j's own posterior precision, symmetric positive definite, so
    conjugate gradients preconditioned with Lambda converge (Hestenes & Stiefel, J. Res. NBS
    49(6), 1952; Golub & Van Loan, Matrix Computations, 4th ed., sec. 11.5; both from memory)
    and each step lowers the error's energy norm: unlike the first-order answer the result never
    overshoots. A step costs one batched banded solve with ``U`` and two prior products per
    draw; Lambda times a search direction is carried along (Lambda z = r for z = Lambda^-1 r), so
    no product with the band is needed. Measured on the phone helix (10 Hz, seed 2026): the
    first-order draws put the speed's 1-sigma at 0.5-2.3 m/s and, with 1 % outliers and a 5 s
    outage, at up to 19 m/s, so that the chainage stopped for a third of the log; solved this
    way 0.23-0.64 m/s in 3-5 steps.

    Whether that is needed is a property of the system, not of a draw (the draws are
    independent and alike): it is tested once, on the first draw of the first call, and the
    verdict kept in ``refit.linear_ok``. On the 1M-fix scale drive the first-order answer's
    relative residual is 1e-5 and the test is all the extra cost."""
    K, d, S, A = x.shape
    base = system.turn_blocks

    def delta(j, v):  # Delta_j v, (K, d, A): the path prior at draw j's rates less the estimate's
        out = np.zeros_like(v)
        out[:, :N_PATH] = _path_prior_times(*tables[j], v[:, :N_PATH]) - _path_prior_times(*base, v[:, :N_PATH])
        return out

    def solve(r):
        return cho_solve_banded((U, False), r.reshape(K * d, -1), check_finite=False).reshape(r.shape)

    def dot(a, b):  # per draw
        return np.einsum("kdsa,kdsa->s", a, b)

    tested = 0  # draws whose residual (and its solve) the test below has already made
    if refit.linear_ok is None:  # test the first draw: its residual after the first-order step
        r0 = -delta(0, x[:, :, 0])[:, :, None]
        z0 = solve(r0)
        tested = 1
        rel2 = dot(r0, z0)[0] / max(dot(rhs[:, :, :1], x[:, :, :1])[0], 1e-300)
        refit.linear_ok = bool(rel2 <= TURN_DRAW_TOL**2)
    if refit.linear_ok:
        return x
    norm0 = dot(rhs, x)  # rhs^T Lambda^-1 rhs per draw
    R = np.empty_like(x)  # residual of the first-order step, per draw
    Z = np.empty_like(x)
    if tested:
        R[:, :, :1], Z[:, :, :1] = r0, z0
    for j in range(tested, S):
        R[:, :, j] = -delta(j, x[:, :, j])
    Z[:, :, tested:] = solve(R[:, :, tested:])
    rz = dot(R, Z)
    P, LP = Z.copy(), R.copy()  # search directions and Lambda times them
    active = rz > TURN_DRAW_TOL**2 * norm0
    for _ in range(TURN_DRAW_MAXITER):
        if not active.any():
            break
        idx = np.flatnonzero(active)
        for j in idx:
            AP = LP[:, :, j] + delta(j, P[:, :, j])
            alpha = rz[j] / np.sum(P[:, :, j] * AP)
            x[:, :, j] += alpha * P[:, :, j]
            R[:, :, j] -= alpha * AP
        Z[:, :, idx] = solve(R[:, :, idx])
        new = dot(R[:, :, idx], Z[:, :, idx])
        beta = (new / rz[idx])[None, None, :, None]
        rz[idx] = new
        P[:, :, idx] = Z[:, :, idx] + beta * P[:, :, idx]
        LP[:, :, idx] = R[:, :, idx] + beta * LP[:, :, idx]
        active[idx] = new > TURN_DRAW_TOL**2 * norm0[idx]
    return x


@dataclass
class AxisSystem:
    """Banded posterior precision (upper storage) shared by the A axes of a group (same fixes,
    same variances), the right-hand sides (K d, A) and bookkeeping."""

    ab: FloatArray
    rhs: FloatArray
    dim: int
    F: FloatArray
    Qinv: FloatArray
    logdet_prior: float
    prior0: FloatArray
    w: FloatArray
    y: FloatArray  # (n, A)
    design: Design
    model: NoiseModel
    wander_gain: tuple | None = None  # cached by noise_draws
    #: Receiver velocity measurements (``build_system`` ``vel``), per knot-interval units:
    #: weights (n,) = 1 / variance (0 = none) and values (n, A) = velocity x h.
    wv: FloatArray | None = None
    yv: FloatArray | None = None
    #: A turn-aware prior (``apply_turn_prior``): path-block tables F, Q^-1 (u, 4, 4) per
    #: distinct turn rate and the index (K-1,) of each interval's; None = constant jerk.
    turn_blocks: tuple | None = None


def build_system(design: Design, y: FloatArray, var: FloatArray, m: NoiseModel, pos_sd: float = 1e4,
                 vel: FloatArray | None = None, vel_var: FloatArray | None = None) -> AxisSystem:
    """Posterior precision and right-hand sides for the axes of one group.

    ``y`` (n,) or (n, A) positions with the offset removed (NaN = no measurement); ``var`` (n,)
    measurement variances in m^2 (inf = no measurement), the same for every axis. ``vel`` (n, A)
    receiver velocities at the same fixes, m/s (NaN = none), with variances ``vel_var`` (n,),
    (m/s)^2: each measures the path's velocity (``_vtables``), not the wander.

    The data term sum_i w_i r_i r_i^T of a knot interval is assembled from 15 weighted Legendre
    moments of the fixes' interval coordinates (each row r_i is a polynomial of degree <= 7 in
    it, so their products have degree <= 14): O(n) with 15 + 8 A passes, no per-fix outer
    products.
    """
    y = np.asarray(y, float)
    if y.ndim == 1:
        y = y[:, None]
    d = m.dim
    K = design.n_knots
    fin = np.all(np.isfinite(y), axis=1)
    ok = fin & np.isfinite(var) & (var > 0)
    w = np.where(ok, 1.0 / np.where(ok, var, 1.0), 0.0)
    yy = np.where(ok[:, None], y, 0.0)
    B, C, _, _ = _tables(d)
    F, Qinv, logdet_q = _prior_blocks(m, design.h)
    A = F.T @ Qinv @ F
    Bo = -F.T @ Qinv
    p0 = _prior0(m, pos_sd)
    c = y.shape[1]
    parts = [(_interval_sums(design, lambda a, b: w[a:b, None] * yy[a:b], 8, c), B)]  # (K-1, A, 8)
    moments = [(C, _interval_sums(design, w, N_LEG))]
    wv = yv = None
    if vel is not None:  # velocity rows add their own precision and right-hand side
        wv, yv = _velocity_data(design, vel, vel_var)
        Bv, Cv = _vtables(d)
        moments.append((Cv, _interval_sums(design, wv, N_LEG)))
        parts.append((_interval_sums(design, lambda a, b: wv[a:b, None] * yv[a:b], 8, c), Bv))
    ab = _band(moments, d, K, A, Qinv, Bo, p0)
    rhs = _knot_rhs(parts, K, d, c)
    logdet_prior = float(np.sum(np.log(p0)) + (K - 1) * logdet_q)
    return AxisSystem(ab, rhs.reshape(K * d, -1), d, F, Qinv, logdet_prior, p0, w, yy, design, m, wv=wv, yv=yv)


#: Knot intervals per block of the band assembly: the block's temporaries stay a few MB (fresh
#: pages for a large temporary cost more than the product itself; benchmarks/bench_profile.py).
_BAND_BLOCK = 8192


_BAND_ROWS: dict[int, tuple[NDArray[np.int64], NDArray[np.int64]]] = {}


def _band_rows(d: int) -> tuple[NDArray[np.int64], NDArray[np.int64]]:
    """(left, right) (2d, d) row indices into an interval's data-term entries (2d x 2d, flattened;
    4 d^2 = an all-zero row) for the band layout of its left and its right knot. Band slot
    (r, j) of knot k holds Lambda[k d + j - (2d - 1) + r, k d + j]: an entry of knot k's own
    block when j + r >= 2d - 1, else of the block between knots k - 1 and k."""
    if d in _BAND_ROWS:
        return _BAND_ROWS[d]
    u = 2 * d - 1
    left = np.full((u + 1, d), 4 * d * d)
    right = np.full((u + 1, d), 4 * d * d)
    for i in range(d):
        for j in range(d):
            if i <= j:  # own block of the interval's left knot and of its right knot (upper triangle)
                left[u + i - j, j] = i * 2 * d + j
                right[u + i - j, j] = (d + i) * 2 * d + d + j
            right[u + i - j - d, j] = i * 2 * d + d + j  # between the two knots
    _BAND_ROWS[d] = (left, right)
    return left, right


def _band(moments: list, d: int, K: int, A: FloatArray, Qinv: FloatArray, Bo: FloatArray,
          p0: FloatArray) -> FloatArray:
    """Upper band storage (2d, K d) of the posterior precision: prior blocks plus the data terms
    of every knot interval, from the Legendre moments of its fixes (``moments``: (product table
    (15, 4 d^2), moments (K-1, 15)) per kind of measurement row, their terms added).

    Knot k's own block is (left-knot data of interval k + F^T Q^-1 F) + (right-knot data of
    interval k-1 + Q^-1) (+ the first knot's prior); the block between knots k and k+1 is
    interval k's cross data - F^T Q^-1. Assembled ``_BAND_BLOCK`` intervals at a time: the
    block's data-term entries (4 d^2 rows, the same products entry by entry as for all intervals
    at once), gathered into the band layout (``_band_rows``) of the left and of the right knots
    and added into the band, which starts at 0 (x + y is exact in either order): the matrix is
    bit for bit the one the entry-by-entry sums give, without a (4 d^2, K) temporary."""
    u = 2 * d - 1
    left, right = _band_rows(d)
    prior = np.zeros((2 * d, 2 * d))  # the prior's part of an interval's term, same entry order
    prior[:d, :d], prior[d:, d:], prior[:d, d:] = A, Qinv, Bo
    prior = np.append(prior.ravel(), 0.0)
    cl, cr = prior[left], prior[right]
    tables = [(C.reshape(N_LEG, 4 * d * d).T, mom) for C, mom in moments]
    ab = np.zeros((u + 1, K * d))
    abk = ab.reshape(u + 1, K, d)  # a view: slot row, knot, state
    for a in range(0, K - 1, _BAND_BLOCK):
        c = min(K - 1, a + _BAND_BLOCK)
        g = tables[0][0] @ tables[0][1][a:c].T  # (4 d^2, c - a): every row one entry
        for Ct, mom in tables[1:]:
            g += Ct @ mom[a:c].T
        g = np.concatenate((g, np.zeros((1, c - a))))  # row 4 d^2: unused slots
        for rows, const, at in ((left, cl, slice(a, c)), (right, cr, slice(a + 1, c + 1))):
            part = g[rows]  # (2d, d, c - a)
            part += const[:, :, None]
            abk[:, at] += part.transpose(0, 2, 1)
    for i in range(d):
        ab[u, i] += p0[i]
    return ab


def _velocity_data(design: Design, vel: FloatArray, vel_var: FloatArray) -> tuple[FloatArray, FloatArray]:
    """Weights (n,) and values (n, A) of velocity measurements in knot-interval units (time unit
    h: a velocity v m/s is v h per interval, its variance var h^2); 0 weight where absent."""
    vel = np.asarray(vel, float)
    vel = vel[:, None] if vel.ndim == 1 else vel
    var = np.asarray(vel_var, float)
    ok = np.all(np.isfinite(vel), axis=1) & np.isfinite(var) & (var > 0)
    h = design.h
    wv = np.where(ok, 1.0 / (np.where(ok, var, 1.0) * h * h), 0.0)
    return wv, np.where(ok[:, None], vel * h, 0.0)


def factor(system: AxisSystem) -> FloatArray:
    """Upper banded Cholesky factor U of the posterior precision (Lambda = U^T U)."""
    return cholesky_banded(system.ab, lower=False, check_finite=False)


def solve_mean(system: AxisSystem, U: FloatArray) -> FloatArray:
    """Posterior mean of the knot states, (K, d, A), in per-knot-interval units."""
    return cho_solve_banded((U, False), system.rhs, check_finite=False).reshape(-1, system.dim, system.rhs.shape[1])


def _interval_legendre(system: AxisSystem, x: FloatArray, velocity: bool = False) -> FloatArray:
    """(K-1, A, 8) Legendre coefficients of the model position (path + wander) per interval, or
    with ``velocity`` of the path's velocity in knot-interval units (``_vtables``)."""
    d = system.dim
    B = _vtables(d)[0] if velocity else _tables(d)[0]
    both = np.concatenate((x[:-1], x[1:]), axis=1)  # (K-1, 2d, A)
    return _stack_product(np.ascontiguousarray(np.swapaxes(both, 1, 2)), B)


def fitted(system: AxisSystem, x: FloatArray, velocity: bool = False) -> FloatArray:
    """Model position (path + wander) at every fix, (n, A): the Legendre series of each fix's
    interval, summed over blocks of ``_SUM_BLOCK`` fixes (temporaries stay in cache), one axis
    at a time on contiguous rows (an (m, A) array with A = 1 or 2 would loop over its short last
    axis). With ``velocity`` the path's velocity there instead, m/s."""
    coef = np.ascontiguousarray(_interval_legendre(system, x, velocity).transpose(1, 2, 0))  # (A, 8, K-1)
    if velocity:
        coef /= system.design.h  # per knot interval -> per second
    k, xs = system.design.interval, system.design.x
    out = np.empty((len(k), coef.shape[0]))
    tmp = np.empty(min(len(k), _SUM_BLOCK))
    for a in range(0, len(k), _SUM_BLOCK):
        kk = k[a : a + _SUM_BLOCK]
        t = tmp[: len(kk)]
        P = _legendre_columns(xs[a : a + _SUM_BLOCK], 8)
        for axis, c in enumerate(coef):
            acc = np.take(c[0], kk)  # the series summed from P_0 up, as 0 + c_0 P_0 + ...
            acc *= P[0]
            for j in range(1, 8):
                np.take(c[j], kk, out=t)
                t *= P[j]
                acc += t
            out[a : a + len(kk), axis] = acc
    return out


def resmooth_path(system: AxisSystem, U: FloatArray, x: FloatArray) -> FloatArray:
    """The smoother applied to its own estimate of the path: knot states (K, d, A) of S(S y).

    The estimate's path part at every fix (the wander left out) is fed back as data through the
    same linear smoother (same fixes, weights and factor; only the right-hand side changes).
    For a linear smoother S the bias of S y for a true path f is (S - I) f, estimated by
    (S - I) S y: Tukey's twicing (Tukey 1977; Stuetzle & Mittal 1979), here used for the speed
    along the path, whose bias at turns (corner cutting) shortens the chainage."""
    d = system.dim
    xp = x.copy()
    if d > N_PATH:
        xp[:, N_PATH:, :] = 0.0
    yv = fitted(system, xp, velocity=True) if system.wv is not None else None
    return solve_columns(system, U, fitted(system, xp), yv)


def solve_columns(system: AxisSystem, U: FloatArray, y: FloatArray, yv: FloatArray | None = None) -> FloatArray:
    """Knot states (K, d, c) of the same linear smoother (fixes, weights, factor) applied to other
    data ``y`` (n, c) at the same fixes: only the right-hand side changes. Fixes left out of the
    system (weight 0) are left out here too. A system with velocity measurements needs the
    velocities ``yv`` (n, c), m/s, of the other data too."""
    K, d = system.design.n_knots, system.dim
    rhs = _columns_rhs(system, y, yv)
    return cho_solve_banded((U, False), rhs.reshape(K * d, -1), check_finite=False).reshape(K, d, -1)


def _columns_rhs(system: AxisSystem, y: FloatArray, yv: FloatArray | None = None) -> FloatArray:
    """Right-hand sides (K, d, c) H^T W y of other data at the system's fixes (``solve_columns``)."""
    d = system.dim
    w, c = system.w, y.shape[1]

    def data(a, b):  # weighted data block by block: no (n, c) temporary
        yw = np.where(w[a:b, None] > 0, y[a:b], 0.0)
        yw *= w[a:b, None]
        return yw

    parts = [(_interval_sums(system.design, data, 8, c), _tables(d)[0])]
    if system.wv is not None:
        if yv is None:
            raise ValueError("this smoother takes velocity measurements: give the data's velocities")
        wv, h = system.wv, system.design.h

        def data_v(a, b):
            return np.where(wv[a:b, None] > 0, yv[a:b] * h, 0.0) * wv[a:b, None]

        parts.append((_interval_sums(system.design, data_v, 8, c), _vtables(d)[0]))
    return _knot_rhs(parts, system.design.n_knots, d, c)


def _stack_product(stack: FloatArray, table: FloatArray) -> FloatArray:
    """(m, c, j) @ table (j, k) -> (m, c, k) as one 2-D matrix product (a stack of (c, j)
    products costs one call per item). With an odd c numpy's stacked product does not go through
    BLAS and rounds differently from the 2-D product; it is kept there, so every result stays bit
    for bit what it was (the odd counts are the small up-axis group)."""
    m, c, j = stack.shape
    if c % 2:
        return stack @ table
    return (stack.reshape(m * c, j) @ table).reshape(m, c, -1)


def _knot_rhs(parts: list, K: int, d: int, c: int) -> FloatArray:
    """Right-hand sides (K, d, c) from per-interval Legendre sums of weighted data: ``parts`` is
    a list of (sums (K-1, c, 8), row table (2d, 8)); interval k's vector (2d) goes half to knot k,
    half to knot k+1. In blocks of ``_RHS_BLOCK`` intervals (``_stack_product``)."""
    rhs = np.zeros((K, d, c))
    for a in range(0, K - 1, _RHS_BLOCK):
        b = min(K - 1, a + _RHS_BLOCK)
        v = None
        for sums, table in parts:
            vi = _stack_product(sums[a:b], table.T)
            v = vi if v is None else v + vi
        rhs[a:b] += np.swapaxes(v[:, :, :d], 1, 2)
        rhs[a + 1 : b + 1] += np.swapaxes(v[:, :, d:], 1, 2)
    return rhs


def log_likelihood(system: AxisSystem, U: FloatArray, x: FloatArray) -> float:
    """Log marginal likelihood of the fixes of all A axes (up to a constant shared by all noise
    models).

    The quadratic form y^T R^-1 y - b^T Lambda^-1 b is evaluated in its numerically stable
    minimum form: weighted residuals plus the prior penalty of the posterior mean.
    """
    A = system.rhs.shape[1]
    res = system.y - fitted(system, x)
    F, Qinv = _interval_blocks_of(system)
    per = "k" if F.ndim == 3 else ""  # per-interval prior blocks (``apply_turn_prior``)
    e = x[1:] - np.einsum(f"{per}ij,kjA->kiA", F, x[:-1])
    quad = (
        float(np.sum(system.w[:, None] * res**2))
        + float(np.einsum(f"kiA,{per}ij,kjA->", e, Qinv, e))
        + float(np.sum(system.prior0[:, None] * x[0] ** 2))
    )
    ok = system.w > 0
    logdet_post = 2.0 * float(np.sum(np.log(U[-1])))
    per_axis = logdet_post - system.logdet_prior - float(np.sum(np.log(system.w[ok]))) + ok.sum() * np.log(2 * np.pi)
    return -0.5 * (quad + A * per_axis)


def draw_samples(U: FloatArray, dim: int, n_samples: int, rng: np.random.Generator) -> FloatArray:
    """Zero-mean posterior deviations U^-1 z of the knot states, (n_samples, K, dim)."""
    z = rng.standard_normal((U.shape[1], n_samples))
    x, info = dtbtrs(U, z, uplo="U", trans="N", diag="N", overwrite_b=1)
    if info != 0:
        raise np.linalg.LinAlgError("banded triangular solve failed")
    return x.T.reshape(n_samples, -1, dim)


def _ar1(z: FloatArray, phi: float) -> FloatArray:
    """b_k = phi b_(k-1) + z_k along axis 0 (b_0 = z_0), by a doubling scan: after the pass
    with stride s every b_k holds sum_(j < 2s) phi^j z_(k-j); stops once phi^s is below the
    rounding of the sum. Log-depth vectorised passes instead of a loop over knots (and no
    scipy.signal import on the profile path: 0.45 s of start-up)."""
    b = np.array(z, dtype=float)
    s, p = 1, phi
    while s < len(b) and p > 1e-17:
        b[s:] += p * b[:-s]  # the right side is evaluated first: old values, as the scan needs
        s, p = 2 * s, p * p
    return b


#: Knot intervals per block of the draws' right-hand sides (their temporaries stay in cache).
_RHS_BLOCK = 4096


def _wander_at_knots(model: NoiseModel, h: float, K: int, cols: int, rng: np.random.Generator) -> FloatArray:
    """(K, cols) independent realisations of the model's stationary Gauss-Markov wander at knots
    ``h`` seconds apart (exact AR(1) discretisation: phi = exp(-h / tau), innovation variance
    var (1 - phi^2), the first knot drawn from the stationary variance), m."""
    phi = float(np.exp(-h / model.wander_tau_s))
    z = rng.standard_normal((K, cols)) * np.sqrt(model.wander_var_m2 * (1.0 - phi**2))
    z[0] = rng.standard_normal(cols) * np.sqrt(model.wander_var_m2)
    return _ar1(z, phi)


def _noise_rhs(system: AxisSystem, white_var: FloatArray, model: NoiseModel, cols: int,
               rng: np.random.Generator, vel_scale: FloatArray | None = None) -> FloatArray:
    """Right-hand sides H^T W e (K, d, cols) of ``cols`` fresh receiver-error realisations e at
    the system's fixes: white of variance ``white_var`` (n,) m^2, the model's Gauss-Markov
    wander simulated on the knot grid (linear between knots, like the wander state), and, for a
    system with velocity measurements, white velocity error whose right-hand side per fix is
    ``vel_scale`` (n,) times a standard normal (``noise_draws``, ``turn_refit_draws``).

    H^T W e is gathered per knot interval with the Legendre sums of ``build_system``; the wander
    enters through two per-interval vectors (sum_i w_i r_i (1 - sigma_i) and sum_i w_i r_i sigma_i)
    times the knot values of b, so no per-fix work depends on the wander. The white errors are
    drawn block by block in order of the fixes (the same numbers as at once, without an (n, cols)
    array) and the right-hand sides assembled block by block of intervals, directly in the
    solver's (K, d, cols) order."""
    d = system.dim
    K = system.design.n_knots
    B, _, W0, W1 = _tables(d)
    scale = np.sqrt(np.where(system.w > 0, white_var, 0.0))
    scale *= system.w

    def white(a, b):
        e = rng.standard_normal((b - a, cols))
        e *= scale[a:b, None]
        return e

    sums = _interval_sums(system.design, white, 8, cols)  # (K-1, cols, 8)
    b = None
    if model.wander_var_m2 > 0:
        b = _wander_at_knots(model, system.design.h, K, cols, rng)[:, None, :]  # (K, 1, cols)
        if system.wander_gain is None:  # same for every batch of draws: computed once
            m = _interval_sums(system.design, system.w, N_LEG)
            system.wander_gain = (m @ W0, m @ W1)
        g0, g1 = (g[:, :, None] for g in system.wander_gain)  # (K-1, 2d, 1)
    sums_v = None
    if system.wv is not None:
        if vel_scale is None:
            raise ValueError("this smoother takes velocity measurements: give their error scale")
        scale_v = np.where(np.isfinite(vel_scale), vel_scale, 0.0)

        def white_v(a, b):
            ev = rng.standard_normal((b - a, cols))
            ev *= scale_v[a:b, None]
            return ev

        sums_v = _interval_sums(system.design, white_v, 8, cols)
        Bv = _vtables(d)[0]
    rhs = np.zeros((K, d, cols))
    for a in range(0, K - 1, _RHS_BLOCK):  # small blocks of intervals: temporaries stay in cache
        c = min(K - 1, a + _RHS_BLOCK)
        v = np.swapaxes(_stack_product(sums[a:c], B.T), 1, 2)  # (m, 2d, cols)
        if sums_v is not None:
            v = v + np.swapaxes(_stack_product(sums_v[a:c], Bv.T), 1, 2)
        if b is not None:
            v = v + g0[a:c] * b[a:c] + g1[a:c] * b[a + 1 : c + 1]
        rhs[a:c] += v[:, :d]
        rhs[a + 1 : c + 1] += v[:, d:]
    return rhs


def noise_draws(
    system: AxisSystem, U: FloatArray, white_var: FloatArray, model: NoiseModel, n_samples: int,
    rng: np.random.Generator, n_axes: int | None = None,
) -> FloatArray:
    """Sampling error of the estimated knot states under repeated receiver noise,
    (n_samples, K, dim, A).

    The estimate is linear in the fixes, x_hat = Lambda^-1 H^T W y, so its error for a fixed true
    path is Lambda^-1 H^T W (e + b): ``e`` white noise of variance ``white_var`` per fix and ``b``
    the model's Gauss-Markov wander (simulated exactly on the knot grid, interpolated like the
    wander state). Each draw is one fresh realisation of the receiver error passed through the
    very same smoother, which is what "covers the truth at its stated rate on repeated noisy
    logs" asks for (the Bayesian posterior spread also contains the prior's spread of paths, which
    a fixed smooth path does not have, and over-covers for higher derivatives). ``n_axes`` draws
    only the system's first columns (the rest are carried data, see ``AxisGroup.carried``).
    The right-hand sides H^T W (e + b) come from ``_noise_rhs``.
    """
    d = system.dim
    A = system.rhs.shape[1] if n_axes is None else n_axes  # the first n_axes columns only
    K = system.design.n_knots
    cols = n_samples * A
    vel_scale = np.sqrt(system.wv) if system.wv is not None else None  # variance 1 / weight
    rhs = _noise_rhs(system, white_var, model, cols, rng, vel_scale)
    x = cho_solve_banded((U, False), rhs.reshape(K * d, cols), check_finite=False)  # (K d, cols)
    return np.moveaxis(x.reshape(K, d, n_samples, A), 2, 0)


# --------------------------------------------------------------------------------------------
# Gross outliers before any fitting
# --------------------------------------------------------------------------------------------


def screen_outliers(t: FloatArray, Y: FloatArray, z: float = 6.0, passes: int = 3,
                    max_accel: float | None = MAX_ACCEL_MPS2) -> NDArray[np.bool_]:
    """Mask of gross outliers (multipath jumps), found before any noise is fitted.

    Maximum likelihood explains a 30 m jump among 0.3 m fixes by a path that swerves through it
    (a huge snap density), after which no residual looks large; so gross jumps must be removed
    first. Each interior fix is predicted by the cubic through its two neighbours on each side
    (Lagrange interpolation in ``t``, exact for irregular sampling); smooth motion leaves a residual
    of the order of the receiver noise, a jump its full size. A fix is flagged where the residual
    norm exceeds ``z`` robust sigmas (median absolute deviation of the residual components,
    scaled by 1.4826: Rousseeuw & Croux 1993, common practice) and is the local peak (the jump
    also shows, at 2/3 of its size, in its neighbours' predictions). The first and last two
    fixes have no window of their own: a peak on the first (last) tested fix is put on the one
    of the end fixes whose jump explains the residuals best (``survey.jump_ends``). A flag that
    motion at up to ``max_accel`` could have made is kept only where the residuals around it
    have a jump's pattern, not a bend's (``survey.jump_shape``: bends of a sparse log). Repeated
    ``passes`` times with flagged fixes removed so clusters are peeled.

    Parameters
    ----------
    t
        (n,) strictly increasing times (s) or chainage (m).
    Y
        (n, A) positions, m; rows with NaN are neither tested nor used.
    max_accel
        Largest acceleration of real motion, m/s^2; None where ``t`` is chainage (the pattern
        alone decides).
    """
    n = len(t)
    t = np.asarray(t, float)
    bad = ~np.all(np.isfinite(Y), axis=1)
    out = np.zeros(n, bool)
    beyond_motion = np.zeros(n, bool)  # in a window whose residual no motion can make (jumps_among)
    limit = z * np.sqrt(Y.shape[1])
    for _ in range(passes):
        idx = np.flatnonzero(~(out | bad))
        if idx.size < 7:
            break
        tt = t[idx]
        cols = [np.ascontiguousarray(Y[idx, a]) for a in range(Y.shape[1])]  # one axis at a time
        ti = tt[2:-2]
        nodes = (tt[:-4], tt[1:-3], tt[3:-1], tt[4:])  # neighbours i-2, i-1, i+1, i+2
        dev = []
        res = [c[2:-2].copy() for c in cols]
        for j, w in enumerate(lagrange_weights(nodes, ti)):  # four nodes, not a loop over fixes
            lo = (0, 1, 3, 4)[j]
            for r, c in zip(res, cols):
                r -= w * c[lo : lo + len(ti)]
        for r in res:
            r -= np.median(r)
            dev.append(r)
        sigma = 1.4826 * float(np.median(np.abs(np.concatenate(dev))))
        if not sigma > 0:
            break
        size = np.zeros(len(idx))
        size[2:-2] = np.sqrt(sum(d * d for d in dev)) / sigma
        peak = (size >= np.r_[0.0, size[:-1]]) & (size >= np.r_[size[1:], 0.0])
        flag = (size > limit) & peak
        if not flag.any():
            break
        _blame_chain_ends(flag, tt, Y, idx)
        places = np.flatnonzero(flag)
        jump = jumps_among(t, [Y[:, a] for a in range(Y.shape[1])], idx, places, size[places] * sigma,
                           limit * sigma, beyond_motion, accel=max_accel)
        flag[places[~jump]] = False
        if not flag.any():  # only bends' residuals were left
            break
        out[idx[flag]] = True
    return out


def _blame_chain_ends(flag: NDArray[np.bool_], t: FloatArray, Y: FloatArray, idx: NDArray[np.int64]) -> None:
    """Move a flag on the first (last) tested fix of the chain ``idx`` (rows of ``Y``; times
    ``t``) to the fix among its first (last) three whose single jump explains the residuals
    best (``survey.jump_ends.end_place``), in place."""
    m = len(flag)
    for place in {2, m - 3}:
        if 0 <= place < m and flag[place]:
            flag[place] = False
            flag[end_place(place, m, lambda a, b: (t[a:b], Y[idx[a:b]]))] = True


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
    """Noise chosen by maximum likelihood; ``at_cap`` True when the stated accuracy bound binds."""

    model: NoiseModel
    log_likelihood: float
    evaluations: int
    at_cap: bool = False


def _sigmoid(x: float) -> float:
    return float(1.0 / (1.0 + np.exp(-x)))


def fit_noise(
    pieces: list[tuple[FloatArray, FloatArray, FloatArray]],
    wander_tau_s: float,
    start_var: float,
    cap: float | None = None,
    wander_ratio_max: float | None = None,
    q_max: float | None = None,
) -> FitResult:
    """Choose the snap density q, the white variance and the wander variance by maximum marginal
    likelihood.

    Parameters
    ----------
    pieces
        Independent stretches of data, each (t (n,), Y (n, A), base_var (n,)); the A axes share one
        noise model (east and north) and their log-likelihoods add. Times strictly increasing;
        base_var = inf excludes a fix (screened outlier).
    wander_tau_s
        Correlation time of the Gauss-Markov wander, s.
    start_var
        Rough white variance (m^2) to start from.
    cap
        None: ``base_var`` is 1 and the white variance (m^2) and the wander variance are free.
        A number: ``base_var`` is the stated accuracy^2 of each fix, which bounds the TOTAL error:
        white_i = g f base_i and wander = g (1 - f) median(base), with 0 < f < 1 and
        0 < g <= ``cap``. The stated accuracy of a receiver is its total error (white plus slow
        wander); treating it all as white noise would oversmooth bends, so only the split and
        the level below the bound are estimated.
    wander_ratio_max
        Without stated accuracy (``cap`` None): bound the wander variance to this many times the
        white variance (None = free). See "Wander without stated accuracy" in the module
        docstring.
    q_max
        Search the coarse grid over q only up to this snap density (a refit that is only used
        when it finds smoother data than a first fit).

    Returns
    -------
    FitResult; ``model.var_scale`` multiplies ``base_var`` to give the white variance.
    """
    evals = 0
    all_dt = np.concatenate([np.diff(t) for t, _, _ in pieces])
    interval = float(np.median(all_dt))
    fin = np.concatenate([b[np.isfinite(b)] for _, _, b in pieces])
    med_base = float(np.median(fin))
    prepared = []
    for t, Y, b in pieces:
        prepared.append((t, Y - np.nanmean(Y, axis=0), b, float(t[-1] - t[0])))

    def unpack(theta):
        a, b = float(np.clip(theta[1], -9.0, 9.0)), float(np.clip(theta[2], -9.0, 9.0))
        if cap is None:
            white = float(np.exp(theta[1]))
            wander = white * (float(np.exp(b)) if wander_ratio_max is None else wander_ratio_max * _sigmoid(b))
            return NoiseModel(float(np.exp(theta[0])), white, wander, wander_tau_s)
        g, f = cap * _sigmoid(a), _sigmoid(b)
        return NoiseModel(float(np.exp(theta[0])), g * f, g * (1.0 - f) * med_base, wander_tau_s)

    def negll(theta):
        nonlocal evals
        evals += 1
        if np.any(np.abs(theta) > 90):
            return 1e300
        m0 = unpack(theta)
        white = m0.var_scale * med_base
        total = 0.0
        for t, Y, b, span in prepared:
            m = clamp_snap(m0, white, interval, span)
            design = make_design(t, knot_spacing(m, white, interval, span))
            sysm = build_system(design, Y, b * m.var_scale, m)  # the axes share one factor
            try:
                U = factor(sysm)
            except np.linalg.LinAlgError:
                return 1e300
            total += log_likelihood(sysm, U, solve_mean(sysm, U))
        return -total if np.isfinite(total) else 1e300

    if cap is None:
        base = [np.log(max(start_var, 1e-8)), 0.0]
    else:
        f0 = float(np.clip(start_var / (cap * med_base), 0.05, 0.95))
        base = [np.log(0.9 / 0.1), np.log(f0 / (1.0 - f0))]
    # Coarse grid over q first (the likelihood is flat far from its maximum), then refine all.
    grid = np.arange(-16.0, 10.01, 1.0) * np.log(10.0)
    if q_max is not None:
        grid = grid[grid <= max(np.log(q_max), grid[0])]
    scores = [negll(np.array([g] + base)) for g in grid]
    theta0 = np.array([grid[int(np.argmin(scores))]] + base)
    step = np.array([1.0, 1.0, 1.5])
    simplex = np.vstack([theta0] + [theta0 + np.eye(3)[i] * step[i] for i in range(3)])
    r = minimize(negll, theta0, method="Nelder-Mead",
                 options={"xatol": 2e-2, "fatol": 1e-2, "maxfev": 250, "initial_simplex": simplex})
    model = unpack(r.x)
    at_cap = cap is not None and _sigmoid(float(r.x[1])) > 0.97
    return FitResult(model, -float(r.fun), evals, at_cap)


def choose_turn_prior(pieces: list[tuple[FloatArray, FloatArray, FloatArray]], model: NoiseModel,
                      factors: tuple[float, ...] = TURN_Q_FACTORS,
                      slow_mps: float = TURN_SLOW_MPS, min_gain: float = TURN_MIN_GAIN) -> tuple[float | None, float]:
    """Whether the plan smoother should use the turn-aware prior (``apply_turn_prior``), and with
    what snap density, by maximum marginal likelihood on the fit pieces of ``fit_noise`` (same
    ``pieces``; ``model`` the fitted constant-jerk model).

    On every piece the constant-jerk smoother gives a first estimate and its plan turn rate
    (``plan_turn_rate``); the summed log likelihood of the turn-aware prior at that turn rate with
    snap density ``f q`` for each f in ``factors`` is compared with the constant-jerk model's.
    Steady arcs cost the turn-aware prior nothing, so on a path made of them it wins at a much
    smaller q (a longer smoothing window along the arc, without flattening it); where the turn
    rate changes quickly it can lose. Returns (factor, or None to keep the constant-jerk prior
    when the best gain is below ``min_gain``; the best gain in log likelihood over the
    constant-jerk model)."""
    all_dt = np.concatenate([np.diff(t) for t, _, _ in pieces])
    interval = float(np.median(all_dt))
    med_base = float(np.median(np.concatenate([b[np.isfinite(b)] for _, _, b in pieces])))
    white = model.var_scale * med_base
    base_ll = 0.0
    turned = np.zeros(len(factors))
    for t, Y, b in pieces:
        Y = Y - np.nanmean(Y, axis=0)
        span = float(t[-1] - t[0])
        m = clamp_snap(model, white, interval, span)
        design = make_design(t, knot_spacing(m, white, interval, span))
        var = b * m.var_scale
        sysm = build_system(design, Y, var, m)
        U = factor(sysm)
        x = solve_mean(sysm, U)
        base_ll += log_likelihood(sysm, U, x)
        turn = plan_turn_rate(x, slow_mps * design.h)
        for i, f in enumerate(factors):
            st = apply_turn_prior(build_system(design, Y, var, replace(m, snap_psd=m.snap_psd * f)), turn, overwrite=True)
            try:
                Ut = factor(st)
            except np.linalg.LinAlgError:
                turned[i] = -np.inf
                continue
            turned[i] += log_likelihood(st, Ut, solve_mean(st, Ut))
    best = int(np.argmax(turned))
    gain = float(turned[best] - base_ll)
    return (float(factors[best]) if gain >= min_gain else None), gain


# --------------------------------------------------------------------------------------------
# Smoothing one stretch (all three axes), with robust re-weighting
# --------------------------------------------------------------------------------------------


@dataclass
class AxisGroup:
    """Smoothed axes (east+north, or up) on their own knot grid.

    Knots sit at ``t0 + k h``; ``states`` (K, A, 4) is the estimate of (p, v, a, j) per axis in
    SI units. ``system``/``factor`` (shared by the group's axes), ``white_var`` (n,) and
    ``model`` are kept for the sampling-error draws.
    """

    axes: tuple[int, ...]
    t0: float
    h: float
    states: FloatArray
    system: AxisSystem
    factor: FloatArray
    white_var: FloatArray
    model: NoiseModel
    #: Up only: the east/north fixes smoothed by this group's smoother ride along as extra
    #: columns (states[:, 1:3]); ``grade`` (K, 2) is the local grade plane at the knots.
    #: See ``grade_plane_correction``.
    grade: FloatArray | None = None

    _coef: FloatArray | None = None
    resmoothed: FloatArray | None = None  # (K, A, 4) SI knot states of S(S y), see resmooth_path
    turn_refit: TurnRefit | None = None  # a turn-aware estimate: its draws repeat the procedure
    _coef2: FloatArray | None = None

    def at(self, t: FloatArray) -> FloatArray:
        """(n, A, 4) SI states at times ``t`` (interval coefficients computed once)."""
        if self._coef is None:
            self._coef = interval_coefficients(self.states, self.h)
        return evaluate_intervals(self._coef, self.t0, self.h, t)

    def draws(self, n_samples: int, rng: np.random.Generator) -> FloatArray:
        """Estimate plus sampling error of the knot states, (n_samples, K, A, 4), SI units."""
        conv = self.h ** -np.arange(N_PATH)
        na = len(self.axes)
        if self.turn_refit is not None:
            dev = turn_refit_draws(self.system, self.factor, self.turn_refit, self.white_var, self.model,
                                   n_samples, rng)
        else:
            dev = noise_draws(self.system, self.factor, self.white_var, self.model, n_samples, rng, na)
        out = np.repeat(self.states[None], n_samples, axis=0)
        out[:, :, :na] += np.swapaxes(dev[:, :, :N_PATH, :], 2, 3) * conv
        return out

    def grade_at(self, t: FloatArray) -> FloatArray:
        """(n, 2) local grade plane (dz/de, dz/dn) at times ``t``, linear between knots."""
        tk = self.t0 + self.h * np.arange(len(self.grade))
        return np.column_stack([np.interp(t, tk, self.grade[:, k]) for k in range(2)])


@dataclass
class Smoothed:
    """Estimate of one stretch of fixes: east/north on one knot grid, up on another.

    ``groups`` holds the smoothed axis groups (up is absent for a log without heights: it then
    reads as 0 with zero derivatives). ``weight_h``/``weight_v`` are the final robust weights of
    the fixes (0 = rejected).
    """

    groups: list[AxisGroup]
    weight_h: FloatArray
    weight_v: FloatArray

    def at(self, t: FloatArray) -> FloatArray:
        """Estimated (p, v, a, j) per axis at times ``t``, (n, 3, 4), SI units."""
        out = np.zeros((len(t), 3, N_PATH))
        carried = None
        for g in self.groups:
            st = g.at(t)
            out[:, list(g.axes), :] = st[:, : len(g.axes)]
            if g.axes == (2,) and st.shape[1] == 3:
                carried = st[:, 1:3]
        return self._on_grade_plane(out, carried, t)

    def at_twice(self, t: FloatArray) -> FloatArray | None:
        """(n, 3, 4) (p, v, a, j) of the smoother applied to its own estimate
        (``resmooth_path``) at times ``t``, or None when it was not computed."""
        if not self.groups or any(g.resmoothed is None for g in self.groups):
            return None
        out = np.zeros((len(t), 3, N_PATH))
        carried = None
        for g in self.groups:
            if g._coef2 is None:
                g._coef2 = interval_coefficients(g.resmoothed, g.h)
            st = evaluate_intervals(g._coef2, g.t0, g.h, t)
            out[:, list(g.axes)] = st[:, : len(g.axes)]
            if g.axes == (2,) and st.shape[1] == 3:
                carried = st[:, 1:3]
        return self._on_grade_plane(out, carried, t)

    def draw(self, n_samples: int, rng: np.random.Generator) -> list[FloatArray]:
        """Knot states of ``n_samples`` repeated-noise estimates for every group (see
        ``samples_at``)."""
        return [g.draws(n_samples, rng) for g in self.groups]

    def samples_at(self, drawn: list[FloatArray], t: FloatArray) -> FloatArray:
        """(p, v, a, j) at times ``t`` from ``draw`` output, (n_samples, n, 3, 4)."""
        ns = drawn[0].shape[0] if drawn else 0
        out = np.zeros((ns, len(t), 3, N_PATH))
        carried = None
        for g, d in zip(self.groups, drawn):
            st = interpolate_states(d, g.t0, g.h, t)
            out[:, :, list(g.axes), :] = st[:, :, : len(g.axes)]
            if g.axes == (2,) and st.shape[2] == 3:
                carried = st[:, :, 1:3]
        return self._on_grade_plane(out, carried, t)

    def _on_grade_plane(self, out: FloatArray, carried: FloatArray | None, t: FloatArray) -> FloatArray:
        if carried is not None and self.groups[0].grade is not None:
            grade_plane_correction(out, carried, self.groups[0].grade_at(t))
        return out


def grade_plane_correction(out: FloatArray, en_v: FloatArray, grade: FloatArray) -> None:
    """Move the smoothed height along the local grade plane to the horizontal estimate (in place).

    ``out`` (..., n, 3, 4): (p, v, a, j) with east/north from the horizontal smoother S_h and up
    from the vertical smoother S_v; ``en_v`` (..., n, 2, 4): east/north fixes passed through S_v;
    ``grade`` (n, 2): local grade plane g. Sets

        up += g . (S_h en - S_v en)          (for p, v, a and j alike; g' terms left out)

    S_v z estimates the height where S_v puts the mover, S_v en; moving from there to the
    horizontal estimate S_h en along the local grade plane changes the height by the term above.
    For a path on a plane z = c + g . en the result is c + g . S_h en + S_v e_z exactly (S_v is
    linear and keeps constants): the path stays in its plane whatever the two strengths, so
    height noise is smoothed with the vertical strength and in-plane bends are not twisted by
    the two strengths bending them by different amounts.
    """
    d = out[..., :2, :] - en_v
    out[..., 2, :] += grade[:, 0, None] * d[..., 0, :] + grade[:, 1, None] * d[..., 1, :]


def _smooth_group(Y: FloatArray, var: FloatArray, w: FloatArray, m: NoiseModel, design: Design,
                  vel: FloatArray | None = None, vel_var: FloatArray | None = None, w_vel: FloatArray | None = None):
    v = np.where(w > 0, var / np.maximum(w, 1e-12), np.inf)
    vv = None if vel is None else np.where(w_vel > 0, vel_var / np.maximum(w_vel, 1e-12), np.inf)
    sysm = build_system(design, Y, v, m, vel=vel, vel_var=vv)
    U = factor(sysm)
    x = solve_mean(sysm, U)
    return sysm, U, x, fitted(sysm, x)


def smooth_stretch(
    t: FloatArray,
    enu_m: FloatArray,
    base_var_h: FloatArray,
    base_var_v: FloatArray,
    model_h: NoiseModel,
    model_v: NoiseModel | None,
    screened_h: NDArray[np.bool_] | None = None,
    screened_v: NDArray[np.bool_] | None = None,
    robust_iterations: int = 3,
    huber_c: float = 2.5,
    reject_sigma: float = 6.0,
    weight_tol: float = 0.05,
    weight_share: float = 1e-4,
    twice: bool = False,
    grade_window_scales: float | None = 4.0,
    vel_en: FloatArray | None = None,
    vel_var: FloatArray | None = None,
    turn_q_factor: float | None = None,
    turn_slow_mps: float = TURN_SLOW_MPS,
) -> Smoothed:
    """Smooth one stretch of fixes (strictly increasing ``t``) on all three axes.

    ``vel_en`` (n, 2): the receiver's horizontal velocity (Doppler; east, north in m/s, NaN
    where none) with variances ``vel_var`` (n,), (m/s)^2, measured by the horizontal smoother
    beside the positions and re-weighted like them (Huber on the 2D standardised residual). The
    velocity does not carry the slow wander of the positions, so it holds the shape of tight
    turns that position fixes alone leave to the wander. The local grade plane is then fitted on
    east/north/up passed alike through the horizontal smoother on the positions alone (one more
    solve: the smoother that also measures velocity has no heights' velocity to carry).

    ``model_v`` None means no heights. ``screened_*`` (from ``screen_outliers``) start with
    weight 0. Fixes are then re-weighted up to ``robust_iterations`` times with the Huber weight
    min(1, c/d) of the standardised residual d (2D for east/north, 1D for up) and weight 0 beyond
    ``reject_sigma``; a fix rejected horizontally is rejected in height too (multipath that
    throws a fix sideways spoils its height as well). The iteration stops early once no more than
    ``weight_share`` of the fixes (none on a log under 10,000 fixes) move by more than
    ``weight_tol`` (iteratively re-weighted least squares has converged; a further pass changes
    the path by a small fraction of the noise; ``_weights_moved``).

    ``grade_window_scales`` (None = off): heights follow the local grade plane through the
    horizontal estimate (``grade_plane_correction``); the plane is fitted over a Gaussian window
    of this many vertical smoothing scales (``local_grade``).
    """
    n = len(t)
    interval = float(np.median(np.diff(t))) if n > 1 else 1.0
    span = float(t[-1] - t[0])
    offset = np.array([np.nanmean(enu_m[:, k]) if np.isfinite(enu_m[:, k]).any() else 0.0 for k in range(3)])
    Y = enu_m - offset
    specs = [((0, 1), model_h, base_var_h)]
    plane = model_v is not None and grade_window_scales is not None
    if model_v is not None:
        specs.append(((2,), model_v, base_var_v))
    # data columns per group: with the grade plane, up carries east/north through the vertical
    # smoother and east/north carry up through the horizontal one (for the local grade)
    cols = [[0, 1, 2], [2, 0, 1]] if plane else [[0, 1], [2]]
    has_vel = vel_en is not None and bool(np.isfinite(vel_en).all(axis=1).any())
    if has_vel and plane:
        cols[0] = [0, 1]
    w_vel = np.isfinite(vel_en).all(axis=1).astype(float) if has_vel else None
    Yc = Y
    if plane:  # a missing height must not drop a fix from the horizontal group: interpolate it
        z_ok = np.isfinite(Y[:, 2])
        Yc = Y.copy()
        Yc[:, 2] = np.interp(t, t[z_ok], Y[z_ok, 2]) if z_ok.any() else 0.0
    prepared = []
    for axes, m, bvar in specs:
        var = bvar * m.var_scale
        white = float(np.median(var[np.isfinite(var)]))
        m = clamp_snap(m, white, interval, span)
        prepared.append((axes, m, var, make_design(t, knot_spacing(m, white, interval, span))))
    w_h = np.ones(n) if screened_h is None else (~screened_h).astype(float)
    w_v = np.zeros(n)
    if model_v is not None:
        w_v = np.ones(n) if screened_v is None else (~screened_v).astype(float)
        w_v = np.where(w_h == 0, 0.0, w_v)
    results: list = [None] * len(prepared)
    redo = [True] * len(prepared)
    for it in range(robust_iterations + 1):
        for g, (axes, m, var, design) in enumerate(prepared):
            if redo[g]:
                w = w_h if axes[0] < 2 else w_v
                extra = (vel_en, vel_var, w_vel) if has_vel and axes[0] < 2 else ()
                results[g] = _smooth_group(Y[:, list(axes)], var, w, m, design, *extra)
                if g == 0:
                    weights_h = (w, w_vel)  # the weights of the plan estimate (turn-aware pass)
        if it == robust_iterations:
            break
        res_h = Y[:, :2] - results[0][3][:, :2]
        dh = np.sqrt(np.sum(res_h**2, axis=1) / (2.0 * prepared[0][2]))
        new_h = _huber(np.where(np.isfinite(dh), dh, 0.0), huber_c, reject_sigma)
        redo = [_weights_moved(new_h, w_h, weight_tol, weight_share)]
        w_h = new_h
        if has_vel:  # the velocities' own robust weights (2D standardised residual)
            sysm, _, x, _ = results[0]
            rv = vel_en - fitted(sysm, x, velocity=True)
            dvel = np.sqrt(np.sum(rv**2, axis=1) / (2.0 * vel_var))
            fin = np.isfinite(dvel)
            new_vel = np.where(fin, _huber(np.where(fin, dvel, 0.0), huber_c, reject_sigma), 0.0)
            redo[0] = redo[0] or _weights_moved(new_vel, w_vel, weight_tol, weight_share)
            w_vel = new_vel
        if model_v is not None:
            dv = np.abs(Y[:, 2] - results[1][3][:, 0]) / np.sqrt(prepared[1][2])
            new_v = _huber(np.where(np.isfinite(dv), dv, 0.0), huber_c, reject_sigma)
            new_v = np.where(w_h == 0, 0.0, new_v)
            redo.append(_weights_moved(new_v, w_v, weight_tol, weight_share))
            w_v = new_v
        if not any(redo):
            break
    refits: list[TurnRefit | None] = [None] * len(prepared)
    if turn_q_factor is not None:  # turn-aware plan prior (``choose_turn_prior``)
        axes, m, var, design = prepared[0]
        sys1, U1, x1, _ = results[0]
        slow = turn_slow_mps * design.h
        # the smaller snap density is clamped like the fitted one (no window beyond the stretch)
        m = clamp_snap(replace(m, snap_psd=m.snap_psd * turn_q_factor), float(np.median(var[np.isfinite(var)])),
                       interval, span)
        turn = plan_turn_rate(x1, slow)
        # the first pass's band (same fixes, weights and data terms: its draws share their
        # right-hand sides) with the turn-aware prior at the new snap density, in place
        sysm = apply_turn_prior(sys1, turn, overwrite=True, model=m)
        del sys1
        try:
            U = factor(sysm)
        except np.linalg.LinAlgError:  # numerically not positive definite: keep the constant-jerk estimate
            U = None
            w, wv = weights_h  # the first pass again (its band was changed in place)
            extra = (vel_en, vel_var, wv) if has_vel else ()
            results[0] = _smooth_group(Y[:, list(axes)], var, w, prepared[0][1], design, *extra)
        if U is not None:
            x = solve_mean(sysm, U)
            results[0] = (sysm, U, x, fitted(sysm, x))
            prepared[0] = (axes, m, var, design)
            # the first pass's factor is kept in single precision: only the draws' turn rates use it
            refits[0] = TurnRefit(U1.astype(np.float32), x1, x, turn, slow, np.sqrt(vel_var) if has_vel else None)
        del U1, sysm, U  # the first pass's system and factor are freed (results hold what is kept)
    groups = []
    for g, (axes, m, var, design) in enumerate(prepared):
        if len(cols[g]) > len(axes):  # carried columns: one more right-hand side, final weights
            sysm, U, x, f = results[g]
            more = solve_columns(sysm, U, Yc[:, cols[g][len(axes):]])
            results[g] = (sysm, U, np.concatenate((x, more), axis=2), f)
    for (axes, m, var, design), (sysm, U, x, _), c, refit in zip(prepared, results, cols, refits):
        conv = design.h ** -np.arange(N_PATH)
        states = np.swapaxes(x[:, :N_PATH, :], 1, 2) * conv  # (K, A, 4)
        states[:, :, 0] += offset[c]
        g = AxisGroup(axes, design.t0, design.h, states, sysm, U, var, m, turn_refit=refit)
        groups.append(g)
    if plane:
        gh, gv = groups
        wv = gv.white_var[np.isfinite(gv.white_var)]
        scale = gv.model.smoothing_scale_s(float(np.median(wv)), interval)
        if has_vel:  # up, east, north alike through the horizontal smoother on positions only
            axes, m, var, design = prepared[0]
            alike = None
            for stiffer in (1.0, 16.0, 256.0):
                # without the velocity rows the system is less well conditioned than the plan
                # estimate's: where it is numerically singular, a larger snap density (a
                # shorter scale, the grade still averaged over grade_window_scales x scale)
                try:
                    sysm, U, x, _ = _smooth_group(Yc[:, [2, 0, 1]], var, w_h, replace(m, snap_psd=m.snap_psd * stiffer), design)
                except np.linalg.LinAlgError:
                    continue
                alike = np.swapaxes(x[:, :N_PATH, :], 1, 2) * (design.h ** -np.arange(N_PATH))
                break
        else:
            alike = gh.states[:, [2, 0, 1]]
        # no grade plane where even that fails: heights then come from the vertical smoother alone
        gh.grade = None if alike is None else local_grade(alike, grade_window_scales * scale / gh.h)
    if twice:
        for g, (sysm, U, x, _) in zip(groups, results):
            conv = g.h ** -np.arange(N_PATH)
            g.resmoothed = np.swapaxes(resmooth_path(sysm, U, x)[:, :N_PATH, :], 1, 2) * conv
    return Smoothed(groups, w_h, w_v)


def local_grade(states: FloatArray, sigma_knots: float, ridge: float = 1e-3, planar_weight: bool = True) -> FloatArray:
    """Local grade plane (dz/de, dz/dn) at every knot, (K, 2), from (K, 3, 4) states of
    (up, east, north) smoothed alike.

    Weighted least squares of the vertical velocity on the horizontal velocity, v_u = g . v_h,
    over a Gaussian window of ``sigma_knots`` knots (no intercept needed: velocities). Along a
    straight only the along-track grade is seen; a ``ridge`` (relative to the window's mean
    squared horizontal speed) sets the unseen cross grade to 0 -- harmless there, since the
    correction it scales (the two smoothers' different corner cutting) vanishes on a straight.

    With ``planar_weight`` the grade is multiplied by a trust clip(2 R^2 - 1, 0, 1), R^2 the
    uncentred share of the window's vertical motion the plane explains: the plane must explain
    more than half of it to be used at all (a judgement). Measured: R^2 0.98-0.99 on a tilted
    loop, mostly above 0.95 on a graded road; 0.07-0.24 on switchbacks (legs climbing both ways
    are no plane) and below 0.17 on a helix seen over most of a turn. Where the vertical smoother is much stronger than
    the horizontal bends, (S_h - S_v) en is as large as the bend (tens of metres on an RTK helix)
    and a grade that is not really there would move the height by metres; measured with
    benchmarks/bench_accuracy.py, seed 2024: without the trust RTK helix tau median error
    1.84 % -> 2.21 %; with R^2 itself as the weight phone switchbacks without stated accuracy
    claimed turns sharper than 6 m at 95 % on 5.5 % of turn stations (tests/
    test_geometry_switchbacks.py asks <= 5 %).
    """
    from scipy.ndimage import gaussian_filter1d

    vz, ve, vn = states[:, 0, 1], states[:, 1, 1], states[:, 2, 1]

    def win(x):
        return gaussian_filter1d(x, max(sigma_knots, 0.5), mode="constant")

    see, sen, snn = win(ve * ve), win(ve * vn), win(vn * vn)
    sez, snz, szz = win(ve * vz), win(vn * vz), win(vz * vz)
    lam = ridge * 0.5 * (see + snn) + 1e-300
    a, b, d = see + lam, sen, snn + lam
    det = a * d - b * b
    ge, gn = (d * sez - b * snz) / det, (a * snz - b * sez) / det
    if not planar_weight:
        return np.column_stack([ge, gn])
    # share of the window's vertical motion that the plane explains (uncentred R^2) -> trust
    r2 = (ge * sez + gn * snz) / np.maximum(szz, 1e-300)
    trust = np.clip(2.0 * r2 - 1.0, 0.0, 1.0)
    return np.column_stack([ge * trust, gn * trust])


def _weights_moved(new: FloatArray, old: FloatArray, tol: float, share: float) -> bool:
    """True when more than ``share`` of the fixes (and at least one) changed weight by more than
    ``tol``: the re-weighting has not converged. A handful of fixes in a million moving by a
    little more than ``tol`` shifts the path only next to them, by millimetres; measured on a
    1M-fix dual-frequency drive: 4 fixes moved by at most 0.059 in the second pass, and the third
    solve of both axis groups cost about a second."""
    moved = int(np.count_nonzero(np.abs(new - old) > tol))
    return moved > share * len(new)


def _huber(d: FloatArray, c: float, reject: float) -> FloatArray:
    w = np.minimum(1.0, c / np.maximum(d, 1e-12))
    return np.where(d > reject, 0.0, w)
