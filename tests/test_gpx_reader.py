"""GPX reader: what a GPX 1.0 / 1.1 file becomes as a Track.

Expected values are read off the fixture files by hand; times are converted with the Python
standard library's datetime (an outside oracle) and the same files are cross-checked with gpxpy.
Element meanings: GPX 1.1 schema, http://www.topografix.com/GPX/1/1 (wptType: ele in metres,
time xsd:dateTime, sat, hdop); GPX 1.0 schema, http://www.topografix.com/GPX/1/0.
"""

from __future__ import annotations

from datetime import datetime, timezone
from pathlib import Path

import gpxpy
import numpy as np
import pytest

from survey.errors import InputError
from survey.readers import read_log
from survey.readers.gpx import read_gpx
from survey.track import HEIGHT_MSL

DATA = Path(__file__).parent / "data" / "gpx"
MODES = ("auto", "safe")


def utc(*args) -> float:
    """Epoch seconds of a UTC civil time (stdlib datetime as the oracle)."""
    return datetime(*args, tzinfo=timezone.utc).timestamp()


def read(name: str, mode: str = "auto"):
    path = DATA / name
    return read_gpx(str(path), path.read_bytes(), mode=mode)


def gpx_doc(points: str, ns: str = "http://www.topografix.com/GPX/1/1", version: str = "1.1") -> str:
    return (f'<?xml version="1.0" encoding="UTF-8"?>\n<gpx version="{version}" creator="t" xmlns="{ns}">'
            f"<trk><trkseg>{points}</trkseg></trk></gpx>\n")


@pytest.mark.parametrize("mode", MODES)
def test_schema_1_1_sample_reads_track_points_only(mode):
    # GPX 1.1 schema: gpx/trk/trkseg/trkpt are the track; wpt, rte and metadata are not fixes.
    t = read("schema11_sample.gpx", mode)
    np.testing.assert_array_equal(t.lat_deg, [51.123456, 51.1235, 51.124])
    np.testing.assert_array_equal(t.lon_deg, [-2.654321, -2.6543, -2.654])
    np.testing.assert_array_equal(t.height_m, [101.25, 101.5, 102.0])
    assert t.source.format == "gpx-1.1"


@pytest.mark.parametrize("mode", MODES)
def test_schema_1_1_sample_times_are_utc_epoch_seconds(mode):
    # 07:15:31.250Z; 09:16:00+02:00 is 07:16:00 UTC (xsd:dateTime offset; stdlib datetime oracle).
    t = read("schema11_sample.gpx", mode)
    expected = [utc(2023, 9, 14, 7, 15, 30), utc(2023, 9, 14, 7, 15, 31, 250000), utc(2023, 9, 14, 7, 16)]
    np.testing.assert_allclose(t.time_s, expected, rtol=0, atol=1e-6)


def test_schema_1_1_sample_extension_time_and_ele_are_not_the_points():
    # The second point's extension carries <time>1999...</time> and <ele>-5</ele>; GPX 1.1 schema:
    # extensions are foreign content, the point's own ele/time are direct children.
    t = read("schema11_sample.gpx")
    assert t.height_m[1] == 101.5
    assert t.time_s[1] > utc(2020, 1, 1)


def test_schema_1_1_sample_segments_hdop_and_satellites():
    t = read("schema11_sample.gpx")
    np.testing.assert_array_equal(t.segment, [0, 0, 1])
    np.testing.assert_array_equal(t.hdop, [0.8, 0.7, np.nan])
    np.testing.assert_array_equal(t.satellites, [9, 10, np.nan])


def test_schema_1_1_sample_agrees_with_gpxpy():
    # gpxpy (outside reference reader) on the same file.
    path = DATA / "schema11_sample.gpx"
    ref = gpxpy.parse(path.read_text(encoding="utf-8"))
    pts = [p for trk in ref.tracks for seg in trk.segments for p in seg.points]
    t = read("schema11_sample.gpx")
    np.testing.assert_array_equal(t.lat_deg, [p.latitude for p in pts])
    np.testing.assert_array_equal(t.height_m, [p.elevation for p in pts])
    np.testing.assert_allclose(t.time_s, [p.time.timestamp() for p in pts], atol=1e-6, rtol=0)


def test_ele_is_height_above_mean_sea_level():
    # GPX 1.1 schema, wptType/ele: "Elevation (in meters) of the point" (above MSL / geoid).
    assert read("schema11_sample.gpx").height_ref == HEIGHT_MSL


@pytest.mark.parametrize("mode", MODES)
def test_gpx_1_0_namespace_lon_first_and_each_trk_its_own_segment(mode):
    t = read("gpx10_sample.gpx", mode)
    assert t.source.format == "gpx-1.0"
    np.testing.assert_array_equal(t.lat_deg, [49.75, 49.7502, 49.751])
    np.testing.assert_array_equal(t.lon_deg, [17.25, 17.2501, 17.251])
    np.testing.assert_array_equal(t.height_m, [240.5, 240.7, np.nan])
    np.testing.assert_array_equal(t.segment, [0, 0, 1])
    assert t.time_s[2] == utc(2022, 3, 1, 10, 5)
    assert t.hdop is None and t.satellites is None


@pytest.mark.parametrize("mode", MODES)
def test_route_points_are_read_when_there_is_no_track(mode):
    t = read("route_only.gpx", mode)
    np.testing.assert_array_equal(t.lat_deg, [54.40, 54.41, 54.42])
    np.testing.assert_array_equal(t.segment, [0, 0, 1])
    assert np.isnan(t.time_s).all()
    assert t.source.reader == "gpx-safe"


def test_read_log_dispatches_gpx_files_here():
    t = read_log(DATA / "gpx10_sample.gpx")
    assert len(t) == 3 and t.source.format == "gpx-1.0"


def test_utf8_bom_and_crlf_line_endings_are_accepted():
    body = gpx_doc('<trkpt lat="1.5" lon="2.5">\r\n<ele>3</ele>\r\n<time>2021-01-02T03:04:05Z</time></trkpt>')
    data = b"\xef\xbb\xbf" + body.replace("\n", "\r\n").encode()
    for mode in MODES:
        t = read_gpx("bom.gpx", data, mode=mode)
        assert (t.lat_deg[0], t.lon_deg[0], t.height_m[0]) == (1.5, 2.5, 3.0)
        assert t.time_s[0] == utc(2021, 1, 2, 3, 4, 5)


def test_whitespace_around_numbers_is_ignored():
    # xsd:decimal has whiteSpace="collapse" (XML Schema part 2).
    data = gpx_doc('<trkpt lat=" 10.25 " lon="\t-20.5"><ele>\n  7.5  </ele><hdop> 1.1 </hdop></trkpt>').encode()
    for mode in MODES:
        t = read_gpx("ws.gpx", data, mode=mode)
        assert (t.lat_deg[0], t.lon_deg[0], t.height_m[0], t.hdop[0]) == (10.25, -20.5, 7.5, 1.1)


def test_missing_time_and_missing_ele_become_nan_among_present_ones():
    pts = ('<trkpt lat="1" lon="1"><ele>5</ele><time>2021-01-01T00:00:00Z</time></trkpt>'
           '<trkpt lat="1" lon="2"><ele>6</ele></trkpt>'
           '<trkpt lat="1" lon="3"><time>2021-01-01T00:00:02Z</time></trkpt>')
    for mode in MODES:
        t = read_gpx("gaps.gpx", gpx_doc(pts).encode(), mode=mode)
        np.testing.assert_array_equal(t.height_m, [5, 6, np.nan])
        np.testing.assert_array_equal(t.time_s, [utc(2021, 1, 1), np.nan, utc(2021, 1, 1, 0, 0, 2)])


@pytest.mark.parametrize(
    "stamp, expected",
    [
        # stdlib datetime gives the expected instants.
        ("2020-02-29T23:59:59.123456789Z", utc(2020, 2, 29, 23, 59, 59) + 0.123456789),
        ("2020-02-29T23:59:59.5+02:00", utc(2020, 2, 29, 21, 59, 59, 500000)),
        ("2020-03-01T00:10:00-05:30", utc(2020, 3, 1, 5, 40)),
        ("2020-03-01T00:10:00+0530", utc(2020, 2, 29, 18, 40)),  # basic-format offset seen in logs
        ("2020-03-01T00:10:00", utc(2020, 3, 1, 0, 10)),  # no offset: read as UTC (common practice)
        ("1969-12-31T23:59:59.75Z", -0.25),
    ],
)
def test_time_offsets_and_fractions(stamp, expected):
    data = gpx_doc(f'<trkpt lat="0" lon="0"><time>{stamp}</time></trkpt>').encode()
    for mode in MODES:
        t = read_gpx("t.gpx", data, mode=mode)
        assert t.time_s[0] == pytest.approx(expected, abs=1e-6)


def test_time_without_offset_is_noted():
    t = read_gpx("t.gpx", gpx_doc('<trkpt lat="0" lon="0"><time>2020-03-01T00:10:00</time></trkpt>').encode())
    assert any("no UTC offset" in note for note in t.source.notes)


def test_prefixed_gpx_namespace_reads_like_the_default_namespace():
    # Namespaces in XML 1.0: a prefix bound to the GPX namespace names the same elements.
    plain = gpx_doc('<trkpt lat="3" lon="4"><ele>5</ele></trkpt>')
    prefixed = ('<g:gpx xmlns:g="http://www.topografix.com/GPX/1/1" version="1.1" creator="t"><g:trk>'
                '<g:trkseg><g:trkpt lat="3" lon="4"><g:ele>5</g:ele></g:trkpt></g:trkseg></g:trk></g:gpx>')
    a = read_gpx("a.gpx", plain.encode())
    b = read_gpx("b.gpx", prefixed.encode())
    assert (b.lat_deg[0], b.lon_deg[0], b.height_m[0]) == (a.lat_deg[0], a.lon_deg[0], a.height_m[0])
    assert b.source.reader == "gpx-safe"


def test_utf16_file_is_read_by_the_safe_path():
    text = gpx_doc('<trkpt lat="1" lon="2"><ele>3</ele></trkpt>').replace('encoding="UTF-8"', 'encoding="UTF-16"')
    t = read_gpx("u16.gpx", text.encode("utf-16"))
    assert (t.lat_deg[0], t.height_m[0]) == (1.0, 3.0) and t.source.reader == "gpx-safe"


def test_bulk_and_safe_paths_record_which_one_read_the_file():
    assert read("gpx10_sample.gpx").source.reader == "gpx-bulk"
    assert read("gpx10_sample.gpx", "safe").source.reader == "gpx-safe"
    # the extension inside a point sends the whole file to the safe path
    assert read("schema11_sample.gpx").source.reader == "gpx-safe"


GPX10 = "http://www.topografix.com/GPX/1/0"


@pytest.mark.parametrize("mode", MODES)
def test_gpx_1_0_speed_and_course_are_read_as_gpxpy_reads_them(mode):
    # GPX 1.0 schema: trkpt children course (degrees, true) and speed (m/s). Oracle: gpxpy.
    data = (DATA / "gpx10_sample.gpx").read_bytes()
    t = read_gpx("gpx10_sample.gpx", data, mode=mode)
    pts = [p for trk in gpxpy.parse(data.decode()).tracks for seg in trk.segments for p in seg.points]
    np.testing.assert_array_equal(t.speed_mps, [np.nan if p.speed is None else p.speed for p in pts])
    np.testing.assert_array_equal(t.course_deg, [np.nan if p.course is None else p.course for p in pts])
    assert t.source.reader == ("gpx-bulk" if mode == "auto" else "gpx-safe")


def test_gpx_1_0_speed_before_course_is_still_read():
    # Out of schema order: the bulk path must not drop them (it hands the file to the safe path).
    doc = gpx_doc('<trkpt lat="1.5" lon="2.5"><time>2021-01-02T03:04:05Z</time><speed>4.5</speed>'
                  '<course>270</course></trkpt>', ns=GPX10, version="1.0")
    t = read_gpx("order.gpx", doc.encode())
    assert t.speed_mps[0] == 4.5 and t.course_deg[0] == 270.0


@pytest.mark.parametrize("child, message", [("<speed>-2</speed>", "speed -2 is negative"),
                                            ("<course>400</course>", "course 400 is out of range")])
def test_gpx_1_0_impossible_speed_or_course_names_the_point(child, message):
    doc = gpx_doc(f'<trkpt lat="1.5" lon="2.5"><time>2021-01-02T03:04:05Z</time>{child}</trkpt>', ns=GPX10,
                  version="1.0")
    with pytest.raises(InputError) as err:
        read_gpx("bad.gpx", doc.encode())
    assert message in str(err.value) and "trkpt 1" in str(err.value)
