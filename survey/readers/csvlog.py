"""CSV logs (one fix per row, header first) -> Track.

Columns are found from the header, case-insensitively, ignoring punctuation and unit suffixes
(``"Latitude (deg)"``, ``"alt_m"``, ``"Speed [km/h]"``). Roles:

==========  =====================================================================================
role        header names recognised (before unit suffixes)
==========  =====================================================================================
time        time, timestamp, datetime, date_time, utc, epoch, unix_time, gps_time, utc_time ...
date        date, utc_date, gps_date (optional; joined with a time-of-day ``time`` column)
lat         lat, latitude
lon         lon, lng, long, longitude
height      alt, altitude, ele, elevation, height, h, plus hae / ellipsoidal_height / h_ell
            (ellipsoid) and alt_msl / orthometric_height / amsl (msl)
speed       speed, spd, sog, velocity, ground_speed; unit from the name: m/s (default),
            km/h (kmh, kph), knots (kn, kts), mph
course      course, course_deg, cog, course_over_ground, heading_deg, track_deg, bearing (true
            course over ground, degrees clockwise from north; a bare ``heading`` or ``track`` is
            not taken: it may be the body heading or a track number)
accuracy    accuracy, acc, hacc, h_acc, horizontal_accuracy, eph (metres)
hdop        hdop
satellites  sats, satellites, sat, num_sats, nsat, numsv, satellites_used
==========  =====================================================================================

An explicit ``columns`` mapping (role -> header name) overrides detection for the roles it names.

Time values are UNIX epoch numbers (seconds; milliseconds, microseconds and nanoseconds are
recognised by magnitude or by an ``ms``/``us``/``ns`` unit in the name) or ISO 8601 text
(``Z``, ``+hh:mm`` offsets, fractional seconds; naive times are taken as UTC and a note says so).
Times of day alone (``12:00:01``) with no date column are counted from 1970-01-01 with midnight
rollover, like NMEA logs without a date.

Height reference: CSV does not say, so ``"unknown"`` unless the caller passes ``height_ref``
(``"ellipsoid"`` or ``"msl"``, which wins) or the column name says it.

Delimiter: comma, semicolon or tab, whichever the header line uses most. With semicolon or tab
delimiters a decimal comma (``48,1173``) is accepted in numeric columns.

Rows with both position cells empty (logger rows without a fix) and rows cut short before the
position columns are skipped and counted; a position cell that is not a number, or out of range,
is an ``InputError`` naming the line.
"""

from __future__ import annotations

import codecs
import csv
import io
import math
import re
from datetime import date, datetime, time, timezone

import numpy as np

from ..errors import InputError
from ..track import HEIGHT_ELLIPSOID, HEIGHT_MSL, HEIGHT_UNKNOWN, Track, make_track
from .nmea import KMH_MPS, KNOT_MPS, SECONDS_PER_DAY, day_rollover

#: One international mile (1609.344 m, exact by definition) per hour, in m/s.
MPH_MPS = 1609.344 / 3600.0

ROLES = ("time", "date", "lat", "lon", "height", "speed", "course", "accuracy", "hdop", "satellites")

_NAMES: dict[str, set[str]] = {
    "time": {
        "time",
        "timestamp",
        "datetime",
        "date_time",
        "utc",
        "epoch",
        "unix_time",
        "unixtime",
        "unix",
        "gps_time",
        "utc_time",
        "time_utc",
        "timestamp_utc",
        "utc_timestamp",
        "epoch_time",
        "gpstime",
        "utctime",
        "t",
    },
    "date": {"date", "utc_date", "gps_date", "date_utc"},
    "lat": {"lat", "latitude", "gps_lat", "gps_latitude"},
    "lon": {"lon", "lng", "long", "longitude", "gps_lon", "gps_lng", "gps_longitude"},
    "height": {"alt", "altitude", "ele", "elev", "elevation", "height", "h", "gps_alt", "z"},
    "speed": {"speed", "spd", "sog", "velocity", "ground_speed", "gps_speed", "speed_over_ground"},
    "course": {"course", "course_deg", "cog", "course_over_ground", "heading_deg", "track_deg", "bearing",
               "gps_course", "true_course", "course_true"},
    "accuracy": {
        "accuracy",
        "acc",
        "hacc",
        "h_acc",
        "horizontal_accuracy",
        "horiz_accuracy",
        "horizontal_acc",
        "eph",
        "position_accuracy",
    },
    "hdop": {"hdop"},
    "satellites": {
        "sats",
        "satellites",
        "sat",
        "num_sats",
        "nsat",
        "nsats",
        "numsv",
        "satellites_used",
        "sats_used",
        "num_satellites",
    },
}
_UNIT_TOKENS = {
    "m",
    "meter",
    "meters",
    "metre",
    "metres",
    "deg",
    "degree",
    "degrees",
    "dd",
    "wgs84",
    "s",
    "sec",
    "secs",
    "seconds",
    "ms",
    "msec",
    "millis",
    "milliseconds",
    "us",
    "ns",
    "mps",
    "kmh",
    "kph",
    "km",
    "h",
    "kn",
    "kt",
    "kts",
    "knots",
    "mph",
    "iso",
    "iso8601",
}
_ELLIPSOID_TOKENS = {"ellipsoid", "ellipsoidal", "ell", "hae", "ellips"}
_MSL_TOKENS = {"msl", "amsl", "orthometric", "ortho", "geoid", "mean_sea_level"}
_BINARY_CONTROL = set(range(0x00, 0x20)) - {0x09, 0x0A, 0x0D}


def read_csv(
    path: str,
    data: bytes,
    columns: dict[str, str] | None = None,
    height_ref: str | None = None,
) -> Track:
    """Read a CSV log into a Track.

    Parameters
    ----------
    path
        The file name as the user gave it (for messages and ``SourceInfo``).
    data
        The whole file.
    columns
        Optional role -> header name mapping (roles in ``ROLES``); overrides detection.
    height_ref
        ``"ellipsoid"`` or ``"msl"``: what the height column is measured from.

    Returns
    -------
    Track
        ``time_s`` in s since 1970-01-01 UTC (NaN without a time column), WGS 84 degrees, heights
        in m, ``speed_mps`` in m/s, ``course_deg`` (degrees clockwise from true north),
        ``accuracy_m`` in m, plus ``hdop`` and ``satellites``.

    Raises
    ------
    InputError
        Binary or undecodable data, no header, no lat/lon columns, a bad mapping, a non-numeric or
        out-of-range position (naming the line), or no rows with a position.
    """
    if height_ref is not None and height_ref not in (HEIGHT_ELLIPSOID, HEIGHT_MSL):
        raise InputError(path, f"height reference must be 'ellipsoid' or 'msl', not {height_ref!r}")
    text = _decode(path, data)
    header, header_line, rows, delimiter = _parse(path, text)
    mapping, notes = _map_columns(path, header, columns)
    if "lat" not in mapping or "lon" not in mapping:
        raise InputError(
            path,
            "no latitude/longitude columns found in the header "
            f"({_list(header)}); name them with a column mapping",
            f"line {header_line}",
        )
    skipped: dict[str, int] = {}
    rows = _usable_rows(rows, mapping, skipped)
    if not rows:
        raise InputError(path, f"no position fixes found{_skip_text(skipped)}")
    line_no = np.array([r[0] for r in rows])
    decimal_comma = delimiter != ","

    def column(role: str) -> list[str]:
        i = mapping[role]
        return [r[1][i].strip() if i < len(r[1]) else "" for r in rows]

    def numbers(role: str, what: str) -> np.ndarray:
        return _to_float(path, column(role), line_no, what, header[mapping[role]], decimal_comma)

    lat = numbers("lat", "latitude")
    lon = numbers("lon", "longitude")
    _check_range(path, lat, line_no, "latitude", 90.0)
    _check_range(path, lon, line_no, "longitude", 180.0)

    if "time" in mapping:
        dates = column("date") if "date" in mapping else None
        time_s, time_notes = _times(
            path, column("time"), dates, line_no, header[mapping["time"]], decimal_comma
        )
        notes.extend(time_notes)
    else:
        time_s = np.full(len(rows), np.nan)
        notes.append("no time column: fixes have no time")

    height = None
    ref = HEIGHT_UNKNOWN
    if "height" in mapping:
        height = numbers("height", "height")
        named = _height_ref_from_name(header[mapping["height"]])
        if height_ref is not None:
            ref = height_ref
            if named and named != height_ref:
                notes.append(
                    f"height column {header[mapping['height']]!r} looks like {named}, "
                    f"but height reference {height_ref!r} was given and is used"
                )
        elif named:
            ref = named
            notes.append(f"height reference {named} (from column name)")
        else:
            notes.append("height reference unknown: give 'ellipsoid' or 'msl' if you know it")

    optional: dict[str, np.ndarray] = {}
    if "speed" in mapping:
        factor, unit = _speed_factor(header[mapping["speed"]])
        optional["speed_mps"] = numbers("speed", "speed") * factor
        notes.append(f"speed column read as {unit}")
    if "course" in mapping:
        course = numbers("course", "course")
        bad = ~((course >= 0.0) & (course <= 360.0)) & np.isfinite(course)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(path, f"course {course[i]:g} is out of range (must be within 0-360 deg)",
                             f"line {line_no[i]}")
        optional["course_deg"] = np.where(course == 360.0, 0.0, course)
    if "accuracy" in mapping:
        optional["accuracy_m"] = numbers("accuracy", "accuracy")
    if "hdop" in mapping:
        optional["hdop"] = numbers("hdop", "HDOP")
    if "satellites" in mapping:
        optional["satellites"] = numbers("satellites", "satellite count")

    return make_track(
        path,
        "csv",
        time_s=time_s,
        lat_deg=lat,
        lon_deg=lon,
        height_m=height,
        height_ref=ref,
        records=len(rows) + sum(skipped.values()),
        skipped=skipped,
        reader="csv",
        notes=tuple(notes),
        **optional,
    )


# --- text and rows ----------------------------------------------------------------------------


def _decode(path: str, data: bytes) -> str:
    """UTF-8 (with or without BOM), UTF-16 with BOM, else Latin-1; refuse binary data."""
    if data.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        try:
            return data.decode("utf-16")
        except UnicodeDecodeError:
            raise InputError(
                path, "text starts like UTF-16 but does not decode as UTF-16"
            ) from None
    head = data[:65536]
    if b"\x00" in head or sum(head.count(bytes([c])) for c in _BINARY_CONTROL) > len(head) // 100:
        raise InputError(path, "binary data, not a CSV text file")
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError:
        return data.decode("latin-1")


def _parse(path: str, text: str) -> tuple[list[str], int, list[tuple[int, list[str]]], str]:
    """Split into header and data rows with their line numbers (1-based, as an editor shows)."""
    text = text.replace("\r\n", "\n").replace("\r", "\n")
    lines = text.split("\n")
    first = next(
        (i for i, ln in enumerate(lines) if ln.strip() and not ln.lstrip().startswith("#")), None
    )
    if first is None:
        raise InputError(path, "no header line found")
    counts = {d: lines[first].count(d) for d in (",", ";", "\t")}
    delimiter = max(counts, key=lambda d: (counts[d], d == ","))
    body = io.StringIO(text, newline="")
    for _ in range(first):
        body.readline()
    try:
        reader = csv.reader(body, delimiter=delimiter, strict=False)
        header = next(reader)
        header_line = first + reader.line_num
        rows = []
        for cells in reader:
            if cells and any(c.strip() for c in cells) and not cells[0].lstrip().startswith("#"):
                rows.append((first + reader.line_num, cells))
    except csv.Error as exc:
        raise InputError(path, f"unreadable CSV: {exc}") from None
    header = [h.strip() for h in header]
    return header, header_line, rows, delimiter


def _usable_rows(
    rows: list[tuple[int, list[str]]], mapping: dict[str, int], skipped: dict[str, int]
) -> list[tuple[int, list[str]]]:
    """Drop (and count) rows cut short before the position and rows with no position at all."""
    need = max(mapping["lat"], mapping["lon"])
    kept = []
    for line, cells in rows:
        if len(cells) <= need:
            skipped["short row"] = skipped.get("short row", 0) + 1
        elif not cells[mapping["lat"]].strip() and not cells[mapping["lon"]].strip():
            skipped["no position"] = skipped.get("no position", 0) + 1
        else:
            kept.append((line, cells))
    return kept


# --- header -> roles --------------------------------------------------------------------------


def _tokens(name: str) -> list[str]:
    return [t for t in re.sub(r"[^a-z0-9]+", "_", name.lower()).split("_") if t]


def _role_of(name: str) -> str | None:
    """Role a header name stands for, or None."""
    tokens = _tokens(name)
    if not tokens:
        return None
    full = "_".join(tokens)
    for role in ROLES:
        if full in _NAMES[role]:
            return role
    if _height_ref_from_name(name):
        core = [t for t in tokens if t not in _ELLIPSOID_TOKENS | _MSL_TOKENS | _UNIT_TOKENS]
        if not core or "_".join(core) in _NAMES["height"]:
            return "height"
    core = list(tokens)
    while len(core) > 1 and core[-1] in _UNIT_TOKENS:
        core.pop()
    base = "_".join(core)
    for role in ROLES:
        if base in _NAMES[role]:
            return role
    return None


def _height_ref_from_name(name: str) -> str | None:
    tokens = set(_tokens(name))
    if tokens & _ELLIPSOID_TOKENS or "ellipsoidal" in name.lower():
        return HEIGHT_ELLIPSOID
    if tokens & _MSL_TOKENS or "orthometric" in name.lower():
        return HEIGHT_MSL
    return None


def _map_columns(
    path: str, header: list[str], columns: dict[str, str] | None
) -> tuple[dict[str, int], list[str]]:
    """Role -> column index, explicit mapping first, then detection; plus notes saying so."""
    mapping: dict[str, int] = {}
    notes: list[str] = []
    for role, name in (columns or {}).items():
        if role not in ROLES:
            raise InputError(path, f"unknown column role {role!r} (roles: {', '.join(ROLES)})")
        idx = _find_header(header, name)
        if idx is None:
            raise InputError(path, f"no column {name!r} for {role}; columns are: {_list(header)}")
        mapping[role] = idx
    used = set(mapping.values())
    ignored: list[str] = []
    for i, name in enumerate(header):
        role = _role_of(name)
        if role is None or i in used:
            continue
        if role in mapping:
            ignored.append(name)
            continue
        mapping[role] = i
        used.add(i)
    if "date" in mapping and "time" not in mapping:
        mapping["time"] = mapping.pop("date")  # a lone date(time) column is the time
    mapped = ", ".join(f"{role}={header[i]!r}" for role, i in mapping.items())
    notes.append(f"columns: {mapped}")
    if ignored:
        notes.append(f"also matched but not used: {_list(ignored)}")
    return mapping, notes


def _find_header(header: list[str], name: str) -> int | None:
    if name in header:
        return header.index(name)
    folded = [h.strip().casefold() for h in header]
    key = name.strip().casefold()
    return folded.index(key) if key in folded else None


def _list(names: list[str]) -> str:
    shown = ", ".join(repr(n) for n in names[:30])
    return shown + (f", ... ({len(names)} columns)" if len(names) > 30 else "")


# --- values -----------------------------------------------------------------------------------


def _to_float(
    path: str,
    cells: list[str],
    line_no: np.ndarray,
    what: str,
    column: str,
    decimal_comma: bool,
) -> np.ndarray:
    """Cells -> float64 (empty -> NaN); InputError naming the first line that is not a number."""
    if decimal_comma:
        cells = [c.replace(",", ".") for c in cells]
    arr = np.array(cells, dtype=object)
    arr[arr == ""] = "nan"
    try:
        values = arr.astype(np.float64)
        bad = np.isinf(values)
    except (ValueError, TypeError, OverflowError):
        bad = np.array([not _is_number(c) for c in arr])
        values = None
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(
            path, f"{what} {cells[i]!r} in column {column!r} is not a number", f"line {line_no[i]}"
        )
    return values


def _is_number(s: str) -> bool:
    try:
        return not math.isinf(float(s))
    except (ValueError, OverflowError):
        return False


def _check_range(path: str, values: np.ndarray, line_no: np.ndarray, what: str, limit: float):
    bad = ~(np.abs(values) <= limit)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        shown = "missing" if np.isnan(values[i]) else f"{values[i]:g} is out of range"
        raise InputError(
            path, f"{what} {shown} (must be within +-{limit:g} deg)", f"line {line_no[i]}"
        )


def _speed_factor(name: str) -> tuple[float, str]:
    """Speed unit from the column name: (factor to m/s, unit label)."""
    tokens = _tokens(name)
    joined = "_".join(tokens)
    if {"kmh", "kph"} & set(tokens) or "km_h" in joined:
        return KMH_MPS, "km/h"
    if {"kn", "kt", "kts", "knots", "knot"} & set(tokens):
        return KNOT_MPS, "knots"
    if "mph" in tokens:
        return MPH_MPS, "mph"
    return 1.0, "m/s"


# --- time -------------------------------------------------------------------------------------

_EPOCH = datetime(1970, 1, 1, tzinfo=timezone.utc)
#: Epoch numbers above these are taken as ms / us / ns: 1e11 s is year 5138, 1e11 ms is 1973.
_SCALES = ((1e17, 1e-9, "nanoseconds"), (1e14, 1e-6, "microseconds"), (1e11, 1e-3, "milliseconds"))


def _times(
    path: str,
    cells: list[str],
    dates: list[str] | None,
    line_no: np.ndarray,
    column: str,
    decimal_comma: bool,
) -> tuple[np.ndarray, list[str]]:
    """Time cells (and optional date cells) -> s since 1970-01-01 UTC, plus notes."""
    numeric = _numeric_times(
        [c.replace(",", ".") for c in cells] if decimal_comma else cells, column
    )
    if numeric is not None:
        return numeric
    out = np.full(len(cells), np.nan)
    naive = 0
    time_only = np.zeros(len(cells), dtype=bool)
    for i, cell in enumerate(cells):
        if not cell:
            continue
        try:
            stamp, dated = _parse_stamp(cell, dates[i] if dates is not None else "")
        except ValueError:
            problem = (
                "is a number but other rows hold date-times"
                if _is_number(cell)
                else "is neither a number nor ISO 8601"
            )
            raise InputError(
                path, f"time {cell!r} in column {column!r} {problem}", f"line {line_no[i]}"
            ) from None
        time_only[i] = not dated
        if stamp.tzinfo is None:
            naive += 1
            stamp = stamp.replace(tzinfo=timezone.utc)
        out[i] = (stamp - _EPOCH).total_seconds()
    notes = []
    if naive:
        notes.append(f"{naive} times have no time zone: taken as UTC")
    if time_only.any():
        if not time_only[np.isfinite(out)].all():
            raise InputError(path, f"column {column!r} mixes dates and bare times of day")
        finite = np.isfinite(out)
        days, _ = day_rollover(out[finite], np.full(int(finite.sum()), np.nan))
        out[finite] += days * SECONDS_PER_DAY
        notes.append("no date in log: times are time of day only (counted from 1970-01-01)")
    return out, notes


def _parse_stamp(cell: str, day: str) -> tuple[datetime, bool]:
    """ISO 8601 date-time; or a time of day joined to ``day`` (ISO date), else to 1970-01-01.

    Returns the datetime and whether it carries a real date. Raises ``ValueError``.
    """
    try:
        return datetime.fromisoformat(cell), True
    except ValueError:
        t = time.fromisoformat(cell)
    if day:
        return datetime.combine(date.fromisoformat(day), t), True
    return datetime.combine(_EPOCH.date(), t), False


def _numeric_times(cells: list[str], column: str) -> tuple[np.ndarray, list[str]] | None:
    """Epoch numbers -> seconds (None if the column is not numeric)."""
    arr = np.array([c if c else "nan" for c in cells], dtype=object)
    try:
        values = arr.astype(np.float64)
    except (ValueError, TypeError, OverflowError):
        return None
    values[~np.isfinite(values)] = np.nan
    notes = []
    tokens = set(_tokens(column))
    finite = values[np.isfinite(values)]
    typical = float(np.median(np.abs(finite))) if len(finite) else 0.0
    scale, unit = 1.0, "seconds"
    for threshold, factor, name in _SCALES:
        if typical > threshold:
            scale, unit = factor, name
            break
    for token, factor, name in (
        ("ms", 1e-3, "milliseconds"),
        ("millis", 1e-3, "milliseconds"),
        ("milliseconds", 1e-3, "milliseconds"),
        ("us", 1e-6, "microseconds"),
        ("ns", 1e-9, "nanoseconds"),
    ):
        if token in tokens:
            scale, unit = factor, name
    if unit != "seconds":
        notes.append(f"time column read as UNIX epoch {unit}")
    values = values * scale
    if len(finite) and typical * scale < 1e8:
        notes.append("time values are small: they look like relative seconds, not UNIX time")
    return values, notes


def _skip_text(skipped: dict[str, int]) -> str:
    if not skipped:
        return ""
    return " (skipped: " + ", ".join(f"{k} {v}" for k, v in sorted(skipped.items())) + ")"
