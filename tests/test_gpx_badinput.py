"""Bad GPX input: one clear InputError line naming the file (and line/point when known).

Ranges: WGS 84 latitude in [-90, 90], longitude in [-180, 180] (GPX 1.1 schema latitudeType,
longitudeType). Entity refusal: OWASP XML External Entity / "billion laughs" guidance (refuse
DTDs in untrusted XML; do not rely on the parser's amplification cap).
"""

from __future__ import annotations

import resource

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from survey.errors import InputError
from survey.readers.gpx import read_gpx

NAME = "Cinder_Lane_run3.gpx"
MODES = ("auto", "safe")


def doc(points: str) -> bytes:
    return ('<?xml version="1.0" encoding="UTF-8"?>\n'
            '<gpx xmlns="http://www.topografix.com/GPX/1/1" version="1.1" creator="t">\n<trk><trkseg>\n'
            f"{points}\n</trkseg></trk></gpx>\n").encode()


GOOD = doc("\n".join(
    f'<trkpt lat="{45 + i * 1e-4:.6f}" lon="{7 + i * 1e-4:.6f}"><ele>{100 + i}</ele>'
    f"<time>2024-04-0{1 + i % 3}T10:00:{i:02d}.5Z</time><hdop>1.{i}</hdop></trkpt>"
    for i in range(8)
))


def error_of(data: bytes, mode: str = "auto") -> InputError:
    with pytest.raises(InputError) as info:
        read_gpx(NAME, data, mode=mode)
    err = info.value
    text = str(err)
    assert NAME in text and "\n" not in text and "Traceback" not in text
    return err


@pytest.mark.parametrize("mode", MODES)
@pytest.mark.parametrize("data", [b"", b"   \n\r\n", b"\xef\xbb\xbf\n"])
def test_empty_file(data, mode):
    assert "empty" in str(error_of(data, mode))


@pytest.mark.parametrize("mode", MODES)
@pytest.mark.parametrize("cut", [40, 120, len(GOOD) // 2, len(GOOD) - 8])
def test_truncated_xml(cut, mode):
    err = error_of(GOOD[:cut], mode)
    assert "XML" in err.message and err.where and err.where.startswith("line ")


@pytest.mark.parametrize("mode", MODES)
@pytest.mark.parametrize(
    "data, word",
    [
        (b'<?xml version="1.0"?><kml xmlns="http://www.opengis.net/kml/2.2"><Document/></kml>', "kml"),
        (b"<html><head><title>Not a log</title></head><body><p>hi</p></body></html>", "html"),
        (b'<gpx xmlns="http://www.topografix.com/GPX/9/9" version="9.9"></gpx>', "namespace"),
    ],
)
def test_file_that_is_not_gpx(data, word, mode):
    assert word in str(error_of(data, mode))


@pytest.mark.parametrize("mode", MODES)
def test_html_with_doctype_is_refused(mode):
    data = b"<!DOCTYPE html>\n<html><body>trkpt</body></html>"
    assert "DTD" in str(error_of(data, mode))


BILLION_LAUGHS = b"""<?xml version="1.0"?>
<!DOCTYPE lolz [
 <!ENTITY lol "lol">
 <!ENTITY lol1 "&lol;&lol;&lol;&lol;&lol;&lol;&lol;&lol;&lol;&lol;">
 <!ENTITY lol2 "&lol1;&lol1;&lol1;&lol1;&lol1;&lol1;&lol1;&lol1;&lol1;&lol1;">
 <!ENTITY lol3 "&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;">
 <!ENTITY lol4 "&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;">
 <!ENTITY lol5 "&lol4;&lol4;&lol4;&lol4;&lol4;&lol4;&lol4;&lol4;&lol4;&lol4;">
 <!ENTITY lol6 "&lol5;&lol5;&lol5;&lol5;&lol5;&lol5;&lol5;&lol5;&lol5;&lol5;">
 <!ENTITY lol7 "&lol6;&lol6;&lol6;&lol6;&lol6;&lol6;&lol6;&lol6;&lol6;&lol6;">
 <!ENTITY lol8 "&lol7;&lol7;&lol7;&lol7;&lol7;&lol7;&lol7;&lol7;&lol7;&lol7;">
 <!ENTITY lol9 "&lol8;&lol8;&lol8;&lol8;&lol8;&lol8;&lol8;&lol8;&lol8;&lol8;">
]>
<gpx xmlns="http://www.topografix.com/GPX/1/1" version="1.1" creator="t"><trk><trkseg>
<trkpt lat="1" lon="2"><name>&lol9;</name></trkpt></trkseg></trk></gpx>
"""


@pytest.mark.parametrize("mode", MODES)
def test_billion_laughs_is_refused_with_bounded_memory(mode):
    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    err = error_of(BILLION_LAUGHS, mode)
    assert "DTD" in err.message and err.where == "line 2"
    grown_kb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss - before
    assert grown_kb < 50_000  # 10^9 "lol"s would be ~3 GB


@pytest.mark.parametrize("mode", MODES)
def test_utf16_entity_declaration_is_refused_too(mode):
    data = BILLION_LAUGHS.decode().replace('version="1.0"?>', 'version="1.0" encoding="UTF-16"?>').encode("utf-16")
    assert "DTD" in str(error_of(data, mode))


@pytest.mark.parametrize("mode", MODES)
@pytest.mark.parametrize(
    "attrs, what",
    [
        ('lat="north" lon="7"', "lat 'north' is not a number"),
        ('lat="45" lon="7,5"', "lon '7,5' is not a number"),
        ('lat="nan" lon="7"', "lat 'nan' is not a number"),
        ('lat="90.0001" lon="7"', "lat 90.0001 is out of range"),
        ('lat="-45" lon="-180.5"', "lon -180.5 is out of range"),
        ('lon="7"', "trkpt has no lat attribute"),
    ],
)
def test_bad_coordinates_name_the_point_and_line(attrs, what, mode):
    data = doc('<trkpt lat="45" lon="7"/>\n<trkpt lat="45" lon="7.1"/>\n' f"<trkpt {attrs}/>")
    err = error_of(data, mode)
    assert what in err.message
    assert err.where == "line 6, trkpt 3"


@pytest.mark.parametrize("mode", MODES)
@pytest.mark.parametrize(
    "child, what",
    [
        ("<ele>high</ele>", "ele 'high' is not a number"),
        ("<time>yesterday</time>", "is not an ISO 8601 date-time"),
        ("<time>2023-02-29T00:00:00Z</time>", "is not a valid date-time"),  # 2023 is no leap year
        ("<time>2023-01-01T25:00:00Z</time>", "is not a valid date-time"),
        ("<hdop>x</hdop>", "hdop 'x' is not a number"),
    ],
)
def test_bad_point_values_name_the_point(child, what, mode):
    err = error_of(doc(f'<trkpt lat="45" lon="7">{child}</trkpt>'), mode)
    assert what in err.message and "trkpt 1" in err.where


@pytest.mark.parametrize("mode", MODES)
@pytest.mark.parametrize("data", [bytes(range(256)) * 4, b"\x89PNG\r\n\x1a\n" + bytes(200), b"\x00\x00\x00\x01<gpx>"])
def test_binary_garbage(data, mode):
    error_of(data, mode)


@pytest.mark.parametrize("mode", MODES)
def test_gpx_with_no_points(mode):
    data = b'<gpx xmlns="http://www.topografix.com/GPX/1/1" version="1.1" creator="t"><trk><trkseg/></trk></gpx>'
    assert "no track or route points" in str(error_of(data, mode))


def test_bulk_only_mode_says_it_declined():
    assert "declined" in str(error_of(doc('<trkpt lat="1" lon="2"><!-- x --></trkpt>'), "bulk"))


# --- property-based: mutated GPX bytes give InputError or a valid Track, nothing else ----------

def check_outcome(data: bytes) -> None:
    try:
        track = read_gpx(NAME, data)
    except InputError as err:
        assert "\n" not in str(err) and NAME in str(err)
        return
    assert len(track) > 0
    assert np.isfinite(track.lat_deg).all() and np.isfinite(track.lon_deg).all()
    assert (np.abs(track.lat_deg) <= 90).all() and (np.abs(track.lon_deg) <= 180).all()
    assert track.source.reader in ("gpx-bulk", "gpx-safe")
    if track.source.reader == "gpx-bulk":  # what the bulk path accepts, the safe path reads alike
        safe = read_gpx(NAME, data, mode="safe")
        np.testing.assert_array_equal(track.lat_deg, safe.lat_deg)
        np.testing.assert_array_equal(track.height_m, safe.height_m)
        np.testing.assert_array_equal(track.time_s, safe.time_s)
        np.testing.assert_array_equal(track.segment, safe.segment)


FUZZ = settings(max_examples=100, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@FUZZ
@given(st.lists(st.tuples(st.integers(0, len(GOOD) - 1), st.integers(0, 255)), min_size=1, max_size=6))
def test_fuzz_byte_flips(flips):
    data = bytearray(GOOD)
    for pos, value in flips:
        data[pos] = value
    check_outcome(bytes(data))


@FUZZ
@given(st.integers(0, len(GOOD)))
def test_fuzz_truncation(cut):
    check_outcome(GOOD[:cut])


@FUZZ
@given(st.integers(0, len(GOOD)), st.sampled_from([
    b"<", b">", b"&", b"&amp;", b"<!--", b"-->", b"<![CDATA[", b"]]>", b"\x00", b"\xff", b"\"", b"'",
    b"<trkpt lat='1' lon='2'>", b"</trkpt>", b"</trkseg><trkseg>", b"<ele>", b"</time>", b"e5", b"-",
    b"<!ENTITY x 'y'>", b"\xef\xbb\xbf", b"\r\n",
]) | st.binary(min_size=1, max_size=12))
def test_fuzz_insertion(pos, chunk):
    check_outcome(GOOD[:pos] + chunk + GOOD[pos:])
