"""The vectorised kernels under ``trackframe profile``: per-interval Legendre sums, fitted values,
Hermite evaluation of the knot states, the wander's AR(1) recursion, outlier screening and the
CSV number formatter, each checked against an outside reference (numpy's Legendre module, scipy's
lfilter, closed-form polynomials, Python's own float formatting)."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.polynomial import legendre
from scipy.signal import lfilter

from survey import smooth as S
from survey.profile_export import _fixed_bytes


def _design_with_gap() -> S.Design:
    rng = np.random.default_rng(7)
    t = np.sort(np.r_[rng.uniform(0.0, 40.0, 700), rng.uniform(65.0, 90.0, 400)])  # 25 s without fixes
    return S.make_design(t, 0.37)


def test_legendre_columns_match_numpy_legvander():
    # reference: numpy.polynomial.legendre.legvander (P_0 .. P_14 at x)
    x = np.linspace(-1.0, 1.0, 101)
    assert np.allclose(S._legendre_columns(x, 15).T, legendre.legvander(x, 14), rtol=0, atol=1e-13)


@pytest.mark.parametrize("columns", [None, 3])
def test_interval_sums_equal_direct_sums_including_empty_intervals(columns, monkeypatch):
    # reference: sum over each interval's fixes of w_i P_j(x_i), P_j from numpy's legvander
    monkeypatch.setattr(S, "_SUM_BLOCK", 97)  # many blocks: block edges must not split a sum
    design = _design_with_gap()
    rng = np.random.default_rng(1)
    n, K1 = len(design.x), design.n_knots - 1
    w = rng.normal(size=n) if columns is None else rng.normal(size=(n, columns))
    V = legendre.legvander(design.x, 14)  # (n, 15)
    w2 = w.reshape(n, -1)
    want = np.zeros((K1, w2.shape[1], 15))
    for c in range(w2.shape[1]):
        for j in range(15):
            want[:, c, j] = np.bincount(design.interval, weights=w2[:, c] * V[:, j], minlength=K1)
    got = S._interval_sums(design, w, 15)
    assert got.shape == ((K1, 15) if columns is None else (K1, columns, 15))
    assert np.allclose(got.reshape(want.shape), want, rtol=1e-12, atol=1e-12)
    empty = np.setdiff1d(np.arange(K1), design.interval)
    assert len(empty) > 0 and not np.any(got[empty])


def _cubic_knot_states(t0: float, h: float, K: int, coef: np.ndarray) -> np.ndarray:
    """(K, A, 4) SI (p, v, a, j) of the cubics p_a(t) = sum_k coef[a, k] t^k at the knots."""
    tk = t0 + h * np.arange(K)
    out = np.zeros((K, len(coef), 4))
    for a, c in enumerate(coef):
        p = np.polynomial.Polynomial(c)
        for d in range(4):
            out[:, a, d] = p.deriv(d)(tk) if d else p(tk)
    return out


def test_hermite_evaluation_reproduces_a_cubic_and_its_derivatives():
    # closed form: a degree-7 Hermite piece matching (p, v, a, j) at both knots is exact for a cubic
    coef = np.array([[3.0, -1.5, 0.25, 0.02], [-2.0, 0.7, -0.1, 0.005], [1.0, 0.0, 0.3, -0.01]])
    t0, h, K = 2.0, 0.8, 30
    states = _cubic_knot_states(t0, h, K, coef)
    t = np.linspace(t0, t0 + h * (K - 1), 997)
    got = S.interpolate_states(states, t0, h, t, chunk=300)  # several chunks
    for a, c in enumerate(coef):
        p = np.polynomial.Polynomial(c)
        for d in range(4):
            want = p.deriv(d)(t) if d else p(t)
            # rounding of the monomial form grows with the derivative order (~1e-9 of the jerk
            # here, the same before the Horner rewrite); a wrong coefficient is off by O(1)
            assert np.allclose(got[:, a, d], want, rtol=0, atol=1e-8 * np.abs(want).max()), (a, d)
    batch = S.interpolate_states(np.stack([states, 2 * states]), t0, h, t)  # leading draw axis
    assert np.allclose(batch[1], 2 * got, rtol=1e-12, atol=1e-12)


def test_fitted_values_are_the_path_at_the_fixes():
    # closed form: with no wander state the model position at a fix is the cubic itself
    t = np.sort(np.random.default_rng(3).uniform(0.0, 20.0, 500))
    design = S.make_design(t, 0.9)
    coef = np.array([[1.0, 0.5, -0.05, 0.003], [0.0, -0.2, 0.04, -0.001]])
    states = _cubic_knot_states(design.t0, design.h, design.n_knots, coef)  # (K, A, 4) SI
    x = np.swapaxes(states, 1, 2) * design.h ** np.arange(4)[None, :, None]  # per-interval units (K, 4, A)
    system = S.build_system(design, np.zeros((len(t), 2)), np.ones(len(t)), S.NoiseModel(1.0, 1.0))
    want = np.column_stack([np.polynomial.Polynomial(c)(t) for c in coef])
    assert np.allclose(S.fitted(system, x), want, rtol=1e-10, atol=1e-10)


@pytest.mark.parametrize("phi", [0.0, 1e-9, 0.5, 0.993, 0.99999])
def test_wander_recursion_matches_scipy_lfilter(phi):
    # reference: scipy.signal.lfilter([1], [1, -phi]) is b_k = phi b_(k-1) + z_k
    z = np.random.default_rng(2).normal(size=(5000, 3))
    want = lfilter([1.0], [1.0, -phi], z, axis=0)
    assert np.allclose(S._ar1(z, phi), want, rtol=0, atol=1e-11 * np.abs(want).max())


def test_screening_flags_a_jump_and_nothing_on_a_clean_line():
    # a 30 m multipath jump among 0.3 m fixes (common practice: 6 robust sigmas)
    rng = np.random.default_rng(4)
    t = np.arange(2000) * 0.1
    Y = np.column_stack([10.0 * t, 0.2 * t]) + rng.normal(0.0, 0.3, (2000, 2))
    assert not S.screen_outliers(t, Y).any()
    Y[700] += [30.0, -20.0]
    Y[1500, 1] = np.nan
    flagged = S.screen_outliers(t, Y)
    assert np.flatnonzero(flagged).tolist() == [700]


def test_fixed_point_cells_equal_python_formatting():
    # reference: Python's correctly rounded '%.*f' (values kept away from rounding ties)
    rng = np.random.default_rng(5)
    v = rng.normal(size=4000) * 10.0 ** rng.integers(-6, 9, 4000)
    for decimals in (0, 3, 4, 5, 9, 10):  # every width the profile CSV uses, odd and even
        scaled = np.abs(v) * 10.0**decimals
        keep = (np.abs(scaled - np.floor(scaled) - 0.5) > 1e-3) & (scaled >= 1.0) & (scaled < 2**52)
        cells = _fixed_bytes(v[keep], decimals)
        got = [bytes(row[row != 0]).decode() for row in cells]
        assert got == [f"{x:.{decimals}f}" for x in v[keep]]
    empty = _fixed_bytes(np.array([np.nan, np.inf, -np.inf]), 4)
    assert not empty.any()


def test_fixed_point_cells_of_huge_scaled_values_equal_python_integer_formatting():
    # reference: Python's int formatting of round(|v| 10^d), point put d digits from the right
    # (above 2^52 the scaled value is an int64, not a float)
    rng = np.random.default_rng(6)
    v = rng.choice([-1.0, 1.0], 500) * rng.uniform(4.6e5, 8.9e7, 500)
    cells = _fixed_bytes(v, 10)
    got = [bytes(row[row != 0]).decode() for row in cells]
    want = []
    for x in v:
        digits = str(int(np.rint(abs(x) * 1e10)))
        want.append(("-" if x < 0 else "") + digits[:-10] + "." + digits[-10:])
    assert got == want


def _dense_precision(t, h, w, q, wander_var=0.0, tau_s=60.0, wv=None, pos_sd=1e4):
    """Posterior precision of the knot states, assembled densely from its definition: measurement
    rows from scipy's BPoly.from_derivatives (the degree-7 Hermite piece matching p, p', p'',
    p''' at both knots, in knot-interval units), the wander linear between knots, velocity rows
    the piece's derivative; the constant-jerk prior from its closed-form discretisation
    F = exp(A), Q_ij = q / ((3-i)! (3-j)! (7-i-j)) per unit interval; the AR(1) wander
    exp(-h/tau) with innovation variance var (1 - exp(-2h/tau))."""
    from math import factorial

    from scipy.interpolate import BPoly

    d = 4 + (wander_var > 0)
    K = int(np.ceil((t[-1] - t[0]) / h - 1e-9)) + 1
    u = (t - t[0]) / h
    k = np.clip(np.floor(u).astype(int), 0, K - 2)
    sig = u - k
    basis = []
    for b in range(8):  # unit derivative vectors at the left and right knots
        yi = np.zeros(8)
        yi[b] = 1.0
        basis.append(BPoly.from_derivatives([0.0, 1.0], [yi[:4], yi[4:]]))
    L = np.zeros((K * d, K * d))
    for i in range(len(t)):
        for rows, weight, position in ((lambda p: p(sig[i]), w[i], True),
                                       (lambda p: p.derivative()(sig[i]), None if wv is None else wv[i], False)):
            if weight is None:
                continue
            r = np.zeros(2 * d)
            r[:4] = [rows(p) for p in basis[:4]]
            r[d : d + 4] = [rows(p) for p in basis[4:]]
            if d == 5 and position:  # the wander enters the position, not the velocity
                r[4], r[9] = 1.0 - sig[i], sig[i]
            s = slice(k[i] * d, k[i] * d + 2 * d)
            L[s, s] += weight * np.outer(r, r)
    F = np.eye(d)
    F[:4, :4] = [[1.0 / factorial(j - i) if j >= i else 0.0 for j in range(4)] for i in range(4)]
    Q = np.zeros((d, d))
    Q[:4, :4] = [[q * h**7 / (factorial(3 - i) * factorial(3 - j) * (7 - i - j)) for j in range(4)] for i in range(4)]
    if d == 5:
        F[4, 4] = np.exp(-h / tau_s)
        Q[4, 4] = wander_var * (1.0 - np.exp(-2.0 * h / tau_s))
    Qi = np.linalg.inv(Q)
    G = np.block([[F.T @ Qi @ F, -F.T @ Qi], [-Qi @ F, Qi]])
    for kk in range(K - 1):
        s = slice(kk * d, kk * d + 2 * d)
        L[s, s] += G
    L[np.arange(d), np.arange(d)] += [1.0 / pos_sd**2, 1e-6, 1e-6, 1e-6] + ([1.0 / wander_var] if d == 5 else [])
    return L


@pytest.mark.parametrize("wander, velocity", [(0.0, False), (2.0, False), (2.0, True)])
def test_banded_precision_equals_the_dense_assembly_from_its_definition(wander, velocity):
    # reference: _dense_precision (scipy BPoly Hermite rows, closed-form prior blocks), read
    # off in LAPACK's upper band storage ab[u + i - j, j] = Lambda[i, j]
    rng = np.random.default_rng(3)
    t = np.sort(np.r_[rng.uniform(0.0, 9.0, 40), rng.uniform(12.0, 20.0, 30)])  # an empty stretch
    h = 0.7
    var = rng.uniform(0.5, 2.0, t.size)
    vel = rng.normal(size=(t.size, 2)) if velocity else None
    vel_var = rng.uniform(0.01, 0.05, t.size) if velocity else None
    design = S.make_design(t, h)
    system = S.build_system(design, rng.normal(size=(t.size, 2)), var, S.NoiseModel(0.3, 1.0, wander, 60.0),
                            vel=vel, vel_var=vel_var)
    dense = _dense_precision(t, h, 1.0 / var, 0.3, wander, 60.0, None if vel_var is None else 1.0 / (vel_var * h * h))
    u = system.ab.shape[0] - 1
    n = dense.shape[0]
    want = np.zeros_like(system.ab)
    for off in range(u + 1):  # super-diagonal 'off' of the dense matrix
        want[u - off, off:] = np.diagonal(dense, off)
    scale = np.abs(want).max()
    assert system.ab.shape == (u + 1, n)
    assert np.allclose(system.ab, want, rtol=1e-9, atol=1e-12 * scale)


def test_screening_puts_a_jump_at_the_last_fixes_on_that_fix_not_its_neighbours():
    # a 30 m jump at the second-to-last fix among 0.3 m fixes: the end fixes have no window of
    # their own (survey.jump_ends); the flagged fix is the one made to jump (by construction)
    rng = np.random.default_rng(5)
    t = np.arange(600) * 0.1
    Y = np.column_stack([22.0 * t, 0.5 * t]) + rng.normal(0.0, 0.3, (600, 2))
    Y[-2] += [30.0, 10.0]
    assert np.flatnonzero(S.screen_outliers(t, Y)).tolist() == [598]
