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
