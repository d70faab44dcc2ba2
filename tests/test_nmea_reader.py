"""NMEA 0183 reader: checksums, decoding, epochs, dates, heights and skip counts.

Checksums in these tests are computed independently with ``functools.reduce(operator.xor, ...)``
following NMEA 0183: the XOR of every character between ``$`` and ``*``, as two hex digits.
Expected times come from Python's ``datetime`` (UTC calendar arithmetic), expected degrees from the
NMEA ``(d)ddmm.mmmm`` definition: degrees + minutes / 60.
"""

from __future__ import annotations

import functools
import operator
from datetime import datetime, timezone

import numpy as np
import pytest

from survey.errors import InputError
from survey.readers import read_log
from survey.readers.nmea import KNOT_MPS, nmea_checksum, read_nmea
from survey.track import HEIGHT_ELLIPSOID, HEIGHT_MSL

# Widely reproduced NMEA 0183 example sentences (from memory); their checksums are verified below.
GGA_EXAMPLE = "$GPGGA,123519,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,*47"
RMC_EXAMPLE = "$GPRMC,123519,A,4807.038,N,01131.000,E,022.4,084.4,230394,003.1,W*6A"


def xor_checksum(body: str) -> int:
    """NMEA 0183 checksum, written out from the standard's rule (independent of the reader)."""
    return functools.reduce(operator.xor, body.encode("ascii"), 0)


def sentence(body: str) -> str:
    """``$body*hh`` with the checksum computed by the NMEA 0183 rule."""
    return f"${body}*{xor_checksum(body):02X}"


def log(*lines: str, eol: str = "\r\n") -> bytes:
    return (eol.join(lines) + eol).encode("ascii")


def utc(*args) -> float:
    """Seconds since the UNIX epoch of a UTC calendar time (stdlib datetime as the oracle)."""
    return datetime(*args, tzinfo=timezone.utc).timestamp()


# --- checksums ---------------------------------------------------------------------------------


@pytest.mark.parametrize("text", [GGA_EXAMPLE, RMC_EXAMPLE])
def test_example_sentences_carry_the_xor_checksum_of_nmea_0183(text):
    # NMEA 0183: checksum = XOR of the characters between '$' and '*'.
    body, printed = text[1:].split("*")
    assert xor_checksum(body) == int(printed, 16)


def test_checksum_helper_agrees_with_the_xor_rule():
    body = GGA_EXAMPLE[1:].split("*")[0]
    assert nmea_checksum(body.encode()) == xor_checksum(body) == 0x47  # printed in the example


def test_bad_checksum_is_skipped_and_counted():
    good = sentence("GPGGA,120000,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,")
    bad_body = "GPGGA,120001,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,"
    wrong = xor_checksum(bad_body) ^ 0x01
    track = read_nmea("a.nmea", log(good, f"${bad_body}*{wrong:02X}", f"${bad_body}*{wrong:02X}"))
    assert len(track) == 1
    assert track.source.skipped == {"bad checksum": 2}
    assert track.source.records == 3


def test_lower_case_hex_checksum_is_accepted():
    body = "GPGGA,120000,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,"
    track = read_nmea("a.nmea", log(f"${body}*{xor_checksum(body):02x}"))
    assert len(track) == 1 and not track.source.skipped


def test_blanks_after_the_checksum_are_allowed_but_text_is_not():
    body = "GPGGA,120000,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,"
    good = sentence("GPGGA,120001,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,")
    track = read_nmea("a.nmea", log(sentence(body) + " \t", sentence(body) + "xyz", good))
    assert len(track) == 2
    assert track.source.skipped == {"no checksum": 1}


def test_sentence_without_checksum_is_skipped_when_the_log_has_checksums():
    # A missing checksum among checksummed sentences is a line cut short (decision in nmea.py).
    good = sentence("GPGGA,120000,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,")
    cut = "$GPGGA,120001,4807.038,N,01131.000,E,1,08,0.9,545.4,M,4"
    track = read_nmea("a.nmea", log(good, cut))
    assert len(track) == 1
    assert track.source.skipped == {"no checksum": 1}


def test_log_without_any_checksum_is_accepted_with_a_note():
    lines = [
        "$GPGGA,120000,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,",
        "$GPGGA,120001,4807.039,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,",
    ]
    track = read_nmea("a.nmea", log(*lines))
    assert len(track) == 2
    assert any("unverified" in n for n in track.source.notes)


def test_in_a_log_without_checksums_a_sentence_cut_short_is_skipped():
    # GGA has 14 fields after its address (NMEA 0183, from memory); a line ending at the HDOP
    # is cut short, not a fix without height.
    lines = [
        "$GPGGA,120000,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,",
        "$GPGGA,120001,4807.039,N,01131.000,E,1,08,0.9,",
    ]
    track = read_nmea("a.nmea", log(*lines))
    assert len(track) == 1 and track.source.skipped == {"cut short": 1}


def test_a_line_break_inside_a_checksummed_sentence_does_not_pass_its_head_off_as_a_fix():
    # The byte before the altitude turned into a line feed (found by the fuzz test): the head
    # has no checksum and no height, the tail is not a sentence; no fix may come of it.
    damaged = GGA_EXAMPLE.replace(",545.4,", ",\n545.4,")
    with pytest.raises(InputError, match="cut short"):
        read_nmea("a.nmea", damaged.encode("ascii") + b"\r\n")


# --- decoding ----------------------------------------------------------------------------------


def test_widely_reproduced_gga_example_decodes_to_expected_position_and_height():
    track = read_nmea("a.nmea", log(GGA_EXAMPLE))
    assert len(track) == 1
    # 48 deg 07.038 min = 48 + 7.038/60 = 48.1173 deg; 11 deg 31.000 min = 11 + 31/60 deg.
    assert track.lat_deg[0] == pytest.approx(48 + 7.038 / 60, abs=1e-12)
    assert track.lat_deg[0] == pytest.approx(48.1173, abs=1e-12)
    assert track.lon_deg[0] == pytest.approx(11 + 31 / 60, abs=1e-12)
    # Ellipsoidal height = MSL altitude + geoid separation (NMEA 0183): 545.4 + 46.9 = 592.3 m.
    assert track.height_ref == HEIGHT_ELLIPSOID
    assert track.height_m[0] == pytest.approx(592.3, abs=1e-9)
    assert track.fix_quality[0] == 1 and track.satellites[0] == 8
    assert track.hdop[0] == pytest.approx(0.9)


def test_gga_without_geoid_separation_is_labelled_msl():
    track = read_nmea(
        "a.nmea", log(sentence("GPGGA,123519,4807.038,N,01131.000,E,1,08,0.9,545.4,M,,M,,"))
    )
    assert track.height_ref == HEIGHT_MSL
    assert track.height_m[0] == pytest.approx(545.4)


def test_south_and_west_hemispheres_are_negative():
    track = read_nmea(
        "a.nmea", log(sentence("GPGGA,010203,3352.128,S,15112.558,W,1,08,0.9,10.0,M,20.0,M,,"))
    )
    # NMEA 0183: S latitudes and W longitudes are negative in signed decimal degrees.
    assert track.lat_deg[0] == pytest.approx(-(33 + 52.128 / 60), abs=1e-12)
    assert track.lon_deg[0] == pytest.approx(-(151 + 12.558 / 60), abs=1e-12)


def test_three_digit_longitude_degrees_and_long_minute_fractions():
    track = read_nmea(
        "a.nmea",
        log(
            sentence(
                "GNGGA,010203.25,0000.00000001,N,17959.9999999,E,4,30,0.5,1.0,M,2.0,M,1.0,0000"
            )
        ),
    )
    assert track.lat_deg[0] == pytest.approx(0.00000001 / 60, abs=1e-15)
    assert track.lon_deg[0] == pytest.approx(179 + 59.9999999 / 60, abs=1e-12)
    assert track.fix_quality[0] == 4  # RTK fixed (GGA quality indicator)


def test_widely_reproduced_rmc_example_gives_date_time_and_speed():
    track = read_nmea("a.nmea", log(RMC_EXAMPLE))
    # Date 230394 = 23 March 1994, time 12:35:19 UTC.
    assert track.time_s[0] == utc(1994, 3, 23, 12, 35, 19)
    # 22.4 knots; 1 knot = 1852/3600 m/s exactly (international nautical mile = 1852 m).
    assert track.speed_mps[0] == pytest.approx(22.4 * 1852 / 3600, rel=1e-12)
    assert KNOT_MPS == 1852 / 3600
    assert track.lat_deg[0] == pytest.approx(48 + 7.038 / 60, abs=1e-12)
    assert track.height_ref == "none"  # RMC carries no height


def test_fractional_seconds_are_kept():
    track = read_nmea(
        "a.nmea",
        log(sentence("GPRMC,235959.75,A,4807.038,N,01131.000,E,0.0,0.0,311223,,,A")),
    )
    assert track.time_s[0] == pytest.approx(utc(2023, 12, 31, 23, 59, 59) + 0.75, abs=1e-6)


def test_rmc_and_gga_of_one_epoch_make_one_fix():
    track = read_nmea(
        "a.nmea",
        log(
            sentence("GPRMC,120000,A,4807.038,N,01131.000,E,10.0,0.0,010524,,,A"),
            sentence("GPGGA,120000,4807.038,N,01131.000,E,2,09,1.1,500.0,M,47.0,M,,"),
            sentence("GPRMC,120001,A,4807.040,N,01131.000,E,10.0,0.0,010524,,,A"),
            sentence("GPGGA,120001,4807.040,N,01131.000,E,2,09,1.1,500.5,M,47.0,M,,"),
        ),
    )
    assert len(track) == 2
    assert track.time_s.tolist() == [utc(2024, 5, 1, 12, 0, 0), utc(2024, 5, 1, 12, 0, 1)]
    assert track.height_m.tolist() == pytest.approx([547.0, 547.5])
    assert track.speed_mps.tolist() == pytest.approx([10 * 1852 / 3600] * 2)
    assert track.fix_quality.tolist() == [2, 2]


def test_mixed_talkers_merge_into_one_fix_per_epoch():
    track = read_nmea(
        "a.nmea",
        log(
            sentence("GNRMC,120000,A,4807.038,N,01131.000,E,1.0,0.0,010524,,,D"),
            sentence("GPGGA,120000,4807.038,N,01131.000,E,2,09,1.1,500.0,M,47.0,M,,"),
            sentence("GLGGA,120001,4807.040,N,01131.000,E,1,07,1.3,500.0,M,47.0,M,,"),
            sentence("GARMC,120001,A,4807.040,N,01131.000,E,1.0,0.0,010524,,,A"),
            sentence("GBGNS,120002,4807.042,N,01131.000,E,AAN,12,0.8,500.0,47.0,,"),
        ),
    )
    assert len(track) == 3
    assert track.lat_deg.tolist() == pytest.approx([48 + x / 60 for x in (7.038, 7.040, 7.042)])
    assert np.all(np.diff(track.time_s) == 1.0)
    assert track.height_ref == HEIGHT_ELLIPSOID


def test_vtg_speed_is_used_when_no_rmc_speed_exists():
    track = read_nmea(
        "a.nmea",
        log(
            sentence("GPGGA,120000,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,"),
            sentence("GPVTG,054.7,T,034.4,M,005.5,N,010.2,K,A"),
        ),
    )
    # km/h field preferred: 10.2 km/h = 10.2 / 3.6 m/s (1 km/h = 1000 m / 3600 s).
    assert track.speed_mps[0] == pytest.approx(10.2 / 3.6, rel=1e-12)


def test_gns_with_all_modes_n_is_dropped_and_counted():
    track = read_nmea(
        "a.nmea",
        log(
            sentence("GNGNS,120000,4807.038,N,01131.000,E,NN,00,,,,,"),
            sentence("GNGNS,120001,4807.038,N,01131.000,E,AN,08,0.9,545.4,46.9,,"),
        ),
    )
    assert len(track) == 1
    assert track.source.skipped == {"invalid fix (GNS mode N)": 1}
    assert track.height_m[0] == pytest.approx(592.3)


# --- invalid fixes and bad sentences -------------------------------------------------------------


def test_gga_quality_zero_and_rmc_status_v_are_dropped_and_counted():
    track = read_nmea(
        "a.nmea",
        log(
            sentence("GPGGA,120000,,,,,0,00,99.9,,M,,M,,"),
            sentence("GPRMC,120000,V,,,,,,,010524,,,N"),
            sentence("GPGGA,120001,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,"),
            sentence("GPRMC,120001,A,4807.038,N,01131.000,E,0.0,0.0,010524,,,A"),
            sentence("GPRMC,120002,V,4807.038,N,01131.000,E,0.0,0.0,010524,,,A"),
        ),
    )
    assert len(track) == 1
    assert track.source.skipped == {"invalid fix (GGA quality 0)": 1, "void fix (RMC status V)": 2}
    assert track.time_s[0] == utc(2024, 5, 1, 12, 0, 1)


@pytest.mark.parametrize(
    "body",
    [
        "GPGGA,120000,48x7.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,",  # letter in latitude
        "GPGGA,120000,4807.038,Q,01131.000,E,1,08,0.9,545.4,M,46.9,M,,",  # unknown hemisphere
        "GPGGA,120000,9107.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,",  # latitude > 90 deg
        "GPGGA,120000,4867.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,",  # 67 minutes
        "GPGGA,126000,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,",  # 60 minutes in time
        "GPGGA,120000,4807.038,N,18131.000,E,1,08,0.9,545.4,M,46.9,M,,",  # longitude > 180 deg
        "GPGGA,120000,4807.038,N",  # too few fields
        "GPRMC,120000,A,4807.038,N,01131.000,E,0.0,0.0,320524,,,A",  # 32 May
    ],
)
def test_malformed_sentences_are_skipped_and_counted(body):
    good = sentence("GPGGA,120001,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,")
    track = read_nmea("a.nmea", log(sentence(body), good))
    assert len(track) == 1
    assert track.source.skipped == {"malformed": 1}


def test_other_sentence_types_are_ignored_and_noted():
    track = read_nmea(
        "a.nmea",
        log(
            sentence("GPGSV,3,1,11,03,03,111,00,04,15,270,00,06,01,010,00,13,06,292,00"),
            sentence("GPGSA,A,3,04,05,,09,12,,,24,,,,,2.5,1.3,2.1"),
            sentence("PUBX,00,120000.00"),
            sentence("GPGGA,120000,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,"),
        ),
    )
    assert len(track) == 1 and not track.source.skipped
    assert any("GSA x1" in n and "GSV x1" in n and "P... x1" in n for n in track.source.notes)


def test_text_lines_that_are_not_sentences_are_counted():
    good = sentence("GPGGA,120000,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,")
    track = read_nmea(
        "a.nmea", log("# logger v2, crew Tamsin Vale", good, "", "!AIVDM,1,1,,A,x,0*00")
    )
    assert len(track) == 1
    assert track.source.skipped == {"not an NMEA sentence": 2}


def test_two_sentences_run_together_on_one_line_are_both_read():
    a = sentence("GPGGA,120000,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,")
    b = sentence("GPGGA,120001,4807.040,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,")
    track = read_nmea("a.nmea", log(a + b, eol="\n"))
    assert len(track) == 2 and not track.source.skipped


def test_log_with_no_usable_fix_is_an_input_error_with_counts():
    body = "GPGGA,120000,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,"
    with pytest.raises(InputError) as err:
        read_nmea("dead.nmea", log(f"${body}*00", sentence("GPGGA,120001,,,,,0,00,,,M,,M,,")))
    text = str(err.value)
    assert text.startswith("dead.nmea: ")
    assert "bad checksum 1" in text and "invalid fix (GGA quality 0) 1" in text
    assert "\n" not in text


def test_binary_garbage_is_an_input_error():
    rng = np.random.default_rng(7)
    with pytest.raises(InputError):
        read_nmea("noise.nmea", rng.integers(0, 256, 4000, dtype=np.uint8).tobytes())


# --- dates and heights ---------------------------------------------------------------------------


def test_gga_after_midnight_rolls_over_to_the_next_day():
    track = read_nmea(
        "a.nmea",
        log(
            sentence("GPRMC,235959,A,4807.038,N,01131.000,E,0.0,0.0,290224,,,A"),
            sentence("GPGGA,235959,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,"),
            sentence("GPGGA,000000,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,"),
            sentence("GPGGA,000001,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,"),
        ),
    )
    # 29 Feb 2024 (leap year) 23:59:59 -> 1 Mar 2024 00:00:00, 00:00:01 (calendar via datetime).
    assert track.time_s.tolist() == [
        utc(2024, 2, 29, 23, 59, 59),
        utc(2024, 3, 1, 0, 0, 0),
        utc(2024, 3, 1, 0, 0, 1),
    ]


def test_gga_before_the_first_rmc_takes_its_date_counting_back_over_midnight():
    track = read_nmea(
        "a.nmea",
        log(
            sentence("GPGGA,235958,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,"),
            sentence("GPGGA,235959,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,"),
            sentence("GPRMC,000000,A,4807.038,N,01131.000,E,0.0,0.0,010125,,,A"),
        ),
    )
    assert track.time_s.tolist() == [
        utc(2024, 12, 31, 23, 59, 58),
        utc(2024, 12, 31, 23, 59, 59),
        utc(2025, 1, 1, 0, 0, 0),
    ]


def test_log_without_date_keeps_time_of_day_and_says_so():
    track = read_nmea(
        "a.nmea",
        log(
            sentence("GPGGA,235959,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,"),
            sentence("GPGGA,000001,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,"),
        ),
    )
    assert track.time_s.tolist() == [86399.0, 86401.0]  # relative time still correct: 2 s apart
    assert any("no date in log" in n for n in track.source.notes)


def test_mixed_separation_reports_every_height_as_msl_with_a_note():
    track = read_nmea(
        "a.nmea",
        log(
            sentence("GPGGA,120000,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,"),
            sentence("GPGGA,120001,4807.038,N,01131.000,E,1,08,0.9,546.4,M,,M,,"),
        ),
    )
    assert track.height_ref == HEIGHT_MSL
    assert track.height_m.tolist() == pytest.approx([545.4, 546.4])
    assert any("separation missing on 1 of 2" in n for n in track.source.notes)


def test_read_log_picks_the_nmea_reader_from_the_extension(tmp_path):
    path = tmp_path / "north_ridge_crew_b.nmea"
    path.write_bytes(log(GGA_EXAMPLE, RMC_EXAMPLE))
    track = read_log(path)
    assert track.source.format == "nmea" and len(track) == 1
    assert track.time_s[0] == utc(1994, 3, 23, 12, 35, 19)
    assert track.height_m[0] == pytest.approx(592.3)


# --- course over ground ------------------------------------------------------------------------
# Field layouts: NMEA 0183 v4.10, RMC/VTG field layout, common practice. RMC field 8 is the true
# course over ground in degrees; VTG field 1 is the true course, field 3 the magnetic one.


def test_widely_reproduced_rmc_example_gives_the_true_course():
    track = read_nmea("a.nmea", log(RMC_EXAMPLE))
    assert track.course_deg[0] == 84.4  # "084.4" in the example sentence, degrees true


def test_vtg_true_course_is_used_when_rmc_has_none_and_the_magnetic_one_is_not():
    track = read_nmea(
        "a.nmea",
        log(
            sentence("GPRMC,120000,A,4807.038,N,01131.000,E,,,230394,,,A"),
            sentence("GPVTG,054.7,T,034.4,M,005.5,N,010.2,K,A"),
        ),
    )
    assert track.course_deg[0] == 54.7  # true course (T), not the magnetic 34.4 (M)
    assert track.speed_mps[0] == pytest.approx(10.2 / 3.6, rel=1e-12)


def test_rmc_course_wins_over_vtg_in_the_same_epoch():
    track = read_nmea(
        "a.nmea",
        log(
            sentence("GPRMC,120000,A,4807.038,N,01131.000,E,5.0,270.0,230394,,,A"),
            sentence("GPVTG,054.7,T,034.4,M,005.5,N,010.2,K,A"),
        ),
    )
    assert track.course_deg[0] == 270.0 and track.speed_mps[0] == pytest.approx(5.0 * KNOT_MPS)


def test_empty_course_while_standing_still_is_nan():
    # Receivers leave the course empty when not moving (common practice).
    track = read_nmea(
        "a.nmea",
        log(
            sentence("GPRMC,120000,A,4807.038,N,01131.000,E,0.0,,230394,,,A"),
            sentence("GPRMC,120001,A,4807.038,N,01131.000,E,1.0,12.5,230394,,,A"),
        ),
    )
    assert np.isnan(track.course_deg[0]) and track.course_deg[1] == 12.5


def test_a_log_without_any_course_has_no_course_array():
    track = read_nmea("a.nmea", log(sentence("GPGGA,120000,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,")))
    assert track.course_deg is None


def test_course_of_360_degrees_reads_as_north():
    track = read_nmea("a.nmea", log(sentence("GPRMC,120000,A,4807.038,N,01131.000,E,3.0,360.0,230394,,,A")))
    assert track.course_deg[0] == 0.0


@pytest.mark.parametrize("cog", ["361.0", "-5.0", "abc"])
def test_course_out_of_range_makes_the_sentence_malformed(cog):
    good = sentence("GPGGA,120001,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,")
    bad = sentence(f"GPRMC,120000,A,4807.038,N,01131.000,E,3.0,{cog},230394,,,A")
    track = read_nmea("a.nmea", log(bad, good))
    assert len(track) == 1 and track.source.skipped == {"malformed": 1}


def test_speed_and_course_survive_a_round_trip_through_logwrite(tmp_path):
    from survey.logwrite import nmea_text, write_text
    from survey.track import make_track

    t0 = utc(2026, 5, 4, 9, 30, 0)
    course = np.array([0.0, 45.25, 181.5, 359.75])
    speed = np.array([0.0, 3.5, 12.25, 20.0])
    src = make_track("x", "csv", t0 + np.arange(4.0), [46.1, 46.1001, 46.1002, 46.1003], [7.9] * 4,
                     [500.0] * 4, height_ref=HEIGHT_ELLIPSOID, speed_mps=speed, course_deg=course)
    path = tmp_path / "r.nmea"
    write_text(str(path), nmea_text(src))
    back = read_log(str(path))
    np.testing.assert_allclose(back.course_deg, course, atol=0.005)  # written with 2 decimals
    # knots written with 3 decimals: 0.0005 kn = 0.00026 m/s
    np.testing.assert_allclose(back.speed_mps, speed, atol=3e-4)
