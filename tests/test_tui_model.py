"""Keyboard behaviour of the viewer without a terminal (tui.model.ViewModel).

The road is closed form (tests/test_sections_support.road_profile): straights and arcs of known
radius, so where each flagged section starts is known exactly (the arc ends).
"""

from __future__ import annotations

import json
import math

import pytest

from survey.design import Limits
from survey.marks import MarkStore, sidecar_path
from tui.model import ViewModel

try:
    from tests.test_sections_support import road_profile
except ImportError:  # tests/ not a package
    from test_sections_support import road_profile

INF = math.inf
# straight 0-200, arc R 100 (200-300), straight 300-500, arc R 300 (500-600), straight to 700
ROAD = [(200, INF, 0), (100, 100.0, 1), (200, INF, 0), (100, 300.0, -1), (100, INF, 0)]
LIMITS = Limits(sharp_radius_m=400.0, min_length_m=1.0, merge_gap_m=1.0)  # both arcs are sharper


@pytest.fixture
def model():
    return ViewModel(road_profile(ROAD, step_m=1.0, grade=0.02), LIMITS)


@pytest.fixture
def marked(tmp_path):
    log = tmp_path / "curlew-gap.gpx"
    log.write_text("<gpx><!-- invented Curlew Gap survey --></gpx>\n")
    store = MarkStore.load(log)
    return ViewModel(road_profile(ROAD), LIMITS, marks=store), log


def test_step_moves_one_station_and_clamps_at_the_ends(model):
    model.step(1)
    assert model.cursor == 1 and model.chainage() == 1.0
    model.step(-5)
    assert model.cursor == 0
    model.end()
    model.step(3)
    assert model.cursor == model.n - 1 and model.chainage() == 700.0


def test_page_moves_by_the_window_width(model):
    model.zoom(0.25)
    span = model.span
    model.page(1)
    assert model.cursor == span and model.i0 <= model.cursor < model.i0 + model.span


def test_zoom_keeps_the_cursor_in_view_and_halves_the_window(model):
    model.goto(350)
    model.zoom(0.5)
    assert model.span == math.ceil(model.n / 2) or model.span == model.n // 2
    assert model.i0 <= 350 < model.i0 + model.span
    for _ in range(20):
        model.zoom(0.5)
    assert model.span == 8 and model.i0 <= 350 < model.i0 + 8


def test_cursor_leaving_the_window_pages_it_along(model):
    model.zoom(1 / 16)
    span = model.span
    for _ in range(span + 3):
        model.step(1)
    assert model.i0 <= model.cursor < model.i0 + model.span and model.i0 > 0


def test_next_and_previous_land_on_the_arc_starts(model):
    # closed form: the arcs start at 200 m and 500 m of chainage (the road's piece ends)
    sec = model.next_section()
    assert sec.kind == "sharp" and model.chainage() == 200.0
    model.next_section()
    assert model.chainage() == 500.0
    assert model.next_section() is None and model.chainage() == 500.0
    model.previous_section()
    assert model.chainage() == 200.0
    assert model.previous_section() is None


def test_flags_update_when_limits_change(model):
    assert len(model.auto_sections) == 2
    v = model.sections_version
    model.set_limits(Limits(sharp_radius_m=200.0, min_length_m=1.0, merge_gap_m=1.0))  # only R 100 m
    assert [s.start_chainage_m for s in model.auto_sections] == [200.0]
    assert model.sections_version > v


def test_sections_at_cursor_finds_the_arc(model):
    model.goto(250)
    assert [s.id for s in model.sections_at_cursor()] == ["S1"]
    model.goto(400)
    assert model.sections_at_cursor() == []


def test_readout_reports_radius_and_undefined_torsion(model):
    model.goto(250)  # on the R 100 m arc
    r = model.readout()
    assert r["radius_m"] == pytest.approx(100.0) and r["curvature_per_m"] == pytest.approx(0.01)
    model.goto(100)  # on the straight: torsion undefined, radius infinite
    r = model.readout()
    assert math.isnan(r["torsion_per_m"]) and r["torsion_note"] and math.isinf(r["radius_m"])


def test_mark_is_in_the_sidecar_when_mark_here_returns(marked):
    model, log = marked
    model.goto(120)
    assert model.mark_here() == ("opened", None)
    assert not sidecar_path(log).exists()  # nothing saved until the mark is closed
    model.goto(135)
    what, mark = model.mark_here()
    doc = json.loads(sidecar_path(log).read_text())
    assert what == "saved" and doc["marks"] == [{"id": mark.id, "start_m": 120.0, "end_m": 135.0, "note": ""}]
    assert [s.id for s in model.sections if s.kind == "marked"] == [f"M{mark.id}"]


def test_mark_ends_may_be_set_backwards(marked):
    model, log = marked
    model.goto(300)
    model.mark_here()
    model.goto(280)
    _, mark = model.mark_here()
    assert (mark.start_m, mark.end_m) == (280.0, 300.0)


def test_note_and_delete_are_saved_at_once(marked):
    model, log = marked
    model.goto(10)
    model.mark_here()
    model.goto(20)
    _, mark = model.mark_here()
    model.goto(15)
    assert model.mark_at_cursor().id == mark.id
    model.set_note(mark.id, "loose rock; =cmd")
    assert json.loads(sidecar_path(log).read_text())["marks"][0]["note"] == "loose rock; =cmd"
    model.delete_mark(mark.id)
    assert json.loads(sidecar_path(log).read_text())["marks"] == []
    assert model.mark_at_cursor() is None


def test_cancel_mark_leaves_the_sidecar_alone(marked):
    model, log = marked
    model.mark_here()
    assert model.cancel_mark() is True and model.pending_mark_m is None
    assert not sidecar_path(log).exists()


def test_view_memory_stays_well_below_the_geometry_arrays(model):
    # pyramids are float32 and hold n values per one-sided channel; coverage counts 4 bytes per
    # station: together about a third of the Profile arrays (benchmarks/bench_tui.py measures 1M)
    assert model.nbytes() < 0.6 * model.profile.nbytes()


def test_index_at_picks_the_nearest_station(model):
    assert model.index_at(10.4) == 10 and model.index_at(10.6) == 11
    assert model.index_at(-5) == 0 and model.index_at(1e9) == model.n - 1
