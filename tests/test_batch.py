"""``trackframe batch``: expanding PATHS, the combined findings file, failures, progress, exit status.

These tests replace the pipeline's ``run_profile`` with closed-form road Profiles (curvature 1/R
on arcs, 0 on straights; see test_sections_support), so they test the batch itself and run in a
fraction of a second. tests/test_batch_run.py runs the real pipeline in a process pool and on a
Dask cluster.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import math

import openpyxl
import pytest

import survey.pipeline
from survey.batch import (
    KIND_ERROR,
    BatchOptions,
    LogResult,
    Progress,
    batch_columns,
    expand_paths,
    failed,
    run_batch,
)
from survey.cli import main
from survey.design import Limits
from survey.errors import InputError
from survey.export import SECTION_TABLE_COLUMNS, neutralise
from survey.marks import MarkStore
from survey.readers import read_bytes

try:
    from tests.test_sections_support import road_profile
except ImportError:  # tests/ not a package
    from test_sections_support import road_profile

INF = math.inf
# straight 0-200, arc (200-300), straight 300-500, arc R 300 (500-600), straight to 700
TIGHT_ROAD = [(200, INF, 0), (100, 100.0, 1), (200, INF, 0), (100, 300.0, -1), (100, INF, 0)]
GENTLE_ROAD = [(200, INF, 0), (100, 400.0, 1), (400, INF, 0)]


@pytest.fixture
def fake_pipeline(monkeypatch):
    """run_profile stand-in: reads the bytes (so missing/empty files fail as for real), a log whose
    text says BAD fails like a reader would, "tight" logs get TIGHT_ROAD, others GENTLE_ROAD."""
    calls = []

    def run_profile(path, crs=None, step_m=1.0, **kw):
        calls.append(path)
        data = read_bytes(path)
        if b"BAD" in data:
            raise InputError(path, "latitude 95.0 out of range", "trkpt 3")
        pieces = TIGHT_ROAD if "tight" in str(path) else GENTLE_ROAD
        return survey.pipeline.ProfileRun(None, None, None, road_profile(pieces, step_m=step_m, grade=0.02))

    monkeypatch.setattr(survey.pipeline, "run_profile", run_profile)
    return calls


def _log(folder, name, text="<gpx><!-- invented Wrenfold crew log; the pipeline is replaced --></gpx>\n"):
    p = folder / name
    p.parent.mkdir(parents=True, exist_ok=True)
    p.write_text(text, encoding="utf-8")
    return p


@pytest.fixture
def fleet(tmp_path):
    """Three logs in a folder: two good (one tight, one gentle) and one the reader rejects."""
    d = tmp_path / "fleet"
    return {
        "tight": _log(d, "a-tight.gpx"),
        "gentle": _log(d, "b-gentle.gpx"),
        "bad": _log(d, "c-broken.gpx", "<gpx>BAD</gpx>\n"),
    }


def _csv_rows(text):
    return list(csv.DictReader(io.StringIO(text, newline="")))


# ---------------------------------------------------------------------------------------------
# PATHS


def test_folder_gives_its_log_files_sorted_and_skips_other_files(tmp_path):
    d = tmp_path / "logs"
    for name in ("b.nmea", "a.gpx", "c.CSV", "notes.txt", "a.gpx.marks.json", ".hidden.gpx"):
        _log(d, name)
    _log(d / "sub", "deeper.gpx")
    logs, failures = expand_paths([str(d)])
    assert [p.rsplit("/", 1)[1] for p in logs] == ["a.gpx", "b.nmea", "c.CSV"]
    assert failures == []


def test_glob_pattern_with_double_star_reaches_every_depth(tmp_path):
    _log(tmp_path / "day1", "x.gpx")
    _log(tmp_path / "day2" / "van", "y.gpx")
    _log(tmp_path / "day2", "z.csv")
    # glob semantics of the Python standard library: ** matches zero or more folders
    logs, _ = expand_paths([str(tmp_path / "**" / "*.gpx")])
    assert [p.rsplit("/", 1)[1] for p in logs] == ["x.gpx", "y.gpx"]


def test_a_file_named_twice_runs_once_and_the_output_is_never_read(tmp_path):
    a = _log(tmp_path, "a.gpx")
    out = _log(tmp_path, "findings.csv")
    logs, _ = expand_paths([str(a), str(tmp_path), str(tmp_path / "*.gpx")], exclude=[str(out)])
    assert logs == [str(a)]


def test_missing_file_empty_folder_and_unmatched_pattern_are_failures_not_errors(tmp_path):
    (tmp_path / "empty").mkdir()
    logs, failures = expand_paths([str(tmp_path / "gone.gpx"), str(tmp_path / "empty"), str(tmp_path / "*.nmea")])
    assert logs == []
    assert [f.error for f in failures] == [
        f"{tmp_path / 'gone.gpx'}: no such file",
        f"{tmp_path / 'empty'}: folder holds no log files (.csv .gpx .nma .nmea .tsv .ubx.txt)",
        f"{tmp_path / '*.nmea'}: no file matches this pattern",
    ]


def test_an_explicit_file_is_taken_whatever_its_extension(tmp_path):
    p = _log(tmp_path, "logger-export.txt")
    assert expand_paths([str(p)])[0] == [str(p)]


# ---------------------------------------------------------------------------------------------
# Running and the combined table


def test_each_log_gets_its_own_sections_with_the_log_named_first(fleet, tmp_path, fake_pipeline, capsys):
    out = tmp_path / "fleet.csv"
    assert main(["batch", "-j", "1", str(fleet["tight"]), str(fleet["gentle"]), "--sharp-radius", "150", "-o", str(out)]) == 0
    rows = _csv_rows(out.read_text("utf-8"))
    assert list(rows[0])[0] == "log"
    # Construction: only the tight road's R 100 m arc (200-300 m) is tighter than 150 m.
    assert [(r["log"], r["id"], r["kind"], float(r["start_chainage_m"]), float(r["end_chainage_m"])) for r in rows] == [
        (str(fleet["tight"]), "S1", "sharp", 200.0, 300.0)
    ]
    assert "2 log(s): 2 ok, 0 failed; 1 section(s) (1 sharp) written to" in capsys.readouterr().out


def test_columns_are_the_flag_export_columns_after_log():
    assert batch_columns() == ["log"] + [name for name, _ in SECTION_TABLE_COLUMNS]


def test_rows_match_what_flag_writes_for_each_log(fleet, tmp_path, fake_pipeline):
    out = tmp_path / "fleet.csv"
    args = ["--design-speed", "100", "--superelevation", "0.08", "--friction", "0.12"]
    assert main(["batch", "-j", "1", str(fleet["tight"]), str(fleet["gentle"]), *args, "-o", str(out)]) == 0
    batch = _csv_rows(out.read_text("utf-8"))
    for name in ("tight", "gentle"):
        single = tmp_path / f"{name}.csv"
        assert main(["flag", str(fleet[name]), *args, "-o", str(single)]) == 0
        mine = [{k: v for k, v in r.items() if k != "log"} for r in batch if r["log"] == str(fleet[name])]
        assert mine == _csv_rows(single.read_text("utf-8"))
    # ERA 2002 Table 8-2 example: R_min = 100^2 / (127 (0.08 + 0.12)) = 393.7 m, so the tight
    # road's R 100 and R 300 arcs are below it and the gentle road's R 400 arc is not.
    assert [(r["log"], r["kind"]) for r in batch] == [(str(fleet["tight"]), "design")] * 2


def test_a_failing_log_is_listed_and_the_others_go_on_with_exit_status_1(fleet, tmp_path, fake_pipeline, capsys):
    out = tmp_path / "fleet.csv"
    assert main(["batch", "-j", "1", str(fleet["tight"].parent), "--sharp-radius", "150", "-o", str(out)]) == 1
    rows = _csv_rows(out.read_text("utf-8"))
    errors = [r for r in rows if r["kind"] == KIND_ERROR]
    message = f"{fleet['bad']}: trkpt 3: latitude 95.0 out of range"  # the InputError one-liner
    assert [(r["log"], r["note"]) for r in errors] == [(str(fleet["bad"]), message)]
    assert all(r[c] == "" for r in errors for c in rows[0] if c not in ("log", "kind", "note"))
    assert [r["log"] for r in rows if r["kind"] != KIND_ERROR] == [str(fleet["tight"])]
    err = capsys.readouterr().err
    assert message in err and "Traceback" not in err
    assert len(fake_pipeline) == 3  # the bad log did not stop the one after it


def test_missing_paths_are_listed_as_failed_logs(fleet, tmp_path, fake_pipeline, capsys):
    out = tmp_path / "fleet.csv"
    gone = tmp_path / "gone.gpx"
    assert main(["batch", "-j", "1", str(fleet["gentle"]), str(gone), "--sharp-radius", "150", "-o", str(out)]) == 1
    rows = _csv_rows(out.read_text("utf-8"))
    assert [(r["log"], r["kind"], r["note"]) for r in rows] == [(str(gone), "error", f"{gone}: no such file")]
    assert "2 log(s): 1 ok, 1 failed" in capsys.readouterr().out


def test_nothing_to_run_is_a_one_line_error(tmp_path, fake_pipeline, capsys):
    out = tmp_path / "fleet.csv"
    assert main(["batch", "-j", "1", str(tmp_path / "*.gpx"), "--sharp-radius", "150", "-o", str(out)]) == 1
    err = capsys.readouterr().err
    assert "no file matches this pattern" in err and "no logs to run" in err
    assert not out.exists()


def test_each_log_brings_its_own_hand_marks(fleet, tmp_path, fake_pipeline):
    MarkStore.load(fleet["gentle"]).add(20.0, 40.0, "=cattle grid")
    out = tmp_path / "fleet.csv"
    main(["batch", "-j", "1", str(fleet["tight"]), str(fleet["gentle"]), "--sharp-radius", "150", "-o", str(out)])
    marked = [r for r in _csv_rows(out.read_text("utf-8")) if r["kind"] == "marked"]
    assert [(r["log"], r["id"], r["note"]) for r in marked] == [(str(fleet["gentle"]), "M1", neutralise("=cattle grid"))]
    out2 = tmp_path / "no-marks.csv"
    main(["batch", "-j", "1", str(fleet["gentle"]), "--sharp-radius", "150", "--no-marks", "-o", str(out2)])
    assert _csv_rows(out2.read_text("utf-8")) == []


def test_a_corrupt_sidecar_fails_only_its_own_log(fleet, tmp_path, fake_pipeline):
    (fleet["gentle"].parent / (fleet["gentle"].name + ".marks.json")).write_text("{not json", encoding="utf-8")
    out = tmp_path / "fleet.csv"
    assert main(["batch", "-j", "1", str(fleet["tight"]), str(fleet["gentle"]), "--sharp-radius", "150", "-o", str(out)]) == 1
    rows = _csv_rows(out.read_text("utf-8"))
    assert [r["kind"] for r in rows] == ["sharp", "error"]
    assert rows[1]["note"].endswith("or run with --no-marks")


def test_log_names_that_look_like_formulas_are_neutralised(tmp_path, fake_pipeline):
    p = _log(tmp_path, "=1+1-tight.gpx")
    out = tmp_path / "fleet.csv"
    assert main(["batch", "-j", "1", str(tmp_path / "*.gpx"), "--sharp-radius", "150", "-o", str(out)]) == 0
    assert _csv_rows(out.read_text("utf-8"))[0]["log"] == str(p)  # a path starts with "/" here
    # ...but a relative name starting with "=" gets the quote (OWASP CSV Injection guard)
    res = [LogResult(log="=1+1-tight.gpx", ok=False, error="=oops")]
    from survey.batch import batch_rows

    _, rows = batch_rows(res)
    assert rows[0][0] == "'=1+1-tight.gpx" and rows[0][batch_columns().index("note")] == "'=oops"


# ---------------------------------------------------------------------------------------------
# Formats


def test_xlsx_has_sections_logs_and_run_settings_sheets(fleet, tmp_path, fake_pipeline):
    out = tmp_path / "fleet.xlsx"
    assert main(["batch", "-j", "1", str(fleet["tight"].parent), "--sharp-radius", "150", "-o", str(out)]) == 1
    wb = openpyxl.load_workbook(out, read_only=True)
    assert wb.sheetnames == ["sections", "logs", "run settings"]
    sections = list(wb["sections"].iter_rows(values_only=True))
    assert sections[0][:3] == ("log", "id", "kind")
    assert [(r[0], r[2]) for r in sections[1:]] == [(str(fleet["tight"]), "sharp"), (str(fleet["bad"]), "error")]
    logs = {r[0]: r for r in wb["logs"].iter_rows(values_only=True)}
    assert logs[str(fleet["bad"])][1] == "failed"
    assert logs[str(fleet["tight"])][1] == "ok"
    # SHA-256 of the log bytes from hashlib (FIPS 180-4)
    assert logs[str(fleet["tight"])][5] == hashlib.sha256(fleet["tight"].read_bytes()).hexdigest()
    settings = {r[0]: (r[1] if len(r) > 1 else None) for r in wb["run settings"].iter_rows(values_only=True)}
    assert (settings["logs"], settings["logs_ok"], settings["logs_failed"]) == (3, 2, 1)
    assert settings["limit.sharp_radius_m"] == 150


def test_geojson_features_name_their_log_and_failed_logs_sit_in_the_foreign_member(fleet, tmp_path, fake_pipeline):
    out = tmp_path / "fleet.geojson"
    assert main(["batch", "-j", "1", str(fleet["tight"].parent), "--sharp-radius", "150", "-o", str(out)]) == 1
    doc = json.loads(out.read_text("utf-8"))
    assert doc["type"] == "FeatureCollection"  # RFC 7946 section 3.3
    [feat] = doc["features"]
    assert feat["properties"]["log"] == str(fleet["tight"])
    assert feat["geometry"]["type"] == "LineString"
    # The section runs 200-300 m along the road: 101 stations at 1 m (ends included)
    assert len(feat["geometry"]["coordinates"]) == 101
    logs = {e["log"]: e for e in doc["trackframe"]["logs"]}
    assert logs[str(fleet["bad"])]["status"] == "failed"
    assert "latitude 95.0 out of range" in logs[str(fleet["bad"])]["error"]


def test_csv_on_stdout_keeps_progress_and_summary_on_stderr(fleet, fake_pipeline, capsys):
    assert main(["batch", "-j", "1", str(fleet["tight"]), "--sharp-radius", "150", "-o", "-"]) == 0
    cap = capsys.readouterr()
    assert [r["id"] for r in _csv_rows(cap.out)] == ["S1"]
    assert "written to stdout" in cap.err and "1/1 done" in cap.err


def test_gpx_output_is_refused_before_any_work(fleet, tmp_path, fake_pipeline, capsys):
    assert main(["batch", "-j", "1", str(fleet["tight"]), "--sharp-radius", "150", "-o", str(tmp_path / "x.gpx")]) == 1
    assert "batch writes .csv, .xlsx or .geojson" in capsys.readouterr().err
    assert fake_pipeline == []


def test_existing_output_is_refused_before_any_work_and_kept(fleet, tmp_path, fake_pipeline, capsys):
    out = tmp_path / "fleet.csv"
    out.write_text("keep me", encoding="utf-8")
    assert main(["batch", "-j", "1", str(fleet["tight"]), "--sharp-radius", "150", "-o", str(out)]) == 1
    assert "already exists; use --force" in capsys.readouterr().err
    assert out.read_text("utf-8") == "keep me" and fake_pipeline == []
    assert main(["batch", "-j", "1", str(fleet["tight"]), "--sharp-radius", "150", "-o", str(out), "--force"]) == 0
    assert out.read_text("utf-8").startswith("log,id,kind")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["fleet", "fleet.csv"]  # no temporary file left


def test_a_write_error_leaves_nothing_behind(fleet, tmp_path, fake_pipeline, monkeypatch, capsys):
    import survey.batch

    def boom(*a, **k):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(survey.batch, "_write_csv", boom)
    out = tmp_path / "fleet.csv"
    assert main(["batch", "-j", "1", str(fleet["tight"]), "--sharp-radius", "150", "-o", str(out)]) == 1
    assert "cannot write: No space left on device" in capsys.readouterr().err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["fleet"]


# ---------------------------------------------------------------------------------------------
# Options


def test_flag_limit_options_and_presets_are_accepted(fleet, tmp_path, fake_pipeline):
    out = tmp_path / "fleet.geojson"
    assert main(["batch", "-j", "1", str(fleet["tight"]), "--preset", "road-80", "--design-speed", "100", "-o", str(out)]) == 0
    meta = json.loads(out.read_text("utf-8"))["trackframe"]
    assert meta["limit.design_speed_kmh"] == 100.0  # the option, not the preset's 80
    assert meta["limit.min_length_m"] == 10.0  # kept from the preset
    assert meta["setting.preset"] == "road-80"


def test_nothing_to_check_is_the_flag_error(fleet, tmp_path, fake_pipeline, capsys):
    assert main(["batch", "-j", "1", str(fleet["tight"]), "-o", str(tmp_path / "x.csv")]) == 2
    assert "nothing to check" in capsys.readouterr().err


@pytest.mark.parametrize("extra", [["--jobs", "0"], ["--jobs", "2", "--dask", "tcp://head:8786"], []])
def test_usage_mistakes_exit_with_status_2(fleet, tmp_path, extra):
    argv = ["batch", "-j", "1", str(fleet["tight"]), "--sharp-radius", "150", *extra]
    if extra:
        argv += ["-o", str(tmp_path / "x.csv")]
    with pytest.raises(SystemExit) as exc:
        main(argv)
    assert exc.value.code == 2


# ---------------------------------------------------------------------------------------------
# Progress


class _Clock:
    def __init__(self):
        self.t = 100.0

    def __call__(self):
        return self.t


def test_progress_without_a_terminal_prints_one_line_per_log_with_time_left():
    buf, clock = io.StringIO(), _Clock()
    p = Progress(4, stream=buf, tty=False, clock=clock)
    clock.t += 10.0
    p.update(LogResult("a.gpx", True))
    clock.t += 10.0
    p.update(failed("b.gpx", "b.gpx: no such file"))
    lines = buf.getvalue().splitlines()
    # 20 s for 2 logs -> 10 s per log; 2 logs left -> 20 s
    assert lines == [
        "[1/4 done, 0 failed, 0:30 left] a.gpx: 0 section(s)",
        "[2/4 done, 1 failed, 0:20 left] b.gpx: FAILED: b.gpx: no such file",
    ]
    assert "\r" not in buf.getvalue()


def test_progress_on_a_terminal_rewrites_one_line_and_prints_failures_above_it():
    buf, clock = io.StringIO(), _Clock()
    p = Progress(2, stream=buf, tty=True, clock=clock)
    clock.t += 5.0
    p.update(LogResult("a.gpx", True))
    p.update(failed("b.gpx", "b.gpx: no such file"))
    p.finish()
    text = buf.getvalue()
    assert text.count("\n") == 2  # the failure line, and the final newline after the bar
    assert "trackframe: failed: b.gpx: no such file\n" in text
    assert text.rstrip("\n").rsplit("\r", 1)[1].strip() == "[####################] 2/2 done, 1 failed, 0:00 left"


def test_logs_that_never_ran_do_not_shorten_the_estimate():
    clock = _Clock()
    p = Progress(3, stream=io.StringIO(), tty=False, clock=clock)
    p.update(failed("gone.gpx", "gone.gpx: no such file"), ran=False)
    assert p.time_left_s() is None
    clock.t += 30.0
    p.update(LogResult("a.gpx", True))
    assert p.time_left_s() == pytest.approx(30.0)  # 30 s per log that ran, one left


def test_run_batch_returns_results_in_the_order_given(fleet, fake_pipeline):
    logs = [str(fleet["gentle"]), str(fleet["bad"]), str(fleet["tight"])]
    seen = []
    res = run_batch(logs, BatchOptions(Limits(sharp_radius_m=150.0)), jobs=1, on_result=seen.append)
    assert [r.log for r in res] == logs and [r.ok for r in res] == [True, False, True]
    assert len(seen) == 3


def test_worker_processes_start_with_one_blas_thread_and_the_environment_is_restored(monkeypatch):
    import os

    from survey.batch import WORKER_THREAD_ENV, _worker_environment

    monkeypatch.delenv("OPENBLAS_NUM_THREADS", raising=False)
    monkeypatch.setenv("OMP_NUM_THREADS", "3")  # the user's own choice is kept
    with _worker_environment():
        assert os.environ["OPENBLAS_NUM_THREADS"] == WORKER_THREAD_ENV["OPENBLAS_NUM_THREADS"] == "1"
        assert os.environ["OMP_NUM_THREADS"] == "3"
    assert "OPENBLAS_NUM_THREADS" not in os.environ and os.environ["OMP_NUM_THREADS"] == "3"


def test_big_logs_are_handed_out_first_and_missing_ones_last(tmp_path):
    from survey.batch import largest_first

    small, big, mid = _log(tmp_path, "s.gpx", "x"), _log(tmp_path, "b.gpx", "x" * 300), _log(tmp_path, "m.gpx", "x" * 20)
    names = [str(small), str(tmp_path / "gone.gpx"), str(big), str(mid)]
    assert largest_first(names) == [2, 3, 0, 1]
