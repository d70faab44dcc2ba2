"""CSV reader: column detection, delimiters, times, height reference, units and bad input.

Expected epoch times come from numpy's own ISO 8601 parser (``numpy.datetime64``), independent of
the reader's use of ``datetime.fromisoformat``. Unit factors are exact by definition: 1 km/h =
1000/3600 m/s; 1 knot = 1852/3600 m/s (international nautical mile); 1 mph = 1609.344/3600 m/s
(international mile, 1959 agreement).
"""

from __future__ import annotations

import numpy as np
import pytest

from survey.errors import InputError
from survey.readers import read_log
from survey.readers.csvlog import read_csv
from survey.track import HEIGHT_ELLIPSOID, HEIGHT_MSL, HEIGHT_NONE, HEIGHT_UNKNOWN


def epoch_s(iso: str) -> float:
    """UNIX seconds of an ISO 8601 UTC time, by numpy.datetime64 (an independent parser)."""
    return (
        float(
            (np.datetime64(iso, "ns") - np.datetime64("1970-01-01T00:00:00", "ns"))
            / np.timedelta64(1, "ns")
        )
        / 1e9
    )


def csv_bytes(*lines: str, eol: str = "\n") -> bytes:
    return (eol.join(lines) + eol).encode("utf-8")


# --- column detection ----------------------------------------------------------------------------


def test_header_names_with_units_and_mixed_case_are_recognised():
    track = read_csv(
        "a.csv",
        csv_bytes(
            "Time,Latitude (deg),LONGITUDE (deg),Altitude [m],Speed (m/s),"
            "Horizontal_Accuracy,HDOP,Sats",
            "2024-05-01T12:00:00Z,48.1173,11.5167,545.4,3.5,2.5,0.9,8",
        ),
    )
    assert track.lat_deg[0] == 48.1173 and track.lon_deg[0] == 11.5167
    assert track.height_m[0] == 545.4
    assert track.speed_mps[0] == 3.5 and track.accuracy_m[0] == 2.5
    assert track.hdop[0] == 0.9 and track.satellites[0] == 8
    assert track.time_s[0] == epoch_s("2024-05-01T12:00:00")
    assert any("lat='Latitude (deg)'" in n for n in track.source.notes)


@pytest.mark.parametrize(
    "header",
    [
        "timestamp,lat,lon,ele",
        "utc,latitude,lng,elevation_m",
        "datetime,LAT,long,height",
        "epoch;Latitude;Longitude;alt",
        "time\tlat\tlon\taltitude",
    ],
)
def test_common_header_spellings_and_delimiters(header):
    delim = ";" if ";" in header else ("\t" if "\t" in header else ",")
    row = delim.join(["1714564800", "-33.5", "151.25", "12.5"])
    track = read_csv("a.csv", csv_bytes(header, row))
    assert (track.time_s[0], track.lat_deg[0], track.lon_deg[0], track.height_m[0]) == (
        1714564800.0,
        -33.5,
        151.25,
        12.5,
    )


def test_semicolon_file_with_decimal_commas():
    track = read_csv("a.csv", csv_bytes("time;lat;lon;alt", "1714564800,5;48,1173;11,5167;545,4"))
    assert track.time_s[0] == 1714564800.5
    assert (
        track.lat_deg[0] == 48.1173 and track.lon_deg[0] == 11.5167 and track.height_m[0] == 545.4
    )


def test_quoted_fields_and_utf8_bom_are_handled():
    data = '\ufeff"time","lat","lon","site"\n"1714564800","48.1","11.5","Fenwick Cut, north"\n'
    track = read_csv("a.csv", data.encode("utf-8"))
    assert len(track) == 1 and track.lat_deg[0] == 48.1


def test_utf16_spreadsheet_export_is_decoded():
    text = "time\tlat\tlon\n1714564800\t48.1\t11.5\n"
    track = read_csv("a.tsv", text.encode("utf-16"))  # encode("utf-16") writes a BOM
    assert len(track) == 1 and track.lon_deg[0] == 11.5


def test_explicit_mapping_overrides_detection():
    track = read_csv(
        "a.csv",
        csv_bytes("GPS Time,Y,X,lat,lon", "1714564800,48.5,11.5,0,0"),
        columns={"time": "GPS Time", "lat": "Y", "lon": "X"},
    )
    assert track.lat_deg[0] == 48.5 and track.lon_deg[0] == 11.5
    assert track.time_s[0] == 1714564800.0


def test_mapping_a_missing_column_lists_the_available_columns():
    with pytest.raises(InputError) as err:
        read_csv("a.csv", csv_bytes("t,Y,X", "1,2,3"), columns={"lat": "Northing"})
    text = str(err.value)
    assert "'Northing'" in text and "'t', 'Y', 'X'" in text


def test_mapping_an_unknown_role_is_an_input_error():
    with pytest.raises(InputError, match="unknown column role 'colour'"):
        read_csv("a.csv", csv_bytes("lat,lon", "1,2"), columns={"colour": "lat"})


def test_no_lat_lon_columns_lists_the_header():
    with pytest.raises(InputError) as err:
        read_csv("a.csv", csv_bytes("when,northing,easting", "1,5000000,400000"))
    assert "'when', 'northing', 'easting'" in str(err.value)


# --- times ---------------------------------------------------------------------------------------


def test_epoch_milliseconds_are_detected_by_magnitude():
    track = read_csv("a.csv", csv_bytes("time,lat,lon", "1714564800123,1,2", "1714564801123,1,2"))
    assert track.time_s.tolist() == pytest.approx([1714564800.123, 1714564801.123], abs=1e-6)
    assert any("milliseconds" in n for n in track.source.notes)


def test_iso_times_with_z_offsets_and_fractions():
    track = read_csv(
        "a.csv",
        csv_bytes(
            "time,lat,lon",
            "2024-05-01T12:00:00Z,1,2",
            "2024-05-01T14:00:01.25+02:00,1,2",
            "2024-05-01T07:00:02.5-05:00,1,2",
            "2024-05-01T12:00:03.123456789Z,1,2",
        ),
    )
    expected = [
        epoch_s("2024-05-01T12:00:00"),
        epoch_s("2024-05-01T12:00:01.25"),  # 14:00:01.25 at UTC+2
        epoch_s("2024-05-01T12:00:02.5"),  # 07:00:02.5 at UTC-5
        epoch_s("2024-05-01T12:00:03.123456789"),
    ]
    # Microsecond tolerance: nine-digit fractions are kept to the microsecond.
    assert track.time_s.tolist() == pytest.approx(expected, abs=1e-6)
    assert not any("no time zone" in n for n in track.source.notes)


def test_naive_iso_times_are_taken_as_utc_with_a_note():
    track = read_csv("a.csv", csv_bytes("time,lat,lon", "2024-05-01 12:00:00,1,2"))
    assert track.time_s[0] == epoch_s("2024-05-01T12:00:00")
    assert any("taken as UTC" in n for n in track.source.notes)


def test_separate_date_and_time_columns_are_joined():
    track = read_csv(
        "a.csv",
        csv_bytes("date,time,lat,lon", "2024-02-29,23:59:59Z,1,2", "2024-03-01,00:00:01Z,1,2"),
    )
    assert track.time_s.tolist() == [epoch_s("2024-02-29T23:59:59"), epoch_s("2024-03-01T00:00:01")]


def test_time_column_is_optional():
    track = read_csv("a.csv", csv_bytes("lat,lon", "1,2", "1.1,2"))
    assert np.isnan(track.time_s).all() and not track.has_time


def test_unparseable_time_names_the_line():
    with pytest.raises(InputError) as err:
        read_csv("a.csv", csv_bytes("time,lat,lon", "2024-05-01T12:00:00Z,1,2", "noon,1,2"))
    assert "line 3" in str(err.value) and "'noon'" in str(err.value)


# --- heights and units ---------------------------------------------------------------------------


def test_height_reference_is_unknown_unless_told():
    track = read_csv("a.csv", csv_bytes("lat,lon,alt", "1,2,3"))
    assert track.height_ref == HEIGHT_UNKNOWN


@pytest.mark.parametrize("ref", [HEIGHT_ELLIPSOID, HEIGHT_MSL])
def test_height_reference_from_the_caller(ref):
    assert read_csv("a.csv", csv_bytes("lat,lon,alt", "1,2,3"), height_ref=ref).height_ref == ref


@pytest.mark.parametrize(
    "name, ref",
    [
        ("ellipsoidal_height", HEIGHT_ELLIPSOID),
        ("h_ell", HEIGHT_ELLIPSOID),
        ("HAE (m)", HEIGHT_ELLIPSOID),
        ("alt_msl", HEIGHT_MSL),
        ("orthometric_height_m", HEIGHT_MSL),
    ],
)
def test_height_reference_from_the_column_name(name, ref):
    track = read_csv("a.csv", csv_bytes(f"lat,lon,{name}", "1,2,3"))
    assert track.height_ref == ref and track.height_m[0] == 3.0


def test_caller_height_reference_wins_over_the_column_name_with_a_note():
    track = read_csv("a.csv", csv_bytes("lat,lon,alt_msl", "1,2,3"), height_ref=HEIGHT_ELLIPSOID)
    assert track.height_ref == HEIGHT_ELLIPSOID
    assert any("looks like msl" in n for n in track.source.notes)


def test_bad_height_reference_option_is_an_input_error():
    with pytest.raises(InputError, match="'geoid'"):
        read_csv("a.csv", csv_bytes("lat,lon", "1,2"), height_ref="geoid")


def test_no_height_column_gives_height_ref_none():
    assert read_csv("a.csv", csv_bytes("lat,lon", "1,2")).height_ref == HEIGHT_NONE


@pytest.mark.parametrize(
    "name, factor",
    [
        ("speed_kmh", 1000 / 3600),
        ("Speed (km/h)", 1000 / 3600),
        ("speed_knots", 1852 / 3600),
        ("speed_mph", 1609.344 / 3600),
        ("speed_mps", 1.0),
        ("speed", 1.0),
    ],
)
def test_speed_units_from_the_column_name(name, factor):
    track = read_csv("a.csv", csv_bytes(f"lat,lon,{name}", "1,2,36"))
    assert track.speed_mps[0] == pytest.approx(36 * factor, rel=1e-12)


# --- bad input -----------------------------------------------------------------------------------


def test_non_numeric_latitude_names_the_line():
    with pytest.raises(InputError) as err:
        read_csv("trail.csv", csv_bytes("# exported by crew Orla", "lat,lon", "1,2", "", "4x8.1,2"))
    assert str(err.value).startswith("trail.csv: line 5: latitude '4x8.1'")


def test_out_of_range_longitude_names_the_line():
    with pytest.raises(InputError) as err:
        read_csv("a.csv", csv_bytes("lat,lon", "1,2", "1,200.5"))
    assert "line 3" in str(err.value) and "200.5" in str(err.value)


def test_latitude_given_without_longitude_names_the_line():
    with pytest.raises(InputError, match="line 2: longitude missing"):
        read_csv("a.csv", csv_bytes("lat,lon,alt", "1,,3"))


def test_binary_garbage_is_an_input_error():
    data = bytes(range(256)) * 8
    with pytest.raises(InputError, match="binary"):
        read_csv("a.csv", data)


def test_header_only_is_no_position_fixes_found():
    with pytest.raises(InputError, match="no position fixes found"):
        read_csv("a.csv", csv_bytes("time,lat,lon"))


def test_rows_without_a_fix_and_cut_rows_are_skipped_and_counted():
    track = read_csv("a.csv", csv_bytes("time,lat,lon,alt", "1,,,", "2,1,2,3", "3,1.5"))
    assert len(track) == 1
    assert track.source.skipped == {"no position": 1, "short row": 1}
    assert track.source.records == 3


def test_read_log_picks_the_csv_reader_and_passes_options(tmp_path):
    path = tmp_path / "glen_ardun_survey.csv"
    path.write_bytes(csv_bytes("Zeit,N,E,H", "1714564800,48.5,11.5,500"))
    track = read_log(
        path, csv_columns={"time": "Zeit", "lat": "N", "lon": "E", "height": "H"}, height_ref="msl"
    )
    assert track.source.format == "csv" and track.height_ref == HEIGHT_MSL
    assert (track.lat_deg[0], track.height_m[0], track.time_s[0]) == (48.5, 500.0, 1714564800.0)


# --- course over ground --------------------------------------------------------------------------


@pytest.mark.parametrize("name", ["course", "course_deg", "Course (deg)", "heading_deg", "track_deg", "COG"])
def test_course_column_spellings_are_recognised(name):
    track = read_csv("a.csv", csv_bytes(f"lat,lon,speed,{name}", "1,2,3,271.5", "1,2,0,"))
    assert track.course_deg[0] == 271.5
    assert np.isnan(track.course_deg[1])  # empty cell: no course (standing still)


@pytest.mark.parametrize("name", ["heading", "track"])
def test_bare_heading_or_track_is_not_taken_as_course(name):
    # a bare "heading" may be the body heading, "track" a track number: not course over ground
    track = read_csv("a.csv", csv_bytes(f"lat,lon,{name}", "1,2,30"))
    assert track.course_deg is None


def test_course_out_of_range_names_the_line():
    with pytest.raises(InputError) as err:
        read_csv("van.csv", csv_bytes("lat,lon,course", "1,2,10", "1,2,400"))
    assert "line 3" in str(err.value) and "course" in str(err.value) and "van.csv" in str(err.value)


def test_speed_and_course_survive_a_round_trip_through_logwrite(tmp_path):
    from survey.logwrite import csv_text, write_text
    from survey.track import make_track

    course = np.array([np.nan, 45.25, 181.5, 359.75])
    speed = np.array([0.0, 3.5, 12.25, 20.0])
    src = make_track("x", "csv", 1.78e9 + np.arange(4.0), [46.1] * 4, [7.9] * 4, [500.0] * 4,
                     speed_mps=speed, course_deg=course)
    path = tmp_path / "r.csv"
    write_text(str(path), csv_text(src))
    back = read_log(str(path))
    np.testing.assert_array_equal(back.course_deg, course)  # 3 decimals hold these exactly; NaN stays NaN
    np.testing.assert_array_equal(back.speed_mps, speed)
