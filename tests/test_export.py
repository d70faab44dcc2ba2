"""Every export read back with an independent reader (csv, openpyxl, json, gpxpy) and compared.

Formats: CSV RFC 4180; GeoJSON RFC 7946; GPX 1.1 (topografix schema); formula injection per
OWASP "CSV Injection" (prefix = + - @ tab CR text with a single quote, keep numbers numeric).
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
from datetime import datetime, timezone

import gpxpy
import openpyxl
import pytest

import survey
from survey.design import CAUTION, Limits
from survey.errors import InputError
from survey.export import (
    SECTION_TABLE_COLUMNS,
    SHEET_PROFILE,
    SHEET_RUN,
    SHEET_SECTIONS,
    RunInfo,
    neutralise,
    write_findings,
)
from survey.marks import Mark
from survey.sections import all_sections

try:
    from tests.test_sections_support import road_profile
except ImportError:  # tests/ not a package
    from test_sections_support import road_profile

INF = math.inf
ROAD = [(200, INF, 0), (100, 100.0, 1), (200, INF, 0), (100, 300.0, -1), (100, INF, 0)]
NASTY_NOTES = [
    '=HYPERLINK("x")',
    "+1+2",
    "-2+3",
    "@SUM(A1)",
    "\tlead tab",
    "\rlead cr",
    'plain, with "quotes", commas\nand a newline & <angle> brackets',
]
SHA = "ab" * 32


@pytest.fixture(scope="module")
def findings():
    # Downhill 3.5 % so grades are negative numbers (must stay numbers, never quote-prefixed).
    prof = road_profile(ROAD, grade=-0.035)
    marks = [Mark(i + 1, 20.0 + 15 * i, 30.0 + 15 * i, note) for i, note in enumerate(NASTY_NOTES)]
    limits = Limits(sharp_radius_m=150.0, design_speed_kmh=100.0, superelevation=0.08, friction=0.12)
    secs = all_sections(prof, limits, marks)
    run = RunInfo(input_path="=cmd|' /C calc'!A0.gpx", input_sha256=SHA, frame=prof.frame, limits=limits.as_dict(), settings={"step_m": 1.0})
    return prof, secs, run


def _num(text: str) -> float:
    return math.nan if text == "" else float(text)


# ---------------------------------------------------------------------------------------------
# neutralise


@pytest.mark.parametrize("text", ["=1+1", "+1", "-1", "@x", "\tx", "\rx"])
def test_formula_like_text_is_quote_prefixed(text):
    # OWASP CSV Injection: prefix text starting with = + - @ tab CR with a single quote.
    assert neutralise(text) == "'" + text


@pytest.mark.parametrize("value", [-3.5, -1, 0.0, None, "S1", "plain text", " =not first"])
def test_numbers_and_ordinary_text_are_untouched(value):
    assert neutralise(value) == value


# ---------------------------------------------------------------------------------------------
# CSV


def test_csv_round_trips_through_the_csv_module(tmp_path, findings):
    prof, secs, run = findings
    out = tmp_path / "findings.csv"
    write_findings(out, secs, prof, run)
    with open(out, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert list(rows[0].keys()) == [c for c, _ in SECTION_TABLE_COLUMNS]
    assert [r["id"] for r in rows] == [s.id for s in secs]
    for r, s in zip(rows, secs):
        for name in ("start_chainage_m", "end_chainage_m", "length_m", "start_lat_deg", "end_lon_deg",
                     "max_lateral_accel_mps2", "mean_grade_pct", "start_time_s", "balance_speed_kmh"):
            expected = getattr(s, name)
            got = _num(r[name])
            assert (math.isnan(got) and math.isnan(expected)) or got == expected, (s.id, name)


def test_csv_uses_crlf_record_ends_per_rfc4180(tmp_path, findings):
    prof, secs, run = findings
    out = tmp_path / "f.csv"
    write_findings(out, secs, prof, run)
    raw = out.read_bytes()
    assert raw.count(b"\r\n") >= len(secs) + 1
    assert raw.splitlines()[0].endswith(b"caution")


def test_csv_neutralises_formula_notes_and_keeps_numbers_numeric(tmp_path, findings):
    prof, secs, run = findings
    out = tmp_path / "f.csv"
    write_findings(out, secs, prof, run)
    with open(out, newline="", encoding="utf-8") as fh:
        rows = {r["id"]: r for r in csv.DictReader(fh)}
    for i, note in enumerate(NASTY_NOTES, start=1):
        assert rows[f"M{i}"]["note"] == neutralise(note)
    assert rows["M1"]["note"] == "'=HYPERLINK(\"x\")"
    assert rows["M7"]["note"] == NASTY_NOTES[-1]  # ordinary text comes back exactly
    # Grade is -3.5 % by construction: written as a plain negative number, no quote.
    assert rows["S1"]["mean_grade_pct"].startswith("-3.5")
    assert float(rows["S1"]["mean_grade_pct"]) == pytest.approx(-3.5)


def test_csv_to_stdout(findings):
    prof, secs, run = findings
    buf = io.StringIO()
    assert write_findings("-", secs, prof, run, stdout=buf) == "csv"
    rows = list(csv.reader(io.StringIO(buf.getvalue(), newline="")))
    assert len(rows) == len(secs) + 1


def test_design_rows_carry_the_caution(tmp_path, findings):
    prof, secs, run = findings
    out = tmp_path / "f.csv"
    write_findings(out, secs, prof, run)
    with open(out, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    design = [r for r in rows if r["kind"] == "design"]
    assert design and all(r["caution"] == CAUTION for r in design)
    assert all(r["caution"] == "" for r in rows if r["kind"] != "design")


# ---------------------------------------------------------------------------------------------
# XLSX


def test_xlsx_has_sections_profile_and_run_settings_sheets(tmp_path, findings):
    prof, secs, run = findings
    out = tmp_path / "f.xlsx"
    write_findings(out, secs, prof, run)
    wb = openpyxl.load_workbook(out, read_only=True)
    assert wb.sheetnames == [SHEET_SECTIONS, SHEET_PROFILE, SHEET_RUN]
    rows = list(wb[SHEET_SECTIONS].iter_rows(values_only=True))
    assert list(rows[0]) == [c for c, _ in SECTION_TABLE_COLUMNS]
    header = rows[0]
    for row, s in zip(rows[1:], secs):
        rec = dict(zip(header, row))
        assert rec["id"] == s.id and rec["kind"] == s.kind
        # openpyxl writes numbers as "%.16g" (16 significant digits), hence rel 1e-15.
        assert rec["start_chainage_m"] == pytest.approx(s.start_chainage_m, rel=1e-15)
        assert rec["length_m"] == pytest.approx(s.length_m, rel=1e-15)
        assert rec["start_lat_deg"] == pytest.approx(s.start_lat_deg, rel=1e-15)
        assert isinstance(rec["mean_grade_pct"], float)  # a number, not text
        assert rec["mean_grade_pct"] == pytest.approx(s.mean_grade_pct, rel=1e-15)
    assert len(rows) == len(secs) + 1


def test_xlsx_profile_sheet_holds_every_station(tmp_path, findings):
    prof, secs, run = findings
    out = tmp_path / "f.xlsx"
    write_findings(out, secs, prof, run)
    ws = openpyxl.load_workbook(out, read_only=True)[SHEET_PROFILE]
    rows = list(ws.iter_rows(values_only=True))
    assert len(rows) == len(prof) + 1
    col = rows[0].index("chainage_m")
    rad = rows[0].index("radius_m")
    assert [r[col] for r in rows[1:]] == prof.chainage_m.tolist()
    assert rows[1 + 250][rad] == pytest.approx(100.0)  # on the R 100 m arc (construction)
    assert rows[1 + 50][rad] is None  # a straight: infinite radius -> empty cell


def test_xlsx_profile_longer_than_a_sheet_is_thinned_and_says_so(tmp_path, findings, monkeypatch):
    # Excel's sheet limit is 1,048,576 rows; shrink it to 101 to exercise the rule cheaply.
    prof, secs, run = findings
    monkeypatch.setattr("survey.export.xlsx_out.MAX_SHEET_ROWS", 101)
    out = tmp_path / "f.xlsx"
    write_findings(out, secs, prof, run)
    wb = openpyxl.load_workbook(out, read_only=True)
    rows = list(wb[SHEET_PROFILE].iter_rows(values_only=True))
    stride = math.ceil(len(prof) / 100)  # 701 stations -> every 8th
    assert len(rows) - 1 == math.ceil(len(prof) / stride) <= 100
    assert [r[0] for r in rows[1:3]] == [0.0, float(stride)]
    settings = {r[0]: (r[1] if len(r) > 1 else None) for r in wb[SHEET_RUN].iter_rows(values_only=True)}
    assert settings["profile_sheet"].startswith(f"every {stride}th station")


def test_xlsx_notes_come_back_as_text_not_formulas(tmp_path, findings):
    prof, secs, run = findings
    out = tmp_path / "f.xlsx"
    write_findings(out, secs, prof, run)
    ws = openpyxl.load_workbook(out)[SHEET_SECTIONS]  # full mode: data_type available
    header = [c.value for c in ws[1]]
    note_col = header.index("note") + 1
    grade_col = header.index("mean_grade_pct") + 1
    by_id = {ws.cell(r, 1).value: r for r in range(2, ws.max_row + 1)}
    cell = ws.cell(by_id["M1"], note_col)
    assert cell.data_type == "s" and cell.value == "'=HYPERLINK(\"x\")"
    for i, note in enumerate(NASTY_NOTES, start=1):
        assert ws.cell(by_id[f"M{i}"], note_col).data_type == "s"
    grade = ws.cell(by_id["S1"], grade_col)
    assert grade.data_type == "n" and grade.value == pytest.approx(-3.5)


def test_xlsx_run_settings_name_version_input_checksum_frame_thresholds(tmp_path, findings):
    prof, secs, run = findings
    out = tmp_path / "f.xlsx"
    write_findings(out, secs, prof, run)
    rows = list(openpyxl.load_workbook(out, read_only=True)[SHEET_RUN].iter_rows(values_only=True))
    settings = {r[0]: (r[1] if len(r) > 1 else None) for r in rows[1:]}  # empty cells may be trimmed
    assert settings["tool_version"] == survey.__version__
    assert settings["input_file"] == neutralise(run.input_path)  # a formula-like file name is neutralised
    assert settings["input_sha256"] == SHA
    assert settings["frame"] == prof.frame
    assert settings["limit.sharp_radius_m"] == 150.0
    assert settings["limit.design_min_radius_m"] == pytest.approx(393.7, abs=0.05)  # ERA 2002 ch. 8
    assert settings["caution"] == CAUTION


# ---------------------------------------------------------------------------------------------
# GeoJSON


def _strict_json(path):
    def refuse(name):
        raise AssertionError(f"non-standard JSON constant {name}")

    return json.loads(path.read_text("utf-8"), parse_constant=refuse)


def test_geojson_is_a_feature_collection_of_linestrings_lon_lat(tmp_path, findings):
    prof, secs, run = findings
    out = tmp_path / "f.geojson"
    write_findings(out, secs, prof, run)
    doc = _strict_json(out)
    assert doc["type"] == "FeatureCollection"
    assert [f["id"] for f in doc["features"]] == [s.id for s in secs]
    sharp = next(f for f in doc["features"] if f["id"] == "S1")
    assert sharp["geometry"]["type"] == "LineString"
    coords = sharp["geometry"]["coordinates"]
    # S1 spans stations 200..300: 101 positions, [lon, lat, ellipsoidal height] (RFC 7946 3.1.1)
    assert len(coords) == 101
    for k, (lon, lat, h) in zip(range(200, 301), coords):
        assert lon == pytest.approx(prof.lon_deg[k], abs=5e-9)
        assert lat == pytest.approx(prof.lat_deg[k], abs=5e-9)
        assert h == pytest.approx(prof.height_m[k], abs=5e-4)


def test_geojson_properties_match_sections_and_design_carries_caution(tmp_path, findings):
    prof, secs, run = findings
    out = tmp_path / "f.geojson"
    write_findings(out, secs, prof, run)
    doc = _strict_json(out)
    for f, s in zip(doc["features"], secs):
        p = f["properties"]
        assert p["kind"] == s.kind and p["start_chainage_m"] == s.start_chainage_m
        assert p["note"] == s.note  # data format: text kept exactly
        assert (p["confidence"] is None) == math.isnan(s.confidence)
        assert ("caution" in p) == (s.kind == "design")
    assert doc["trackframe"]["input_sha256"] == SHA
    assert doc["trackframe"]["caution"] == CAUTION


def test_geojson_omits_height_that_is_not_ellipsoidal(tmp_path):
    prof = road_profile(ROAD, height_ref="msl")
    secs = all_sections(prof, Limits(sharp_radius_m=150.0))
    out = tmp_path / "f.geojson"
    write_findings(out, secs, prof, RunInfo("x.gpx", SHA))
    coords = _strict_json(out)["features"][0]["geometry"]["coordinates"]
    assert all(len(c) == 2 for c in coords)


# ---------------------------------------------------------------------------------------------
# GPX


def test_gpx_has_one_track_per_section_read_back_by_gpxpy(tmp_path, findings):
    prof, secs, run = findings
    out = tmp_path / "f.gpx"
    write_findings(out, secs, prof, run)
    text = out.read_text("utf-8")
    assert 'xmlns="http://www.topografix.com/GPX/1/1"' in text  # GPX 1.1 namespace
    assert text.count("xmlns") == 1  # declared once (gpxpy reads only a single declaration)
    from lxml import etree

    tags = {el.tag for el in etree.fromstring(out.read_bytes()).iter()}
    assert all(t.startswith("{http://www.topografix.com/GPX/1/1}") for t in tags)
    gpx = gpxpy.parse(text)
    assert [t.name for t in gpx.tracks] == [f"{s.id} {s.kind}" for s in secs]
    sharp = next(t for t in gpx.tracks if t.name == "S1 sharp")
    pts = sharp.segments[0].points
    assert len(pts) == 101
    assert pts[0].latitude == prof.lat_deg[200] and pts[-1].longitude == prof.lon_deg[300]
    assert pts[0].elevation == pytest.approx(prof.height_m[200], abs=1e-6)
    t0 = datetime.fromtimestamp(prof.time_s[200], timezone.utc)
    assert abs((pts[0].time - t0).total_seconds()) < 1e-3


def test_gpx_descriptions_keep_notes_and_design_caution(tmp_path, findings):
    prof, secs, run = findings
    out = tmp_path / "f.gpx"
    write_findings(out, secs, prof, run)
    gpx = gpxpy.parse(out.read_text("utf-8"))
    by_name = {t.name: t for t in gpx.tracks}
    assert NASTY_NOTES[-1] in by_name["M7 marked"].description
    assert CAUTION in next(t for t in gpx.tracks if t.type == "design").description


# ---------------------------------------------------------------------------------------------
# Safety of writes


@pytest.mark.parametrize("ext", [".csv", ".xlsx", ".geojson", ".gpx"])
def test_existing_file_is_not_overwritten_without_force(tmp_path, findings, ext):
    prof, secs, run = findings
    out = tmp_path / f"f{ext}"
    out.write_bytes(b"keep me")
    with pytest.raises(InputError, match="--force"):
        write_findings(out, secs, prof, run)
    assert out.read_bytes() == b"keep me"
    write_findings(out, secs, prof, run, force=True)
    assert out.read_bytes() != b"keep me"


def test_unknown_extension_is_a_clear_error(tmp_path, findings):
    prof, secs, run = findings
    with pytest.raises(InputError, match=r"\.csv, \.xlsx, \.geojson or \.gpx"):
        write_findings(tmp_path / "f.pdf", secs, prof, run)


def test_error_while_writing_leaves_nothing_behind(tmp_path, findings, monkeypatch):
    prof, secs, run = findings
    out = tmp_path / "f.geojson"
    out.write_bytes(b"old")

    def half_then_fail(fh, *args):
        fh.write('{"type": "FeatureCollection", "features": [')
        raise OSError(28, "No space left on device")

    monkeypatch.setattr("survey.export.write_sections_geojson", half_then_fail)
    with pytest.raises(InputError, match="No space left"):
        write_findings(out, secs, prof, run, force=True)
    assert out.read_bytes() == b"old"
    assert sorted(os.listdir(tmp_path)) == ["f.geojson"]


def test_run_info_for_log_reads_the_checksum(tmp_path):
    import hashlib

    log = tmp_path / "kite-hill.nmea"
    log.write_bytes(b"$GPGGA,invented*00\r\n")
    prof = road_profile(ROAD)
    run = RunInfo.for_log(log, prof, Limits(sharp_radius_m=80.0))
    assert run.input_sha256 == hashlib.sha256(log.read_bytes()).hexdigest()  # hashlib, FIPS 180-4
    assert run.frame == prof.frame and run.limits["sharp_radius_m"] == 80.0
