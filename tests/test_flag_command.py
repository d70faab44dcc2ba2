"""``trackframe flag``: options, presets, marks, formats, errors; and one end-to-end run.

Most tests replace the pipeline's ``run_profile`` with a closed-form road Profile (curvature
1/R on arcs, 0 on straights; see test_sections_support) so they test the command itself, fast.
The end-to-end test reads a real GPX log of a synthetic road through the whole pipeline.
"""

from __future__ import annotations

import csv
import io
import json
import math

import numpy as np
import openpyxl
import pytest

import survey.pipeline
from survey.cli import main
from survey.design import CAUTION
from survey.export import SHEET_RUN, neutralise
from survey.marks import MarkStore, sidecar_path

try:
    from tests.test_sections_support import road_profile
except ImportError:  # tests/ not a package
    from test_sections_support import road_profile

INF = math.inf
# straight 0-200, arc R 100 (200-300), straight 300-500, arc R 300 (500-600), straight to 700
ROAD = [(200, INF, 0), (100, 100.0, 1), (200, INF, 0), (100, 300.0, -1), (100, INF, 0)]


@pytest.fixture
def log(tmp_path):
    p = tmp_path / "ridge-road.gpx"
    p.write_bytes(b"<gpx><!-- invented Curlew Gap survey; the pipeline is replaced in these tests --></gpx>\n")
    return p


@pytest.fixture
def fake_pipeline(monkeypatch):
    calls = []

    def run_profile(path, crs=None, step_m=1.0, **kw):
        calls.append((path, step_m, kw))
        return survey.pipeline.ProfileRun(None, None, None, road_profile(ROAD, step_m=1.0, grade=0.02))

    monkeypatch.setattr(survey.pipeline, "run_profile", run_profile)
    return calls


def _csv_rows(text):
    return list(csv.DictReader(io.StringIO(text, newline="")))


def test_sharp_radius_flags_the_tight_arc_and_writes_csv(log, tmp_path, fake_pipeline, capsys):
    out = tmp_path / "found.csv"
    assert main(["flag", str(log), "--sharp-radius", "150", "-o", str(out)]) == 0
    rows = _csv_rows(out.read_text("utf-8"))
    # Construction: only the R 100 m arc (200-300 m) is tighter than 150 m.
    assert [(r["id"], r["kind"], float(r["start_chainage_m"]), float(r["end_chainage_m"])) for r in rows] == [
        ("S1", "sharp", 200.0, 300.0)
    ]
    assert "1 section(s) (1 sharp) written to" in capsys.readouterr().out


def test_csv_on_stdout_keeps_the_summary_on_stderr(log, fake_pipeline, capsys):
    assert main(["flag", str(log), "--sharp-radius", "150", "-o", "-"]) == 0
    cap = capsys.readouterr()
    assert [r["id"] for r in _csv_rows(cap.out)] == ["S1"]
    assert "written to stdout" in cap.err


def test_direct_options_override_the_preset(log, tmp_path, fake_pipeline):
    out = tmp_path / "found.geojson"
    assert main(["flag", str(log), "--preset", "road-80", "--design-speed", "100", "-o", str(out)]) == 0
    meta = json.loads(out.read_text("utf-8"))["trackframe"]
    assert meta["limit.design_speed_kmh"] == 100.0  # the option, not the preset's 80
    assert meta["limit.min_length_m"] == 10.0  # kept from the preset
    assert meta["setting.preset"] == "road-80"


def test_design_check_prints_balance_speed_and_caution(log, tmp_path, fake_pipeline, capsys):
    out = tmp_path / "found.csv"
    args = ["flag", str(log), "--design-speed", "100", "--superelevation", "0.08", "--friction", "0.12", "-o", str(out)]
    assert main(args) == 0
    said = capsys.readouterr().out
    # ERA 2002 ch. 8: R_min 393.7 m; both arcs (R 100, R 300) are tighter.
    assert "minimum radius 393.7 m" in said
    # V = sqrt(127 * 0.2 * R): 50 km/h for R 100, 87 km/h for R 300 (formula solved for V).
    assert f"{math.sqrt(127 * 0.2 * 100):.0f} km/h" in said and f"{math.sqrt(127 * 0.2 * 300):.0f} km/h" in said
    assert CAUTION in said
    rows = _csv_rows(out.read_text("utf-8"))
    assert [r["kind"] for r in rows] == ["design", "design"]
    assert all(r["caution"] == CAUTION for r in rows)


def test_hand_marks_from_the_sidecar_are_included(log, tmp_path, fake_pipeline):
    MarkStore.load(log).add(20.0, 40.0, '=HYPERLINK("x")')
    out = tmp_path / "found.csv"
    assert main(["flag", str(log), "--sharp-radius", "150", "-o", str(out)]) == 0
    rows = {r["id"]: r for r in _csv_rows(out.read_text("utf-8"))}
    assert rows["M1"]["kind"] == "marked"
    assert rows["M1"]["note"] == neutralise('=HYPERLINK("x")') == "'=HYPERLINK(\"x\")"


def test_xlsx_run_settings_record_input_checksum(log, tmp_path, fake_pipeline):
    import hashlib

    out = tmp_path / "found.xlsx"
    assert main(["flag", str(log), "--sharp-radius", "150", "-o", str(out)]) == 0
    rows = openpyxl.load_workbook(out, read_only=True)[SHEET_RUN].iter_rows(values_only=True)
    settings = {r[0]: (r[1] if len(r) > 1 else None) for r in rows}
    # SHA-256 of the log bytes from hashlib (FIPS 180-4)
    assert settings["input_sha256"] == hashlib.sha256(log.read_bytes()).hexdigest()


def test_existing_output_is_refused_before_any_work(log, tmp_path, fake_pipeline, capsys):
    out = tmp_path / "found.csv"
    out.write_text("mine")
    assert main(["flag", str(log), "--sharp-radius", "150", "-o", str(out)]) == 1
    err = capsys.readouterr().err
    assert "--force" in err and err.count("\n") == 1
    assert out.read_text() == "mine" and fake_pipeline == []
    assert main(["flag", str(log), "--sharp-radius", "150", "-o", str(out), "--force"]) == 0
    assert out.read_text() != "mine"


@pytest.mark.parametrize(
    "extra, message",
    [
        ([], "nothing to check"),
        (["--sharp-radius", "50", "--friction", "0.1"], "need --design-speed"),
    ],
)
def test_option_mistakes_are_one_line_usage_errors(log, tmp_path, fake_pipeline, capsys, extra, message):
    # a usage mistake exits with status 2, as argparse's own do (common practice for Unix tools)
    assert main(["flag", str(log), *extra, "-o", str(tmp_path / "x.csv")]) == 2
    err = capsys.readouterr().err
    assert message in err and err.count("\n") == 1
    assert not (tmp_path / "x.csv").exists()


def test_unknown_output_extension_is_refused(log, tmp_path, fake_pipeline, capsys):
    assert main(["flag", str(log), "--sharp-radius", "50", "-o", str(tmp_path / "x.docx")]) == 1
    assert ".csv, .xlsx, .geojson or .gpx" in capsys.readouterr().err


def test_output_onto_the_log_itself_is_refused_even_with_force(log, fake_pipeline, capsys):
    before = log.read_bytes()
    renamed = log.with_suffix(".csv")
    log.rename(renamed)
    assert main(["flag", str(renamed), "--sharp-radius", "50", "-o", str(renamed), "--force"]) == 1
    assert "input log" in capsys.readouterr().err
    assert renamed.read_bytes() == before


def test_corrupt_sidecar_stops_with_a_hint_and_is_left_alone(log, tmp_path, fake_pipeline, capsys):
    side = sidecar_path(log)
    side.write_text("{oops")
    out = tmp_path / "x.csv"
    assert main(["flag", str(log), "--sharp-radius", "150", "-o", str(out)]) == 1
    err = capsys.readouterr().err
    assert str(side) in err and "--no-marks" in err
    assert side.read_text() == "{oops" and not out.exists()
    assert main(["flag", str(log), "--sharp-radius", "150", "-o", str(out), "--no-marks"]) == 0


def test_changed_log_is_reported_as_a_warning(log, tmp_path, fake_pipeline, capsys):
    MarkStore.load(log).add(20.0, 40.0, "culvert")
    log.write_bytes(log.read_bytes() + b"<!-- re-exported -->")
    assert main(["flag", str(log), "--sharp-radius", "150", "-o", str(tmp_path / "x.csv")]) == 0
    err = capsys.readouterr().err
    assert "warning" in err and "changed" in err


@pytest.mark.parametrize(
    "grade, radius_rel",
    [
        ("exact", 0.05),  # no receiver error
        ("dual", 0.05),  # dual-frequency receiver error model of survey.synthetic
        ("phone", None),  # phone-grade error: coverage of the arc asserted, not the radius
    ],
)
def test_end_to_end_on_a_gpx_road_log(tmp_path, capsys, grade, radius_rel):
    """The whole pipeline on a GPX log of a synthetic road with two R 100 m arcs (each between
    80 m clothoids): both arcs are flagged as one section each, never chopped by noise."""
    pytest.importorskip("survey.profile_build", reason="survey.profile_build not built yet")
    from survey.frame import LocalFrame
    from survey.logwrite import gpx_text
    from survey.synthetic import add_gnss_error, exact_fixes, fixes_to_track, road_alignment

    traj = road_alignment(speed_mps=15.0, rate_hz=5.0, radius_m=100.0, t0_s=1_700_000_000.0)
    frame = LocalFrame.enu(-33.9, 151.1, 40.0)  # invented survey origin
    fixes = exact_fixes(traj) if grade == "exact" else add_gnss_error(traj, grade, rng=np.random.default_rng(7))
    track = fixes_to_track(fixes, frame.inverse, path="road.gpx")
    log = tmp_path / "curlew-road.gpx"
    log.write_text(gpx_text(track, name="Curlew Gap road, invented"), encoding="utf-8")
    out = tmp_path / "found.csv"
    assert main(["flag", str(log), "--sharp-radius", "150", "-o", str(out)]) == 0, capsys.readouterr().err
    rows = _csv_rows(out.read_text("utf-8"))
    assert [r["kind"] for r in rows] == ["sharp", "sharp"]
    # Expected ends: where the true curvature (closed form) crosses the leave level 0.9/150.
    leave = 0.9 / 150.0
    above = traj.curvature_per_m >= leave
    edges = np.flatnonzero(np.diff(above.astype(int)))
    expect = traj.chainage_m[edges].reshape(-1, 2)
    # Constant-radius part of each arc (construction: curvature exactly 1/R there).
    on_arc = np.abs(traj.plan_curvature_per_m) >= 0.999 / 100.0
    arc = traj.chainage_m[np.flatnonzero(np.diff(on_arc.astype(int)))].reshape(-1, 2)
    for r, (a, b), (arc_a, arc_b) in zip(rows, expect, arc):
        start, end = float(r["start_chainage_m"]), float(r["end_chainage_m"])
        # The whole arc is one section, and it stops inside the 80 m clothoids on either side.
        assert arc_a - 80.0 <= start <= arc_a and arc_b <= end <= arc_b + 80.0
        if radius_rel is not None:
            # 10 m: on the clothoids curvature changes by 1/(100 m * 80 m) per metre, so a
            # smoother that blurs over a few metres moves the crossing by a few metres.
            assert start == pytest.approx(a, abs=10.0)
            assert end == pytest.approx(b, abs=10.0)
            assert float(r["min_radius_m"]) == pytest.approx(100.0, rel=radius_rel)


def test_the_profiles_notes_are_printed_on_stderr(log, tmp_path, monkeypatch, capsys):
    # `flag` computes the same profile as `trackframe profile`, which prints its notes (e.g. a
    # bend with too few fixes on it); `flag` must not hide them.
    from dataclasses import replace

    noted = replace(road_profile(ROAD, step_m=1.0, grade=0.02), messages=("a note for the surveyor",))
    monkeypatch.setattr(survey.pipeline, "run_profile",
                        lambda path, crs=None, step_m=1.0, **kw: survey.pipeline.ProfileRun(None, None, None, noted))
    assert main(["flag", str(log), "--sharp-radius", "150", "-o", str(tmp_path / "found.csv")]) == 0
    assert "note: a note for the surveyor" in capsys.readouterr().err
