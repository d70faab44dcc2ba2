"""Design-speed formula R = V^2 / (127 (e + f)), default e and f, and presets."""

from __future__ import annotations

import math

import pytest

from survey.design import (
    CAUTION,
    DEFAULT_SUPERELEVATION,
    PRESETS,
    Limits,
    balance_speed_kmh,
    default_friction,
    min_radius_m,
    preset_limits,
)


def test_min_radius_matches_published_worked_example():
    # Ethiopian Roads Authority, Geometric Design Manual 2002, ch. 8 worked example:
    # 100 km/h, e = 0.08, f = 0.12 -> 393.7 m (published to 0.1 m).
    assert min_radius_m(100.0, 0.08, 0.12) == pytest.approx(393.7, abs=0.05)


@pytest.mark.parametrize(
    "speed, e, f, published_m",
    [
        (100.0, 0.04, 0.12, 490.0),  # ERA 2002 Table 8-2, e = 4 % row (published rounded to 10 m)
        (120.0, 0.04, 0.10, 810.0),  # ERA 2002 Table 8-2, e = 4 % row (published rounded to 10 m)
    ],
)
def test_min_radius_matches_published_table_rows(speed, e, f, published_m):
    # The table rounds to 10 m, hence the 5 m tolerance.
    assert min_radius_m(speed, e, f) == pytest.approx(published_m, abs=5.0)


@pytest.mark.parametrize(
    "speed, e, expected_m",
    [
        (100.0, 0.06, 437.0),  # AASHTO metric row, from memory (REFERENCES.md), f from table
        (80.0, 0.08, 229.0),  # AASHTO metric row, from memory (REFERENCES.md), f from table
    ],
)
def test_default_friction_reproduces_recalled_design_rows(speed, e, expected_m):
    # Rows rounded to 1 m.
    assert min_radius_m(speed, e, default_friction(speed)) == pytest.approx(expected_m, abs=0.5)


def test_default_friction_agrees_with_published_era_row_at_100_kmh():
    # ERA 2002 Table 8-2: f = 0.12 at 100 km/h.
    assert default_friction(100.0) == pytest.approx(0.12)


def test_default_friction_interpolates_between_rows_and_holds_at_ends():
    # Between the recalled 60 (0.17) and 70 km/h (0.15) rows; below 20 / above 130 the end rows.
    assert default_friction(65.0) == pytest.approx(0.16)
    assert default_friction(5.0) == pytest.approx(0.35)
    assert default_friction(200.0) == pytest.approx(0.08)


def test_balance_speed_inverts_the_radius_formula():
    # V = sqrt(127 (e + f) R) is the formula solved for V: round trip returns the design speed.
    r = min_radius_m(100.0, 0.08, 0.12)
    assert balance_speed_kmh(r, 0.08, 0.12) == pytest.approx(100.0, rel=1e-12)
    assert balance_speed_kmh(math.inf, 0.08, 0.12) == math.inf


def test_formula_constant_is_g_times_kmh_to_mps_squared():
    # 127 = 3.6^2 * 9.81 rounded (unit conversion km/h -> m/s and g = 9.81 m/s^2).
    v = 90.0
    exact = (v / 3.6) ** 2 / (9.81 * 0.2)
    assert min_radius_m(v, 0.08, 0.12) == pytest.approx(exact, rel=2e-3)


def test_limits_resolve_design_defaults():
    lim = Limits(design_speed_kmh=100.0)
    assert lim.design_superelevation == DEFAULT_SUPERELEVATION == 0.08
    assert lim.design_radius_m == pytest.approx(393.7, abs=0.05)  # ERA 2002 ch. 8 example
    d = lim.as_dict()
    assert d["superelevation"] == 0.08 and d["friction"] == pytest.approx(0.12)


def test_direct_values_override_a_preset_and_none_keeps_it():
    base = preset_limits("road-80")
    lim = base.updated(design_speed_kmh=60.0, friction=0.2, sharp_radius_m=None)
    assert lim.design_speed_kmh == 60.0 and lim.friction == 0.2
    assert lim.min_length_m == base.min_length_m and lim.sharp_radius_m is None


def test_unknown_preset_names_the_choices():
    with pytest.raises(KeyError, match="road-80"):
        preset_limits("motorway")


def test_every_preset_switches_on_at_least_one_check():
    for p in PRESETS.values():
        assert p.limits.any_check, p.name


@pytest.mark.parametrize(
    "kwargs",
    [
        dict(sharp_radius_m=0.0),
        dict(sharp_radius_m=-5.0),
        dict(twist_per_m=math.nan),
        dict(design_speed_kmh=100.0, superelevation=8.0),  # percent given where a decimal is due
        dict(design_speed_kmh=100.0, friction=0.0),
        dict(hysteresis=1.0),
        dict(min_length_m=-1.0),
    ],
)
def test_invalid_limits_are_refused(kwargs):
    with pytest.raises(ValueError):
        Limits(**kwargs)


def test_caution_says_advisory_and_who_decides():
    assert "Advisory only" in CAUTION and "licensed engineer" in CAUTION
