"""Property-based tests for the NMEA and CSV readers (hypothesis).

Whatever bytes come in, a reader either raises ``InputError`` or returns a valid Track: equal-length
arrays, finite WGS 84 latitude/longitude in range, no infinite values. Valid sentences survive a
round trip through the NMEA ``(d)ddmm.mmmm`` format, and the NMEA 0183 checksum makes any single
corrupted byte either rejected or harmless.
"""

from __future__ import annotations

import functools
import operator

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from survey.errors import InputError
from survey.readers.csvlog import read_csv
from survey.readers.nmea import read_nmea
from survey.track import HEIGHT_REFS, Track

SETTINGS = settings(max_examples=100, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def xor_checksum(body: str) -> int:
    """NMEA 0183: XOR of every character between '$' and '*'."""
    return functools.reduce(operator.xor, body.encode("ascii"), 0)


def nmea_coord(value: float, deg_digits: int, pos: str, neg: str) -> tuple[str, str]:
    """Signed degrees -> ``(d)ddmm.mmmmmm`` and hemisphere letter (NMEA 0183 layout)."""
    a = abs(value)
    deg = int(a)
    minutes = round((a - deg) * 60, 6)
    if minutes >= 60:
        deg, minutes = deg + 1, 0.0
    return f"{deg:0{deg_digits}d}{minutes:09.6f}", (neg if value < 0 else pos)


def gga(tod_s: int, lat: float, lon: float, alt: float, sep: float, quality: int = 1) -> str:
    hh, mm, ss = tod_s // 3600, tod_s // 60 % 60, tod_s % 60
    la, ns = nmea_coord(lat, 2, "N", "S")
    lo, ew = nmea_coord(lon, 3, "E", "W")
    body = (
        f"GPGGA,{hh:02d}{mm:02d}{ss:02d},{la},{ns},{lo},{ew},{quality},08,0.9,"
        f"{alt:.1f},M,{sep:.1f},M,,"
    )
    return f"${body}*{xor_checksum(body):02X}"


def rmc(tod_s: int, lat: float, lon: float, knots: float, ddmmyy: str) -> str:
    hh, mm, ss = tod_s // 3600, tod_s // 60 % 60, tod_s % 60
    la, ns = nmea_coord(lat, 2, "N", "S")
    lo, ew = nmea_coord(lon, 3, "E", "W")
    body = f"GNRMC,{hh:02d}{mm:02d}{ss:02d},A,{la},{ns},{lo},{ew},{knots:.2f},0.0,{ddmmyy},,,A"
    return f"${body}*{xor_checksum(body):02X}"


def assert_valid_track(track: Track) -> None:
    n = len(track)
    assert n > 0
    for name in Track.array_fields():
        arr = getattr(track, name)
        if arr is not None:
            assert len(arr) == n, name
            if arr.dtype.kind == "f":
                assert not np.isinf(arr).any(), name
    assert np.isfinite(track.lat_deg).all() and np.isfinite(track.lon_deg).all()
    assert (np.abs(track.lat_deg) <= 90).all() and (np.abs(track.lon_deg) <= 180).all()
    assert track.height_ref in HEIGHT_REFS
    assert all(isinstance(v, int) and v > 0 for v in track.source.skipped.values())


def read_or_input_error(reader, data: bytes) -> Track | None:
    try:
        track = reader("fuzz", data)
    except InputError as exc:
        assert "\n" not in str(exc)  # one clean line
        return None
    assert_valid_track(track)
    return track


lats = st.floats(-89.999, 89.999, allow_nan=False)
lons = st.floats(-179.999, 179.999, allow_nan=False)
fix = st.tuples(
    st.integers(0, 86399),
    lats,
    lons,
    st.floats(-400, 8000),
    st.floats(-100, 100),
    st.integers(0, 5),
)
day = st.dates().filter(lambda d: 1980 <= d.year <= 2079).map(lambda d: d.strftime("%d%m%y"))


@st.composite
def nmea_logs(draw) -> bytes:
    lines = []
    for tod, lat, lon, alt, sep, q in draw(st.lists(fix, min_size=1, max_size=12)):
        lines.append(gga(tod, lat, lon, alt, sep, q))
        if draw(st.booleans()):
            lines.append(rmc(tod, lat, lon, draw(st.floats(0, 200)), draw(day)))
    return ("\r\n".join(lines) + "\r\n").encode("ascii")


@st.composite
def mutated(draw, source) -> bytes:
    data = bytearray(draw(source))
    for _ in range(draw(st.integers(1, 6))):
        op = draw(st.sampled_from(["flip", "cut", "insert", "delete"]))
        if not data:
            break
        i = draw(st.integers(0, len(data) - 1))
        if op == "flip":
            data[i] ^= 1 << draw(st.integers(0, 7))
        elif op == "cut":
            del data[i:]
        elif op == "insert":
            data[i:i] = draw(st.binary(min_size=1, max_size=8))
        else:
            del data[i : i + draw(st.integers(1, 8))]
    return bytes(data)


@SETTINGS
@given(mutated(nmea_logs()))
def test_mutated_nmea_gives_input_error_or_a_valid_track(data):
    read_or_input_error(read_nmea, data)


@SETTINGS
@given(st.binary(max_size=400))
def test_random_bytes_as_nmea_give_input_error_or_a_valid_track(data):
    read_or_input_error(read_nmea, data)


@SETTINGS
@given(st.lists(st.text(alphabet="$*,.0123456789ABCDEFGNPRSVWM\r\n-", max_size=80), max_size=10))
def test_random_sentence_like_text_gives_input_error_or_a_valid_track(parts):
    read_or_input_error(read_nmea, "\n".join(parts).encode("ascii"))


@SETTINGS
@given(
    tod=st.integers(0, 86399),
    lat=lats,
    lon=lons,
    alt=st.floats(-400, 8000),
    sep=st.floats(-100, 100),
)
def test_valid_gga_round_trips_position_and_height(tod, lat, lon, alt, sep):
    track = read_nmea("fuzz", (gga(tod, lat, lon, alt, sep) + "\n").encode())
    # Minutes written with 6 decimals: error <= 0.5e-6 min = 8.3e-9 deg (plus float rounding).
    assert abs(track.lat_deg[0] - lat) < 1e-8 and abs(track.lon_deg[0] - lon) < 1e-8
    # Heights written with 1 decimal each: ellipsoidal = alt + sep within 0.05 + 0.05 m.
    assert abs(track.height_m[0] - (alt + sep)) <= 0.1 + 1e-9
    assert track.time_s[0] == tod


@SETTINGS
@given(
    tod=st.integers(0, 86399),
    lat=lats,
    lon=lons,
    alt=st.floats(-400, 8000),
    sep=st.floats(-100, 100),
    pos=st.integers(0, 200),
    byte=st.integers(0, 255),
)
def test_one_corrupted_byte_never_changes_a_checksummed_fix(tod, lat, lon, alt, sep, pos, byte):
    # NMEA 0183 checksum: XOR detects every single-byte change inside the sentence body.
    text = (gga(tod, lat, lon, alt, sep) + "\r\n").encode()
    clean = read_nmea("fuzz", text)
    data = bytearray(text)
    pos %= len(data)
    data[pos] = byte
    track = read_or_input_error(read_nmea, bytes(data))
    if track is not None:
        assert len(track) == 1
        assert track.lat_deg[0] == clean.lat_deg[0] and track.lon_deg[0] == clean.lon_deg[0]
        assert track.height_m[0] == clean.height_m[0] and track.time_s[0] == clean.time_s[0]


# --- CSV --------------------------------------------------------------------------------------

HEADERS = ["time", "lat", "lon", "alt", "speed_kmh", "hdop", "sats", "accuracy_m"]
cells = {
    "time": st.integers(0, 2_000_000_000).map(str),
    "iso_time": st.datetimes().map(lambda t: t.isoformat()),
    "lat": lats.map(repr),
    "lon": lons.map(repr),
    "alt": st.floats(-400, 8000).map(lambda v: f"{v:.3f}"),
    "speed_kmh": st.floats(0, 300).map(lambda v: f"{v:.2f}"),
    "hdop": st.floats(0, 50).map(lambda v: f"{v:.1f}"),
    "sats": st.integers(0, 40).map(str),
    "accuracy_m": st.floats(0, 100).map(lambda v: f"{v:.2f}"),
}


@st.composite
def csv_logs(draw) -> bytes:
    others = [draw(st.sampled_from(["time", "iso_time"]))] + HEADERS[3:]
    header = ["lat", "lon"] + others[: draw(st.integers(0, len(others)))]
    header = draw(st.permutations(header))
    delim = draw(st.sampled_from([",", ";", "\t"]))
    rows = [delim.join(draw(cells[h]) for h in header) for _ in range(draw(st.integers(1, 8)))]
    return ("\n".join([delim.join(header), *rows]) + "\n").encode()


@SETTINGS
@given(csv_logs())
def test_generated_csv_gives_input_error_or_a_valid_track(data):
    read_or_input_error(read_csv, data)


@SETTINGS
@given(mutated(csv_logs()))
def test_mutated_csv_gives_input_error_or_a_valid_track(data):
    read_or_input_error(read_csv, data)


@SETTINGS
@given(st.binary(max_size=400))
def test_random_bytes_as_csv_give_input_error_or_a_valid_track(data):
    read_or_input_error(read_csv, data)


@SETTINGS
@given(st.lists(st.lists(st.text(max_size=12), min_size=1, max_size=5), min_size=1, max_size=6))
def test_random_text_cells_give_input_error_or_a_valid_track(table):
    header = ["lat", "lon", "time", "alt", "hdop"]
    lines = [",".join(header)] + [",".join(c.replace("\n", " ") for c in row) for row in table]
    read_or_input_error(read_csv, "\n".join(lines).encode("utf-8", "surrogatepass"))
