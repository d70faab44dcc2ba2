"""Min/max pyramids and column decimation of the viewer (tui.envelope).

Reference values come from numpy's own nanmin/nanmax over the same station slices (an
independent, well-kept implementation); the cost checks count level-0 lookups.
"""

from __future__ import annotations

import numpy as np
import pytest

from tui.envelope import Pyramid, PrefixCount, column_bounds, column_of


def brute(x, a, b, fn):
    out = []
    for i, j in zip(a, b):
        s = x[i:j]
        out.append(fn(s) if np.isfinite(s).any() else np.nan)
    return np.array(out)


@pytest.fixture(scope="module")
def values():
    rng = np.random.default_rng(42)
    x = rng.normal(size=100_003)
    x[rng.random(len(x)) < 0.2] = np.nan  # undefined stations, e.g. torsion on straights
    x[5000:9000] = np.nan  # a long undefined stretch
    return x


@pytest.mark.parametrize("i0, span, columns", [(0, 100_003, 200), (12_345, 54_321, 97), (7, 50, 120), (99_000, 1003, 33), (4000, 6000, 80)])
def test_column_envelope_equals_nanmin_nanmax_of_each_column(values, i0, span, columns):
    a, b = column_bounds(i0, span, columns)
    lo = Pyramid(values, "min").query(a, b)
    hi = Pyramid(values, "max").query(a, b)
    # numpy nanmin/nanmax over the same slices; float32 levels keep 7 significant digits
    np.testing.assert_allclose(lo, brute(values, a, b, np.nanmin), rtol=1e-6, equal_nan=True)
    np.testing.assert_allclose(hi, brute(values, a, b, np.nanmax), rtol=1e-6, equal_nan=True)


def test_all_undefined_column_is_nan_not_a_value(values):
    a, b = np.array([5000, 5100]), np.array([9000, 5101])
    assert np.isnan(Pyramid(values, "min").query(a, b)).all()
    assert np.isnan(Pyramid(values, "max").query(a, b)).all()


def test_columns_tile_the_window_without_gaps_or_overlap():
    a, b = column_bounds(100, 1000, 37)
    assert a[0] == 100 and b[-1] == 1100
    assert (a[1:] == b[:-1]).all()
    assert (b - a).min() >= 1000 // 37 and (b - a).max() <= 1000 // 37 + 1


def test_fewer_stations_than_columns_repeats_stations():
    a, b = column_bounds(10, 5, 20)
    assert (b - a == 1).all() and set(a.tolist()) == {10, 11, 12, 13, 14}


@pytest.mark.parametrize("i0, span, columns", [(0, 1000, 37), (50, 7, 40), (3, 100_000, 300)])
def test_column_of_finds_the_column_holding_a_station(i0, span, columns):
    a, b = column_bounds(i0, span, columns)
    for k in np.linspace(i0, i0 + span - 1, 25).astype(int):
        c = column_of(int(k), i0, span, columns)
        assert a[c] <= k < b[c]
    assert column_of(i0 - 1, i0, span, columns) == -1 and column_of(i0 + span, i0, span, columns) == -1


@pytest.mark.parametrize("n", [1_000, 1_000_000])
def test_level0_lookups_do_not_grow_with_track_length(n):
    # Bottom-up segment-tree walk: at most one partial block per side per level, so at most two
    # raw stations per column are read whatever the window holds.
    seen = []
    x = np.arange(n, dtype=float)

    def base(idx):
        seen.append(len(idx))
        return x[idx]

    p = Pyramid(base, "max", n=n, full=x)
    a, b = column_bounds(0, n, 150)
    out = p.query(a, b)
    assert sum(seen) <= 2 * 150
    np.testing.assert_array_equal(out, b - 1)  # max of [a, b) of 0, 1, 2, ... is b - 1


def test_pyramid_memory_is_about_half_the_float64_values():
    # levels hold n/2 + n/4 + ... ~ n float32 values: half of the float64 station array
    x = np.zeros(1 << 16)
    assert Pyramid(x, "min").nbytes <= 0.5 * x.nbytes + 64


def test_prefix_count_counts_true_over_any_run():
    m = np.array([0, 1, 1, 0, 1, 0, 0, 1], bool)
    pc = PrefixCount(m)
    a, b = np.array([0, 1, 3, 5]), np.array([8, 3, 5, 7])
    np.testing.assert_array_equal(pc.count(a, b), [m[i:j].sum() for i, j in zip(a, b)])
