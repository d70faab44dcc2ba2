"""NMEA 0183 text logs -> Track.

Sentences used
--------------
* ``GGA``: time of day, position, fix quality, satellites, HDOP, altitude above mean sea level and
  geoid separation.
* ``RMC``: time of day, status, position, speed over ground (knots), true course over ground
  (degrees) and the date (ddmmyy).
* ``GNS``: time of day, position, per-constellation mode, satellites, HDOP, altitude, separation.
* ``VTG``: true course and speed over ground; it carries no time and joins the epoch of the
  sentence before it.

Field layouts (NMEA 0183 v4.10, common practice): ``RMC,hhmmss.ss,A,llll.ll,a,yyyyy.yy,a,x.x
(speed, knots),x.x (course, degrees true),ddmmyy,x.x,a,m``; ``VTG,x.x (course true),T,x.x
(course magnetic),M,x.x (knots),N,x.x (km/h),K,m``. Course is read only as the true course
(the magnetic one needs the local variation); ``course_deg`` is degrees clockwise from true
north in [0, 360) and NaN where absent (receivers leave it empty when not moving).

Any talker id is accepted (``GP``, ``GN``, ``GL``, ``GA``, ``GB``, ...). Other sentence types and
proprietary ``$P...`` sentences are ignored and listed in ``SourceInfo.notes``.

Decisions (documented here because a log does not say)
-------------------------------------------------------
* Checksum (NMEA 0183): XOR of every character between ``$`` and ``*``, as two hex digits.
  A sentence with a wrong checksum is skipped and counted as ``"bad checksum"``.
* A sentence *without* checksum is accepted only when no sentence in the file carries one (a
  receiver configured that way); the notes then say the sentences were not verified. When the
  rest of the file has checksums, a sentence without one is almost always a line cut short (power
  loss, full card) and is skipped as ``"no checksum"``. In a file without checksums a sentence
  with fewer fields than its type's shortest standard form (``FULL_FIELDS``) is such a line and
  is skipped as ``"cut short"``: a damaged line break would otherwise pass a truncated GGA off
  as a fix without height.
* One fix per epoch: consecutive sentences with the same time of day are merged. Position comes
  from GGA, else GNS, else RMC; speed and course from RMC, else VTG; date from RMC.
* A course outside 0-360 degrees (or a negative speed) makes the sentence malformed; 360 is read
  as 0.
* Each sentence is judged on its own. Invalid fixes are dropped and counted: GGA quality 0
  (``"invalid fix (GGA quality 0)"``), RMC status ``V`` or mode ``N``
  (``"void fix (RMC status V)"``), GNS with every mode ``N`` (``"invalid fix (GNS mode N)"``);
  a VTG with mode ``N`` gives no speed.
* Dates: GGA has time of day only; every epoch takes the date of the nearest RMC before it (or,
  before the first RMC, the first RMC date), and a time of day that falls back by more than
  12 h between consecutive epochs is a midnight rollover (+1 day). With no RMC date anywhere,
  ``time_s`` counts from 1970-01-01 (usable as relative time) and a note says so.
* Two-digit RMC years: 80-99 -> 1980-1999, 00-79 -> 2000-2079 (GPS began in 1980; common
  practice).
* Heights: ellipsoidal height = GGA/GNS altitude + geoid separation (NMEA 0183), labelled
  ``"ellipsoid"``. If no fix has a separation the altitude is reported as ``"msl"``. If some fixes
  have a separation and others not, every height is reported as MSL altitude (never mixed) and a
  note says so.

Parsing is in two passes: a vectorised numpy pass over the raw bytes finds sentences, verifies
every checksum and classifies sentence types; a Python loop then decodes only the sentences that
carry fixes (sequential by nature: epochs are merged in file order).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from datetime import date

import numpy as np

from ..errors import InputError
from ..track import HEIGHT_ELLIPSOID, HEIGHT_MSL, Track, make_track

#: Metres per second in one knot: 1 international nautical mile = 1852 m exactly (by definition).
KNOT_MPS = 1852.0 / 3600.0
#: Metres per second in one km/h.
KMH_MPS = 1000.0 / 3600.0
SECONDS_PER_DAY = 86400.0
#: A fall in time of day larger than this between consecutive epochs is a midnight rollover.
ROLLOVER_S = SECONDS_PER_DAY / 2

_BLANK = bytes(range(0x21))  # control characters and space
_USED_TYPES = (b"GGA", b"RMC", b"GNS", b"VTG")
#: Comma-separated elements (the address included) of each type's shortest standard form, NMEA
#: 0183 (from memory): GGA 14 fields; RMC 11 (2.0; 2.3 adds the mode); GNS 12 (4.1 adds the
#: navigation status); VTG 8 (2.3 adds the mode).
FULL_FIELDS = {b"GGA": 15, b"RMC": 12, b"GNS": 13, b"VTG": 9}
_HEX = np.full(256, -1, dtype=np.int16)
for _i, _c in enumerate(b"0123456789ABCDEF"):
    _HEX[_c] = _i
for _i, _c in enumerate(b"abcdef"):
    _HEX[_c] = 10 + _i

SKIP_BAD_CHECKSUM = "bad checksum"
SKIP_NO_CHECKSUM = "no checksum"
SKIP_MALFORMED = "malformed"
SKIP_CUT_SHORT = "cut short"
SKIP_NOT_NMEA = "not an NMEA sentence"
SKIP_GGA_INVALID = "invalid fix (GGA quality 0)"
SKIP_RMC_VOID = "void fix (RMC status V)"
SKIP_GNS_INVALID = "invalid fix (GNS mode N)"


class _Malformed(ValueError):
    """A sentence whose fields cannot be decoded."""


@dataclass
class _Epoch:
    """Everything known about one receiver epoch (one time of day), merged from its sentences."""

    tod_s: float
    day: float = math.nan  # days since 1970-01-01 from RMC
    lat: float = math.nan
    lon: float = math.nan
    pos_rank: int = 0  # 3 GGA, 2 GNS, 1 RMC: the better source wins
    alt_m: float = math.nan
    sep_m: float = math.nan
    quality: float = math.nan
    sats: float = math.nan
    hdop: float = math.nan
    speed_rmc: float = math.nan
    speed_vtg: float = math.nan
    course_rmc: float = math.nan
    course_vtg: float = math.nan


@dataclass
class _Tally:
    skipped: dict[str, int] = field(default_factory=dict)

    def skip(self, reason: str, n: int = 1) -> None:
        if n:
            self.skipped[reason] = self.skipped.get(reason, 0) + n


def nmea_checksum(body: bytes) -> int:
    """NMEA 0183 checksum of the characters between ``$`` and ``*`` (XOR of every byte)."""
    acc = np.bitwise_xor.reduce(np.frombuffer(body, dtype=np.uint8)) if body else 0
    return int(acc)


def read_nmea(path: str, data: bytes) -> Track:
    """Read an NMEA 0183 text log into a Track.

    Parameters
    ----------
    path
        The file name as the user gave it (for messages and ``SourceInfo``).
    data
        The whole file.

    Returns
    -------
    Track
        One fix per valid epoch; ``time_s`` in s since 1970-01-01 UTC, WGS 84 degrees, heights in m
        (``"ellipsoid"`` or ``"msl"``, see module notes), ``speed_mps`` in m/s, ``course_deg`` (true
        course over ground, degrees clockwise from north), and the GGA
        ``fix_quality``, ``satellites`` and ``hdop``.

    Raises
    ------
    InputError
        When no usable fix remains (the message gives the skip counts).
    """
    tally = _Tally()
    sentences, n_records, no_dollar_lines = _split_sentences(data)
    tally.skip(SKIP_NOT_NMEA, no_dollar_lines)
    notes: list[str] = []

    starts, ends = sentences
    stars, checks_ok, has_star = _verify_checksums(data, starts, ends)
    tally.skip(SKIP_BAD_CHECKSUM, int(np.count_nonzero(has_star & ~checks_ok)))
    if has_star.any():
        tally.skip(SKIP_NO_CHECKSUM, int(np.count_nonzero(~has_star)))
        usable = has_star & checks_ok
    else:
        usable = np.ones(len(starts), dtype=bool)
        if len(starts):
            notes.append("no sentence carries a checksum: sentences were accepted unverified")
    body_end = np.where(has_star, stars, ends)

    idx = np.flatnonzero(usable)
    kinds, ignored = _classify(data, starts[idx], body_end[idx])
    if ignored:
        listed = ", ".join(f"{k} x{v}" for k, v in sorted(ignored.items()))
        notes.append(f"ignored sentence types: {listed}")

    epochs = _assemble(data, starts[idx], body_end[idx], kinds, tally, verified=bool(has_star.any()))
    if not epochs:
        raise InputError(path, f"no usable NMEA fixes (GGA/RMC/GNS) found{_skip_text(tally)}")

    time_s, date_note = _epoch_times(
        np.array([e.tod_s for e in epochs]), np.array([e.day for e in epochs])
    )
    if date_note:
        notes.append(date_note)
    height_m, height_ref, height_note = _heights(
        np.array([e.alt_m for e in epochs]), np.array([e.sep_m for e in epochs])
    )
    if height_note:
        notes.append(height_note)

    speed = np.array([e.speed_rmc if math.isfinite(e.speed_rmc) else e.speed_vtg for e in epochs])
    course = np.array([e.course_rmc if math.isfinite(e.course_rmc) else e.course_vtg for e in epochs])
    optional = {
        "fix_quality": np.array([e.quality for e in epochs]),
        "satellites": np.array([e.sats for e in epochs]),
        "hdop": np.array([e.hdop for e in epochs]),
        "speed_mps": speed,
        "course_deg": course,
    }
    optional = {k: v for k, v in optional.items() if np.isfinite(v).any()}
    return make_track(
        path,
        "nmea",
        time_s=time_s,
        lat_deg=[e.lat for e in epochs],
        lon_deg=[e.lon for e in epochs],
        height_m=height_m,
        height_ref=height_ref,
        records=n_records,
        skipped=tally.skipped,
        reader="nmea",
        notes=tuple(notes),
        **optional,
    )


# --- pass 1: vectorised over the raw bytes ----------------------------------------------------


def _split_sentences(data: bytes) -> tuple[tuple[np.ndarray, np.ndarray], int, int]:
    """Find every ``$`` sentence: byte offsets of its ``$`` and of its end (newline or next ``$``).

    Returns ``((starts, ends), records, lines_without_dollar)`` where ``records`` counts sentences
    plus non-blank lines that hold no sentence.
    """
    buf = np.frombuffer(data, dtype=np.uint8)
    n = len(buf)
    newlines = np.flatnonzero((buf == 0x0A) | (buf == 0x0D))
    dollars = np.flatnonzero(buf == 0x24)
    # A sentence ends at the first line break or '$' after its own '$'.
    breaks = np.append(newlines, n)  # sentinel: end of data
    next_nl = breaks[np.searchsorted(breaks, dollars)]
    next_dollar = np.append(dollars[1:], n)
    ends = np.minimum(next_nl, next_dollar)

    # Non-blank lines with no '$' at all (comments, AIS '!' sentences, garbage): rare, so the
    # blank test runs only on the lines that hold no '$'.
    line_starts = np.concatenate(([0], newlines + 1))
    line_ends = np.append(newlines, n)
    n_dollar = np.searchsorted(dollars, line_ends) - np.searchsorted(dollars, line_starts)
    bare = np.flatnonzero((n_dollar == 0) & (line_ends > line_starts))
    no_dollar = sum(1 for i in bare.tolist() if data[line_starts[i] : line_ends[i]].strip(_BLANK))
    return (dollars, ends), len(dollars) + no_dollar, no_dollar


def _verify_checksums(
    data: bytes, starts: np.ndarray, ends: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Check every sentence's checksum at once (NMEA 0183: XOR of bytes between '$' and '*').

    Returns ``(star_offsets, checksum_ok, has_star)``. A sentence "has a star" when its last '*' is
    followed by two hex digits (anything after them must be blank).
    """
    buf = np.frombuffer(data, dtype=np.uint8)
    n = len(buf)
    if len(starts) == 0:
        empty = np.zeros(0, dtype=np.int64)
        return empty, empty.astype(bool), empty.astype(bool)
    stars_all = np.concatenate(([-1], np.flatnonzero(buf == 0x2A)))  # -1: "no star" sentinel
    star = stars_all[np.searchsorted(stars_all, ends) - 1]  # last '*' before the sentence end
    has_star = (star > starts) & (star + 2 < ends)
    hi = _HEX[buf[np.clip(star + 1, 0, n - 1)]]
    lo = _HEX[buf[np.clip(star + 2, 0, n - 1)]]
    has_star &= (hi >= 0) & (lo >= 0)
    # Only blanks may follow the two hex digits (checked one by one: trailing text is rare).
    for i in np.flatnonzero(has_star & (star + 3 < ends)).tolist():
        has_star[i] = not data[star[i] + 3 : ends[i]].strip(_BLANK)
    # XOR of the bytes strictly between '$' and '*' = acc[star - 1] ^ acc[start].
    acc = np.bitwise_xor.accumulate(buf)
    body_xor = acc[np.clip(star - 1, 0, n - 1)] ^ acc[starts]
    ok = has_star & (body_xor.astype(np.int16) == hi * 16 + lo)
    return np.where(has_star, star, ends), ok, has_star


def _classify(
    data: bytes, starts: np.ndarray, body_ends: np.ndarray
) -> tuple[list[bytes | None], dict[str, int]]:
    """Sentence type of each sentence (``b"GGA"`` ...), ``None`` for types not used.

    A standard address is five characters (talker id + type) followed by ``,`` or the end of the
    body. Returns the kinds and a count of ignored types by name (e.g. ``{"GSV": 120, "P...": 4}``).
    """
    m = len(starts)
    pad = np.frombuffer(data + b"\0" * 7, dtype=np.uint8)
    window = pad[starts[:, None] + np.arange(1, 7)]  # the 6 bytes after '$'
    proprietary = window[:, 0] == ord("P")
    standard = (
        ~proprietary
        & (starts + 6 <= body_ends)
        & ((window[:, 5] == ord(",")) | (starts + 6 == body_ends))
        & (window[:, :5] >= ord("0")).all(axis=1)
        & (window[:, :5] <= ord("Z")).all(axis=1)
    )
    code = (
        (window[:, 2].astype(np.int32) << 16) | (window[:, 3].astype(np.int32) << 8) | window[:, 4]
    )
    kinds: list[bytes | None] = [None] * m
    used = np.zeros(m, dtype=bool)
    for kind in _USED_TYPES:
        hit = standard & (code == int.from_bytes(kind, "big"))
        used |= hit
        for i in np.flatnonzero(hit).tolist():
            kinds[i] = kind
    ignored: dict[str, int] = {}
    if proprietary.any():
        ignored["P..."] = int(np.count_nonzero(proprietary))
    unreadable = int(np.count_nonzero(~standard & ~proprietary))
    if unreadable:
        ignored["unreadable"] = unreadable
    values, counts = np.unique(code[standard & ~used], return_counts=True)
    for v, c in zip(values.tolist(), counts.tolist()):
        name = int(v).to_bytes(3, "big").decode("ascii")
        ignored[name] = ignored.get(name, 0) + c
    return kinds, ignored


# --- pass 2: decode fix sentences and merge epochs ------------------------------------------


def _assemble(
    data: bytes, starts: np.ndarray, body_ends: np.ndarray, kinds: list, tally: _Tally, verified: bool = True
) -> list[_Epoch]:
    """Decode GGA/RMC/GNS/VTG in file order and merge consecutive same-time sentences.
    ``verified``: the sentences passed their checksums; without, a sentence shorter than
    ``FULL_FIELDS`` is skipped as cut short."""
    epochs: list[_Epoch] = []
    current: _Epoch | None = None
    for s, e, kind in zip(starts.tolist(), body_ends.tolist(), kinds):
        if kind is None:
            continue
        try:
            text = data[s + 1 : e].decode("ascii")
        except UnicodeDecodeError:
            tally.skip(SKIP_MALFORMED)
            continue
        f = text.split(",")
        if not verified and len(f) < FULL_FIELDS[kind]:
            tally.skip(SKIP_CUT_SHORT)
            continue
        try:
            if kind == b"VTG":
                speed, course = _vtg(f)
                if current is not None:
                    if math.isfinite(speed):
                        current.speed_vtg = speed
                    if math.isfinite(course):
                        current.course_vtg = course
                continue
            tod = _time_of_day(f[1] if len(f) > 1 else "")
            if current is None or tod != current.tod_s:
                current = _Epoch(tod)
                epochs.append(current)
            reason = _DECODERS[kind](f, current)
        except _Malformed:
            tally.skip(SKIP_MALFORMED)
            continue
        if reason:
            tally.skip(reason)
    return [ep for ep in epochs if ep.pos_rank > 0]


def _gga(f: list[str], ep: _Epoch) -> str | None:
    """GGA: time, lat, N/S, lon, E/W, quality, sats, HDOP, alt, M, separation, M, age, station."""
    if len(f) < 10:
        raise _Malformed
    quality = _int_field(f[6])
    if quality is None:
        raise _Malformed
    if quality == 0:
        return SKIP_GGA_INVALID
    lat, lon = _position(f[2], f[3], f[4], f[5])
    alt = _float_field(f[9])
    sep = _float_field(f[11]) if len(f) > 11 else math.nan
    if not math.isfinite(alt):
        sep = math.nan
    _set_position(ep, lat, lon, 3)
    ep.quality = float(quality)
    ep.sats = _float_field(f[7])
    ep.hdop = _float_field(f[8])
    if math.isfinite(alt):
        ep.alt_m, ep.sep_m = alt, sep
    return None


def _rmc(f: list[str], ep: _Epoch) -> str | None:
    """RMC: time, status, lat, N/S, lon, E/W, speed (kn), course, ddmmyy, magvar, E/W, mode."""
    if len(f) < 10:
        raise _Malformed
    status = f[2]
    mode = f[12] if len(f) > 12 else ""
    if status not in ("A", "V") or mode[:1] not in (
        "",
        "A",
        "D",
        "E",
        "F",
        "M",
        "P",
        "R",
        "S",
        "N",
    ):
        raise _Malformed
    if status == "V" or mode[:1] == "N":
        return SKIP_RMC_VOID
    lat, lon = _position(f[3], f[4], f[5], f[6])
    day = _date_days(f[9])
    knots = _float_field(f[7])
    if knots < 0:
        raise _Malformed
    course = _course_field(f[8])
    # every field decoded: only now does the sentence touch the epoch
    _set_position(ep, lat, lon, 1)
    if math.isfinite(knots):
        ep.speed_rmc = knots * KNOT_MPS
    if math.isfinite(course):
        ep.course_rmc = course
    ep.day = day
    return None


def _gns(f: list[str], ep: _Epoch) -> str | None:
    """GNS: time, lat, N/S, lon, E/W, mode chars, sats, HDOP, alt, separation, age, station."""
    if len(f) < 10:
        raise _Malformed
    mode = f[6]
    if not mode or not mode.isalpha():
        raise _Malformed
    if set(mode) == {"N"}:
        return SKIP_GNS_INVALID
    lat, lon = _position(f[2], f[3], f[4], f[5])
    alt = _float_field(f[9])
    sep = _float_field(f[10]) if len(f) > 10 else math.nan
    _set_position(ep, lat, lon, 2)
    if not math.isfinite(ep.sats):
        ep.sats = _float_field(f[7])
    if not math.isfinite(ep.hdop):
        ep.hdop = _float_field(f[8])
    if math.isfinite(alt) and not math.isfinite(ep.alt_m):
        ep.alt_m, ep.sep_m = alt, sep
    return None


_DECODERS = {b"GGA": _gga, b"RMC": _rmc, b"GNS": _gns}


def _vtg(f: list[str]) -> tuple[float, float]:
    """VTG speed over ground in m/s (km/h field, else knots) and true course in degrees; NaN if
    absent or mode ``N``."""
    if len(f) < 9:
        raise _Malformed
    mode = f[9] if len(f) > 9 else ""
    if mode[:1] == "N":
        return math.nan, math.nan
    course = _course_field(f[1])
    kmh = _float_field(f[7])
    if math.isfinite(kmh) and kmh >= 0:
        return kmh * KMH_MPS, course
    knots = _float_field(f[5])
    if math.isfinite(knots) and knots >= 0:
        return knots * KNOT_MPS, course
    return math.nan, course


def _course_field(s: str) -> float:
    """True course over ground, degrees clockwise from north in [0, 360); NaN when empty."""
    v = _float_field(s)
    if math.isnan(v):
        return v
    if not 0.0 <= v <= 360.0:
        raise _Malformed
    return 0.0 if v == 360.0 else v


def _set_position(ep: _Epoch, lat: float, lon: float, rank: int) -> None:
    if rank > ep.pos_rank:
        ep.lat, ep.lon, ep.pos_rank = lat, lon, rank


def _float_field(s: str) -> float:
    """A numeric field; NaN when empty. Raises ``_Malformed`` on anything but a finite number."""
    if not s:
        return math.nan
    try:
        v = float(s)
    except ValueError:
        raise _Malformed from None
    if not math.isfinite(v) or "_" in s:
        raise _Malformed
    return v


def _int_field(s: str) -> int | None:
    if not s:
        return None
    if not s.isdigit():
        raise _Malformed
    return int(s)


def _time_of_day(s: str) -> float:
    """``hhmmss[.sss]`` -> seconds since midnight."""
    if len(s) < 6 or not s[:6].isdigit() or (len(s) > 6 and (s[6] != "." or not s[7:].isdigit())):
        raise _Malformed
    hh, mm = int(s[0:2]), int(s[2:4])
    ss = float(s[4:])
    if hh > 23 or mm > 59 or ss >= 61.0:  # 60.x allowed for a leap second
        raise _Malformed
    return hh * 3600.0 + mm * 60.0 + ss


def _coord(value: str, hemi: str, deg_digits: int, pos: str, neg: str, limit: float) -> float:
    """``(d)ddmm.mmmm`` + hemisphere -> signed decimal degrees (S and W negative)."""
    if hemi not in (pos, neg):
        raise _Malformed
    dot = value.find(".")
    whole = value if dot < 0 else value[:dot]
    frac = "" if dot < 0 else value[dot + 1 :]
    if (
        not (3 <= len(whole) <= deg_digits + 2)
        or not whole.isdigit()
        or (frac and not frac.isdigit())
    ):
        raise _Malformed
    degrees = int(whole[:-2])
    minutes = float(whole[-2:] + "." + (frac or "0"))
    if minutes >= 60.0:
        raise _Malformed
    v = degrees + minutes / 60.0
    if v > limit:
        raise _Malformed
    return -v if hemi == neg else v


def _position(lat: str, ns: str, lon: str, ew: str) -> tuple[float, float]:
    if not lat or not lon:
        raise _Malformed
    return _coord(lat, ns, 2, "N", "S", 90.0), _coord(lon, ew, 3, "E", "W", 180.0)


def _date_days(s: str) -> float:
    """RMC ``ddmmyy`` -> days since 1970-01-01; NaN when the field is empty."""
    if not s:
        return math.nan
    if len(s) != 6 or not s.isdigit():
        raise _Malformed
    dd, mo, yy = int(s[0:2]), int(s[2:4]), int(s[4:6])
    year = 1900 + yy if yy >= 80 else 2000 + yy
    try:
        d = date(year, mo, dd)
    except ValueError:
        raise _Malformed from None
    return float(d.toordinal() - date(1970, 1, 1).toordinal())


# --- per-epoch arrays -------------------------------------------------------------------------


def day_rollover(tod_s: np.ndarray, day: np.ndarray) -> tuple[np.ndarray, bool]:
    """Absolute day number for each epoch from known dates (NaN where unknown) and midnight wraps.

    Parameters
    ----------
    tod_s
        Time of day, s since midnight UTC, in file order.
    day
        Days since 1970-01-01 where the epoch carries a date, NaN elsewhere.

    Returns
    -------
    days, dated
        Day number per epoch (float) and whether any date was known. Between dated epochs the day
        advances by one each time the time of day falls back by more than 12 h; epochs before the
        first dated one count back from it the same way.
    """
    n = len(tod_s)
    if n == 0:
        return np.zeros(0), False
    wraps = np.concatenate(([0], np.cumsum(np.diff(tod_s) < -ROLLOVER_S)))
    known = np.isfinite(day)
    if not known.any():
        return wraps.astype(np.float64), False
    offset = np.where(known, day - wraps, np.nan)
    # forward-fill the offset of the latest dated epoch; back-fill before the first one
    last = np.maximum.accumulate(np.where(known, np.arange(n), -1))
    first = int(np.flatnonzero(known)[0])
    filled = offset[np.where(last >= 0, last, first)]
    return filled + wraps, True


def _epoch_times(tod_s: np.ndarray, day: np.ndarray) -> tuple[np.ndarray, str | None]:
    days, dated = day_rollover(tod_s, day)
    note = None if dated else "no date in log: times are time of day only (counted from 1970-01-01)"
    return days * SECONDS_PER_DAY + tod_s, note


def _heights(alt_m: np.ndarray, sep_m: np.ndarray) -> tuple[np.ndarray, str, str | None]:
    """Pick one height reference for the whole Track (see module notes)."""
    has_alt = np.isfinite(alt_m)
    has_sep = np.isfinite(sep_m) & has_alt
    if not has_alt.any():
        return alt_m, HEIGHT_MSL, None
    if has_sep[has_alt].all():
        return alt_m + sep_m, HEIGHT_ELLIPSOID, None
    if has_sep.any():
        note = (
            f"geoid separation missing on {int(np.count_nonzero(has_alt & ~has_sep))} of "
            f"{int(np.count_nonzero(has_alt))} fixes: all heights are MSL altitude"
        )
        return alt_m, HEIGHT_MSL, note
    return alt_m, HEIGHT_MSL, None


def _skip_text(tally: _Tally) -> str:
    if not tally.skipped:
        return ""
    return " (skipped: " + ", ".join(f"{k} {v}" for k, v in sorted(tally.skipped.items())) + ")"
