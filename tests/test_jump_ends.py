"""Which fix made a jump seen first at the end of a chain (survey.jump_ends).

Sources: the jumps are put in by construction (their place is the expected value); the path is a
circle walked at constant speed (closed form) with 0.3 m white receiver noise, 30 m jumps
(multipath sizes, common practice).
"""

import numpy as np
import pytest

from survey.jump_ends import end_culprit, lagrange_weights


def _walk(rng, n=7):
    t = np.cumsum(rng.uniform(0.8, 1.2, n))  # about 1 Hz, irregular
    angle = t * 1.3 / 20.0  # 1.3 m/s on a 20 m radius
    Y = 20.0 * np.column_stack([np.cos(angle), np.sin(angle)]) + rng.normal(0.0, 0.3, (n, 2))
    return t, Y


@pytest.mark.parametrize("place", [0, 1, 2])
def test_a_jump_at_one_of_the_first_three_fixes_is_put_on_that_fix(place):
    rng = np.random.default_rng(place)
    for _ in range(20):
        t, Y = _walk(rng)
        Y[place] += [30.0, -12.0]
        assert end_culprit(t, Y) == place


@pytest.mark.parametrize("place", [0, 1, 2])
def test_at_the_far_end_places_are_counted_back_from_the_last_fix(place):
    rng = np.random.default_rng(10 + place)
    t, Y = _walk(rng, 12)
    Y[-1 - place] += [-25.0, 18.0]
    assert end_culprit(t, Y, from_end=True) == place


def test_too_few_fixes_to_tell_keep_the_window_centre():
    rng = np.random.default_rng(3)
    t, Y = _walk(rng, 5)
    Y[0] += 30.0
    assert end_culprit(t, Y) == 2


def test_lagrange_weights_reproduce_a_cubic_exactly():
    # Lagrange interpolation through four nodes is exact for any cubic (closed form).
    nodes = (np.array([0.0]), np.array([0.7]), np.array([2.1]), np.array([3.0]))
    at = np.array([1.4])

    def cubic(x):
        return 2.0 - x + 0.5 * x**2 - 0.25 * x**3

    w = lagrange_weights(nodes, at)
    assert sum(wj[0] * cubic(xj[0]) for wj, xj in zip(w, nodes)) == pytest.approx(cubic(1.4), rel=1e-12)
