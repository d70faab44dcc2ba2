"""The command line: exit codes, one-line errors, no tracebacks, no stray files."""

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from tui.cli import main

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo_tracks"

GOOD_CSV = "time,lat,lon,height_m\n" + "".join(
    f"2026-05-01T10:00:{s:02d}Z,{50 + s * 1e-5:.6f},{8 + s * 2e-5:.6f},{100 + s * 0.1:.1f}\n" for s in range(30)
)


def run_cli(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture
def good_csv(tmp_path):
    p = tmp_path / "walk.csv"
    p.write_text(GOOD_CSV)
    return p


def test_info_prints_a_summary_and_exits_0(capsys, good_csv):
    code, out, err = run_cli(capsys, "info", good_csv)
    assert code == 0 and err == ""
    assert "30 kept of 30 read" in out and "local ENU" in out


def test_info_json_is_machine_readable(capsys, good_csv):
    code, out, _ = run_cli(capsys, "info", good_csv, "--json")
    info = json.loads(out)
    assert code == 0 and info["fixes"] == 30 and info["format"] == "csv"
    assert info["duration_s"] == 29.0
    assert info["frame"]["kind"] == "enu"


def test_info_with_projected_crs(capsys, good_csv):
    code, out, _ = run_cli(capsys, "info", good_csv, "--crs", "utm", "--json")
    # 8 E lies in UTM zone 32 (zone = floor((lon + 180) / 6) + 1, common practice).
    assert code == 0 and json.loads(out)["frame"]["crs"] == "EPSG:32632"


@pytest.mark.parametrize(
    "name, content, message",
    [
        ("missing.csv", None, "no such file"),
        ("empty.csv", "", "empty"),
        ("one.csv", "time,lat,lon\n2026-05-01T10:00:00Z,50,8\n", "need at least 2"),
        ("same.csv", "time,lat,lon\n" + "".join(f"{1_700_000_000 + s},50,8\n" for s in range(5)), "one position"),
        ("cols.csv", "when,x,y\n1,2,3\n", "lat"),
        ("range.csv", "time,lat,lon\n1,95,8\n2,50,8\n", "line 2"),
        ("garbage.csv", None, ""),
        ("backwards.csv", "time,lat,lon\n" + "".join(f"{t},50,{8 + i * 1e-4}\n" for i, t in enumerate([5000, 5001, 10, 11])), "backwards"),
    ],
)
def test_bad_input_gives_one_line_naming_the_file_and_exit_1(capsys, tmp_path, name, content, message):
    path = tmp_path / name
    if name == "garbage.csv":
        path.write_bytes(bytes(range(256)) * 20)
    elif content is not None:
        path.write_text(content)
    code, out, err = run_cli(capsys, "info", path)
    assert code == 1 and out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("trackframe: error: ")
    assert str(path) in lines[0] and message in lines[0]


def test_a_directory_is_refused(capsys, tmp_path):
    code, _, err = run_cli(capsys, "info", tmp_path)
    assert code == 1 and "is a directory" in err


def test_usage_errors_exit_2(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["info"])
    assert exc.value.code == 2
    with pytest.raises(SystemExit) as exc:
        main(["no-such-command"])
    assert exc.value.code == 2


def test_an_option_value_out_of_range_is_a_usage_error_without_output(capsys, tmp_path, good_csv):
    # checked after parsing, but a usage mistake all the same: one line, exit status 2 (as
    # argparse's own; common practice for Unix tools), nothing written
    out_csv = tmp_path / "out.csv"
    code, out, err = run_cli(capsys, "profile", good_csv, "--samples", "1", "-o", out_csv)
    assert code == 2 and err.count("\n") == 1 and "--samples" in err
    assert not out_csv.exists()


def test_every_command_has_help(capsys):
    from survey.cli import COMMANDS, build_parser
    from tui.commands import demo, view

    parser = build_parser(extra=(demo, view))
    available = parser._subparsers._group_actions[0].choices  # argparse keeps them here
    for name in available:
        with pytest.raises(SystemExit) as exc:
            main([name, "--help"])
        assert exc.value.code == 0
        assert "usage: trackframe" in capsys.readouterr().out
    assert set(available) == set(COMMANDS) | {"demo", "view"}


def test_console_script_reports_errors_without_traceback(tmp_path):
    garbage = tmp_path / "noise.bin"
    garbage.write_bytes(os.urandom(4096))
    proc = subprocess.run(
        [sys.executable, "-m", "tui.cli", "info", str(garbage)], capture_output=True, text=True, cwd=ROOT
    )
    assert proc.returncode == 1
    assert "Traceback" not in proc.stderr and proc.stderr.count("\n") == 1


@pytest.mark.parametrize("log", ["drone_mast_orbit.csv", "van_route_tunnel.nmea", "ridge_trail_phone.gpx"])
def test_info_reads_every_demo_log(capsys, log):
    code, out, err = run_cli(capsys, "info", DEMO / log, "--json")
    assert code == 0, err
    info = json.loads(out)
    assert info["fixes"] > 400 and info["path_length_m"] > 500


def test_demo_runs_on_the_bundled_log(capsys):
    code, out, err = run_cli(capsys, "demo")
    assert code == 0, err
    assert "ridge_trail_phone.gpx" in out


def test_the_computing_package_never_imports_the_interface():
    # Architecture rule (DEVELOPERS.md): survey/ never imports tui/.
    import ast

    offenders = []
    for path in (ROOT / "survey").rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text())):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                names = [node.module]
            offenders += [f"{path.name}: {n}" for n in names if n == "tui" or n.startswith("tui.")]
    assert offenders == []


def test_profile_measures_speed_and_course_unless_positions_only(tmp_path):
    # The demo van's NMEA log reports speed and course over ground (RMC): used by default, left
    # out with --positions-only.
    van = Path(__file__).resolve().parents[1] / "demo_tracks" / "van_route_tunnel.nmea"
    both, only = tmp_path / "both.csv", tmp_path / "only.csv"
    assert main(["profile", str(van), "-o", str(both)]) == 0
    assert main(["profile", str(van), "--positions-only", "-o", str(only)]) == 0
    assert "receiver_velocity=" in both.read_text()
    assert "receiver_velocity=" not in only.read_text()


def test_a_numerically_singular_smoother_gives_one_line_naming_the_log_and_no_output(capsys, tmp_path, good_csv,
                                                                                      monkeypatch):
    # Should the banded system ever be singular on some log, the user gets the usual one-line
    # error naming the log and exit status 1, and no half-written output.
    import numpy as np

    import survey.profile_build as pb

    def singular(*a, **k):
        raise np.linalg.LinAlgError("7-th leading minor not positive definite")

    monkeypatch.setattr(pb, "build_profile", singular)
    out_csv = tmp_path / "out.csv"
    code, out, err = run_cli(capsys, "profile", good_csv, "-o", out_csv)
    lines = err.strip().splitlines()
    assert code == 1 and len(lines) == 1 and lines[0].startswith("trackframe: error: ")
    assert str(good_csv) in lines[0] and "singular" in lines[0]
    assert not out_csv.exists()
