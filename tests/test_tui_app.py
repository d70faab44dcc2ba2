"""The viewer driven with Textual's test pilot, on a real log through the real pipeline.

The log is written in a temporary folder from a closed-form road (survey.synthetic: straights
and two circular arcs, R 40 m from 150 m to 210 m of plan distance and R 25 m from 330 m to
380 m, on a steady 3 % grade) with RTK-grade receiver error, as CSV via survey.logwrite.
"""

from __future__ import annotations

import asyncio
import csv
import dataclasses
import json
import math
import shutil

import numpy as np
import pytest

from survey import synthetic as syn
from tui.cli import main
from survey.design import Limits
from survey.frame import LocalFrame
from survey.logwrite import csv_text, write_text
from survey.marks import sidecar_path
from survey.pipeline import run_profile
from tui.app import TrackApp
from tui.screens import ErrorScreen, ExportScreen, HelpScreen, LimitsScreen
from tui.widgets import ChartPanel, PlanView, Readout, SectionList

GRADE = 0.03
# plan pieces (kind, length m, signed curvature 1/m)
PIECES = [("tangent", 150.0, 0.0), ("arc", 60.0, 1 / 40.0), ("tangent", 120.0, 0.0), ("arc", 50.0, -1 / 25.0), ("tangent", 100.0, 0.0)]
# 3D chainage = plan distance * sqrt(1 + grade^2) on a steady grade (Pythagoras)
STRETCH = math.sqrt(1 + GRADE**2)
ARC1_START_M = 150.0 * STRETCH
LIMITS = Limits(sharp_radius_m=60.0, twist_per_m=0.05)


def write_road_log(path):
    curve = syn.alignment_curve(PIECES, [(480.0, GRADE, GRADE)])
    traj = syn.sample_path(curve, 4.0, 2.0, t0_s=1_790_000_000.0)
    fixes = syn.add_gnss_error(traj, "rtk", np.random.default_rng(3))
    frame = LocalFrame.enu(48.1, 7.9, 300.0)  # an invented valley
    write_text(str(path), csv_text(syn.fixes_to_track(fixes, frame.inverse)))


@pytest.fixture(scope="module")
def road(tmp_path_factory):
    """(log path, Profile from survey.pipeline.run_profile) shared by the module."""
    folder = tmp_path_factory.mktemp("road")
    log = folder / "brackenford-road.csv"
    write_road_log(log)
    return log, run_profile(str(log)).profile


@pytest.fixture
def log_copy(road, tmp_path):
    """A private copy of the log (marks are written beside it) and the shared profile."""
    log, profile = road
    mine = tmp_path / log.name
    shutil.copy(log, mine)
    return mine, profile


async def until(pilot, condition, timeout_s=30.0):
    for _ in range(int(timeout_s / 0.02)):
        if condition():
            return
        await pilot.pause(0.02)
    raise AssertionError("timed out waiting for the viewer")


def run(coro):
    return asyncio.run(coro)


def readout_text(app):
    return "\n".join(app.query_one(Readout).lines())


# ----------------------------------------------------------------------------------------------


def test_opens_a_log_through_the_pipeline_at_80x24(road, tmp_path):
    log = tmp_path / road[0].name
    shutil.copy(road[0], log)

    async def go():
        app = TrackApp(log_path=str(log), limits=LIMITS)
        async with app.run_test(size=(80, 24)) as pilot:
            await until(pilot, lambda: app.model is not None or app.error)
            await pilot.pause()
            assert app.error is None
            header = str(app.query_one("#header").render())
            assert log.name in header and "R<60 m" in header
            lines = app.query_one(ChartPanel).text_lines()
            assert len(lines) == app.query_one(ChartPanel).size.height
            lane = next(line for line in lines if line.startswith("flags"))
            assert lane.count("S") >= 2  # both arcs are sharper than 60 m: letters, not colour
            assert [s.id for s in app.query_one(SectionList).sections] == ["S1", "S2"]
            return len(app.model.profile)

    # same pipeline, same stations as run_profile on the same file
    assert run(go()) == len(road[1])


def test_arrow_keys_move_the_cursor_and_change_the_readout(log_copy):
    log, profile = log_copy

    async def go():
        app = TrackApp(log_path=str(log), profile=profile, limits=LIMITS)
        async with app.run_test(size=(80, 24)) as pilot:
            await until(pilot, lambda: app.model is not None)
            before = readout_text(app)
            await pilot.press("right", "right", "right")
            assert app.model.cursor == 3
            after = readout_text(app)
            assert after != before and f"at     {profile.chainage_m[3]:.1f} m" in after
            await pilot.press("left")
            assert app.model.cursor == 2
            await pilot.press("end")
            assert app.model.cursor == len(profile) - 1
            await pilot.press("home")
            assert app.model.cursor == 0

    run(go())


def test_next_and_previous_flag_land_on_the_section_starts(log_copy):
    log, profile = log_copy

    async def go():
        app = TrackApp(log_path=str(log), profile=profile, limits=LIMITS)
        async with app.run_test(size=(80, 24)) as pilot:
            await until(pilot, lambda: app.model is not None)
            s1, s2 = app.model.auto_sections
            await pilot.press("n")
            at1 = app.model.chainage()
            await pilot.press("n")
            at2 = app.model.chainage()
            await pilot.press("p")
            back = app.model.chainage()
            return s1, s2, at1, at2, back

    s1, s2, at1, at2, back = run(go())
    assert at1 == s1.start_chainage_m and at2 == s2.start_chainage_m and back == at1
    # closed form: the R 40 m arc begins at 150 m of plan distance; the flag may start a few
    # metres early or late where the smoothed curvature crosses the limit (station step 1 m)
    assert abs(at1 - ARC1_START_M) <= 5.0


def test_a_mark_made_in_the_viewer_is_in_the_sidecar(log_copy):
    log, profile = log_copy

    async def go():
        app = TrackApp(log_path=str(log), profile=profile, limits=LIMITS)
        async with app.run_test(size=(80, 24)) as pilot:
            await until(pilot, lambda: app.model is not None)
            await pilot.press(*["right"] * 5, "m", *["right"] * 10, "m")
            doc = json.loads(sidecar_path(log).read_text())
            assert doc["marks"] == [
                {"id": 1, "start_m": float(profile.chainage_m[5]), "end_m": float(profile.chainage_m[15]), "note": ""}
            ]
            await pilot.press("left", "t")
            await pilot.press(*"washout", "enter")
            assert json.loads(sidecar_path(log).read_text())["marks"][0]["note"] == "washout"
            assert "M1" in [s.id for s in app.query_one(SectionList).sections]
            await pilot.press("d", "y")
            assert json.loads(sidecar_path(log).read_text())["marks"] == []

    run(go())


@pytest.mark.parametrize("name", ["found.csv", "found.geojson"])
def test_export_from_the_viewer_writes_a_readable_file(log_copy, tmp_path, name):
    log, profile = log_copy
    out = tmp_path / name

    async def go():
        app = TrackApp(log_path=str(log), profile=profile, limits=LIMITS)
        async with app.run_test(size=(80, 24)) as pilot:
            await until(pilot, lambda: app.model is not None)
            await pilot.press("x")
            await until(pilot, lambda: isinstance(app.screen, ExportScreen))
            app.screen.query_one("#path").value = str(out)
            await pilot.press("enter")
            await until(pilot, lambda: out.exists())
            await app.workers.wait_for_complete()
            return [s.id for s in app.model.sections]

    ids = run(go())
    if name.endswith(".csv"):
        with open(out, newline="", encoding="utf-8") as fh:  # RFC 4180 CSV
            rows = list(csv.DictReader(fh))
        assert [r["id"] for r in rows] == ids
    else:
        doc = json.loads(out.read_text())  # RFC 7946 GeoJSON
        assert doc["type"] == "FeatureCollection" and len(doc["features"]) == len(ids)


def test_changing_a_limit_updates_the_flags_live(log_copy):
    log, profile = log_copy

    async def go():
        app = TrackApp(log_path=str(log), profile=profile, limits=LIMITS)
        async with app.run_test(size=(80, 24)) as pilot:
            await until(pilot, lambda: app.model is not None)
            assert len(app.model.auto_sections) == 2
            await pilot.press("l")
            await until(pilot, lambda: isinstance(app.screen, LimitsScreen))
            app.screen.query_one("#lim-sharp_radius_m").value = "30"  # only the R 25 m arc
            await until(pilot, lambda: app.model.limits.sharp_radius_m == 30.0)
            await pilot.press("escape")
            header = str(app.query_one("#header").render())
            return [s.min_radius_m for s in app.model.auto_sections], header

    radii, header = run(go())
    assert len(radii) == 1 and radii[0] < 30.0 and "R<30 m" in header


@pytest.mark.parametrize("name", ["chewed.gpx", "ridge [bold]2026[b].gpx"])  # brackets are not markup
def test_a_bad_log_shows_a_message_not_a_traceback(tmp_path, name):
    bad = tmp_path / name
    bad.write_text("<gpx><trk><trkseg><trkpt lat='north' lon='8'></trkpt>")

    async def go():
        app = TrackApp(log_path=str(bad))
        async with app.run_test(size=(80, 24)) as pilot:
            await until(pilot, lambda: app.error is not None)
            await pilot.pause()
            assert isinstance(app.screen, ErrorScreen)
            shown = str(app.screen.query_one("#message").render())
            await pilot.press("q")
            return shown

    shown = run(go())
    assert str(bad) in shown and "Traceback" not in shown and "\n" not in shown


def test_survives_a_resize_and_scales_the_charts(log_copy):
    log, profile = log_copy

    async def go():
        app = TrackApp(log_path=str(log), profile=profile, limits=LIMITS)
        async with app.run_test(size=(80, 24)) as pilot:
            await until(pilot, lambda: app.model is not None)
            small = app.query_one(ChartPanel).size
            await pilot.resize_terminal(120, 40)
            await pilot.pause()
            big = app.query_one(ChartPanel).size
            lines = app.query_one(ChartPanel).text_lines()
            plan = app.query_one(PlanView).text_lines()
            return small, big, lines, plan

    small, big, lines, plan = run(go())
    assert big.width > small.width and big.height > small.height
    assert len(lines) == big.height and all(len(line) == big.width for line in lines)
    assert any("grade" in line for line in lines)  # a grade chart appears when there is room
    assert any(ch in "●" for line in plan for ch in line)


def test_undefined_torsion_is_a_gap_and_reads_n_a(log_copy):
    log, profile = log_copy
    straight = int(np.searchsorted(profile.chainage_m, 75.0))  # middle of the first straight
    assert np.isnan(profile.torsion_per_m[straight])  # the pipeline leaves it undefined there

    async def go():
        app = TrackApp(log_path=str(log), profile=profile, limits=LIMITS)
        async with app.run_test(size=(120, 40)) as pilot:
            await until(pilot, lambda: app.model is not None)
            app.goto_station(straight)
            await pilot.pause()
            panel = app.query_one(ChartPanel)
            lines = panel.text_lines()
            x = panel.MARGIN + panel.cursor_column()
            top = next(i for i, line in enumerate(lines) if line.startswith("torsion"))
            column = [lines[r][x] for r in range(top + 1, top + 4)]
            return readout_text(app), column

    text, column = run(go())
    tau_line = next(line for line in text.splitlines() if line.startswith("τ"))
    assert "n/a" in tau_line
    assert set(column) <= {"·", "│"}  # gap texture (or the cursor line), never a value glyph


def test_help_lists_every_key(log_copy):
    log, profile = log_copy
    tokens = {
        "right": "→", "left": "←", "pagedown": "PgDn", "pageup": "PgUp", "rightsquarebracket": "]",
        "leftsquarebracket": "[", "home": "Home", "end": "End", "less_than_sign": "<",
        "greater_than_sign": ">", "plus": "+", "equals_sign": "=", "minus": "-", "question_mark": "?",
        "f1": "F1", "escape": "escape",
    }
    keys_column = " ".join(k for k, _ in TrackApp.HELP_KEYS)
    for binding in TrackApp.BINDINGS:
        for key in binding.key.split(","):
            token = tokens.get(key, key)
            assert token in keys_column, f"help does not list {key} ({binding.description})"

    async def go():
        app = TrackApp(log_path=str(log), profile=profile, limits=LIMITS)
        async with app.run_test(size=(80, 24)) as pilot:
            await until(pilot, lambda: app.model is not None)
            await pilot.press("question_mark")
            await until(pilot, lambda: isinstance(app.screen, HelpScreen))
            body = str(app.screen.query_one("#help-text").render())
            await pilot.press("escape")
            return body

    body = run(go())
    assert "licensed engineer" in body and "·" in body


def test_the_profiles_notes_are_announced_and_shown_with_the_keys(log_copy):
    # a note of the pipeline's own kind (survey.profile_build: too few fixes on a bend)
    log, profile = log_copy
    note = "12 stations (150-162 m) bend with a radius under 2x the distance between the fixes around them"
    noted = dataclasses.replace(profile, messages=(note,))

    async def go():
        app = TrackApp(log_path=str(log), profile=noted, limits=LIMITS)
        async with app.run_test(size=(80, 24)) as pilot:
            await until(pilot, lambda: app.model is not None)
            await pilot.pause()
            status = str(app.query_one("#status").render())
            await pilot.press("question_mark")
            await until(pilot, lambda: isinstance(app.screen, HelpScreen))
            return status, str(app.screen.query_one("#help-text").render())

    status, body = run(go())
    assert "1 note on this profile" in status
    assert "NOTES ON THIS PROFILE" in body and "150-162 m" in body and "KEYS" in body


def test_view_without_a_terminal_says_so_in_one_line(capsys, road):
    assert main(["view", str(road[0])]) == 1
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "terminal" in err


def test_demo_with_text_prints_the_summary(capsys):
    assert main(["demo", "--text"]) == 0
    assert "ridge_trail_phone.gpx" in capsys.readouterr().out


def test_radius_view_and_plan_follow_switch_on_their_keys(log_copy):
    log, profile = log_copy

    async def go():
        app = TrackApp(log_path=str(log), profile=profile, limits=LIMITS)
        async with app.run_test(size=(80, 24)) as pilot:
            await until(pilot, lambda: app.model is not None)
            await pilot.press("r", "v", "plus", "plus")
            await pilot.pause()
            return app.query_one(ChartPanel).text_lines(), app.query_one(PlanView).text_lines()

    charts, plan = run(go())
    assert charts[0].startswith("radius")
    # edge labels of the log scale are radii with their unit, whole within the margin
    labels = [line[:7].strip() for line in charts[1:4] if line[7] == "┤"]
    assert len(labels) == 2 and all(lab.endswith((" m", " km")) for lab in labels)
    assert plan[0].startswith("plan (window)")


def test_readout_shows_bank_and_twist_when_an_imu_log_was_fused():
    # The demo van carries a 100 Hz IMU log (demo_tracks/make_demo.py); with --imu the viewer's
    # readout adds the bank (roll) angle and its change per metre.
    import asyncio
    from pathlib import Path

    from survey.design import preset_limits
    from survey.pipeline import run_profile
    from tui.app import TrackApp
    from tui.widgets import Readout

    demo = Path(__file__).resolve().parents[1] / "demo_tracks"
    profile = run_profile(str(demo / "van_route_tunnel.nmea"), imu=str(demo / "van_route_tunnel_imu.csv")).profile

    async def go():
        app = TrackApp(profile=profile, limits=preset_limits("road-80"))
        async with app.run_test(size=(80, 24)) as pilot:
            while app.model is None:
                await pilot.pause(0.01)
            app.model.goto(int(np.searchsorted(profile.chainage_m, 500.0)))
            return app.query_one(Readout).lines()

    lines = asyncio.run(go())
    assert any(line.startswith("bank   +") for line in lines)  # left-hand superelevated arc
    assert any(line.startswith("twist  ") for line in lines)
