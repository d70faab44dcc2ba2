"""Character pictures of the viewer (tui.render): every fact must be in the glyphs, so the
screen reads the same on a monochrome terminal."""

from __future__ import annotations

import numpy as np

from tui.render import (
    BAND_CHAR,
    GAP_CHAR,
    LIMIT_CHAR,
    VALUE_BOTTOM,
    VALUE_FULL,
    VALUE_TOP,
    axis_row,
    chart_grid,
    lane_row,
    nice_step,
    plan_cell,
    plan_grid,
)

NAN = np.nan


def test_undefined_columns_are_drawn_as_a_gap_never_as_a_value():
    lo = np.array([0.5, NAN, NAN, 0.5])
    g = chart_grid(lo, lo.copy(), rows=4, y0=-1.0, y1=1.0, band_lo=lo - 0.1, band_hi=lo + 0.1)
    for col in (1, 2):
        column = set(g.chars[:, col])
        assert column == {GAP_CHAR}
    for col in (0, 3):
        assert set(g.chars[:, col]) & {VALUE_FULL, VALUE_TOP, VALUE_BOTTOM}


def test_value_lands_in_the_half_cell_of_its_height():
    # 2 rows = 4 half-cells over [0, 4): value 3.5 is in the top half of row 0, 2.5 in its
    # bottom half, 0.5 in the bottom half of row 1 (each half-cell spans 1 unit).
    v = np.array([3.5, 2.5, 0.5])
    g = chart_grid(v, v, rows=2, y0=0.0, y1=4.0)
    assert g.text() == [VALUE_TOP + VALUE_BOTTOM + " ", "  " + VALUE_BOTTOM]


def test_envelope_spanning_both_halves_fills_the_cell():
    g = chart_grid(np.array([0.2]), np.array([3.8]), rows=2, y0=0.0, y1=4.0)
    assert g.text() == [VALUE_FULL, VALUE_FULL]


def test_uncertainty_band_is_shaded_outside_the_value():
    v = np.array([2.0])
    g = chart_grid(v, v, rows=4, y0=0.0, y1=4.0, band_lo=v - 1.5, band_hi=v + 1.5)
    col = "".join(g.chars[:, 0])
    assert BAND_CHAR in col and (VALUE_TOP in col or VALUE_BOTTOM in col or VALUE_FULL in col)


def test_limit_line_is_drawn_where_no_value_covers_it():
    v = np.array([0.1, 0.1, 3.9])
    g = chart_grid(v, v, rows=4, y0=0.0, y1=4.0, refs=((2.0, LIMIT_CHAR, 5),))
    row = [r for r in g.text() if LIMIT_CHAR in r]
    assert row == [LIMIT_CHAR * 3]


def test_flag_lane_uses_letters_with_priority():
    flags = {"sharp": np.array([1, 1, 0, 0], bool), "marked": np.array([0, 1, 1, 0], bool)}
    g = lane_row(flags, {"sharp": "S", "marked": "M"}, ("marked", "sharp"), None)
    assert g.text() == ["SMM "]


def test_open_mark_shows_as_lower_case_m():
    flags = {"sharp": np.array([1, 0, 0], bool)}
    g = lane_row(flags, {"sharp": "S"}, ("sharp",), np.array([0, 1, 1], bool))
    assert g.text() == ["Smm"]


def test_nice_step_is_1_2_5_times_a_power_of_ten():
    # common practice for axis ticks
    assert nice_step(1000, 5) == 200
    assert nice_step(1190, 4) == 500
    assert nice_step(37, 10) == 5


def test_axis_labels_sit_at_round_chainages():
    ch = np.arange(0, 1000, 10.0)  # 100 columns of 10 m: about one tick per 12 columns -> 200 m
    row = axis_row(ch, lambda m: f"{m:.0f}").text()[0]
    assert row.startswith("╵0 ") and row[20:24] == "╵200" and row[80:84] == "╵800"


def test_braille_dots_follow_the_unicode_dot_numbering():
    # Unicode Braille Patterns block (U+2800-U+28FF): dot 1 (top left) = bit 0x01, dot 4 (top
    # right) = 0x08, dot 7 (bottom left) = 0x40, dot 8 (bottom right) = 0x80.
    extent = (0.0, 2.0, 0.0, 4.0)
    _, (left, top, scale) = plan_grid(np.zeros(0), np.zeros(0), extent, columns=1, rows=1)
    dots = [(0, 0), (1, 0), (0, 3), (1, 3)]  # (dot column, dot row) of the four corner dots
    east = np.array([left + (x + 0.5) * scale for x, _ in dots])
    north = np.array([top - (y + 0.5) * scale for _, y in dots])
    g, transform = plan_grid(east, north, extent, columns=1, rows=1)
    assert g.text() == [chr(0x2800 + 0x01 + 0x08 + 0x40 + 0x80)]
    g, _ = plan_grid(east[:1], north[:1], extent, columns=1, rows=1)
    assert g.text() == [chr(0x2801)]
    assert plan_cell(transform, 1.0, 2.0) == (0, 0)


def test_plan_keeps_metres_equal_on_both_axes():
    # a 100 m x 100 m square drawn into a 40 x 10 cell area (80 x 40 dots) stays square in dots
    t = np.linspace(0, 1, 2000)
    east = np.concatenate([t, np.ones_like(t), 1 - t, np.zeros_like(t)]) * 100
    north = np.concatenate([np.zeros_like(t), t, np.ones_like(t), 1 - t]) * 100
    g, (left, top, scale) = plan_grid(east, north, (0, 100, 0, 100), columns=40, rows=10)
    cols = [c for c in range(40) if any(ch != " " for ch in g.chars[:, c])]
    rows = [r for r in range(10) if any(ch != " " for ch in g.chars[r])]
    width_dots = (cols[-1] - cols[0] + 1) * 2
    height_dots = (rows[-1] - rows[0] + 1) * 4
    assert abs(width_dots - height_dots) <= 4


def test_axis_labels_fit_the_seven_character_margin():
    from tui import fmt

    for x in (-1.234e-5, 0.0569, -0.0569, 1234.5, -12345.6, 3e-9, 0.0, 98765.4):
        text = fmt.axis(x, digits=4)
        assert len(text) <= 7 and abs(float(text) - x) <= 0.06 * abs(x) + 1e-12
    assert fmt.short_length(316_123.0) == "316 km" and fmt.short_length(22.31) == "22.3 m"
