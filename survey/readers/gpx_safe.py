"""GPX safe path: a real XML parser (lxml, no DTD, no entities, no network) walking every point.

This path is correct on every valid GPX 1.0/1.1 file (namespaces default or prefixed, comments,
CDATA, extensions, any attribute order, any encoding lxml knows) and turns every problem into a
one-line ``InputError``. It costs a Python step per XML event, so the bulk path in
``gpx_fast`` is tried first and falls back here whenever it meets anything it does not handle.

This module also holds the pieces both paths share: namespaces, the fixes record, the strict
number pattern and the vectorised ISO 8601 time conversion.

Sources: GPX 1.1 schema (http://www.topografix.com/GPX/1/1, wptType element order and types);
GPX 1.0 schema (http://www.topografix.com/GPX/1/0); W3C XML Schema part 2 (xsd:decimal,
xsd:dateTime lexical forms).
"""

from __future__ import annotations

import io
import re
from dataclasses import dataclass, field

import numpy as np
from lxml import etree

from ..errors import InputError

GPX10_NS = "http://www.topografix.com/GPX/1/0"
GPX11_NS = "http://www.topografix.com/GPX/1/1"
FORMAT_BY_NS = {GPX10_NS: "gpx-1.0", GPX11_NS: "gpx-1.1"}

#: Parser options for untrusted files: no DTD loading, no entity expansion, no network.
XML_OPTIONS = dict(
    resolve_entities=False,
    no_network=True,
    load_dtd=False,
    dtd_validation=False,
    huge_tree=True,
    remove_comments=True,
    remove_pis=True,
)

#: xsd:decimal, plus an exponent (accepted by common GPX readers), surrounding XML whitespace.
NUMBER_RE = re.compile(r"[ \t\r\n]*([-+]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][-+]?[0-9]+)?)[ \t\r\n]*\Z")

#: xsd:dateTime and the looser shapes found in real logs (1-digit fields, space for 'T',
#: offsets written +hh, +hhmm, +hh:mm, U+2212 minus); fractions of any length.
TIME_RE = re.compile(
    r"[ \t\r\n]*([0-9]{4})-([0-9]{1,2})-([0-9]{1,2})[T ]([0-9]{1,2}):([0-9]{1,2}):([0-9]{1,2})"
    r"(?:\.([0-9]+))?(Z|[-+\u2212][0-9]{2}(?::?[0-9]{2})?)?[ \t\r\n]*\Z"
)


@dataclass
class Fixes:
    """Points read from a GPX file, before they become a Track.

    Arrays in Track units (degrees, metres, UTC epoch seconds), NaN where a point lacks a value.
    """

    fmt: str
    lat_deg: np.ndarray
    lon_deg: np.ndarray
    height_m: np.ndarray
    time_s: np.ndarray
    segment: np.ndarray
    hdop: np.ndarray | None = None
    satellites: np.ndarray | None = None
    notes: list[str] = field(default_factory=list)
    speed_mps: np.ndarray | None = None  # GPX 1.0 <speed>, m/s
    course_deg: np.ndarray | None = None  # GPX 1.0 <course>, degrees from true north

    def __len__(self) -> int:
        return len(self.lat_deg)


class TimeError(ValueError):
    """A time stamp that is not a valid date and time; ``index`` says which."""

    def __init__(self, index: int, text: str):
        super().__init__(text)
        self.index = index
        self.text = text


_DIGIT_COLS = np.array([0, 1, 2, 3, 5, 6, 8, 9, 11, 12, 14, 15, 17, 18])
_DAYS_IN_MONTH = np.array([0, 31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31])


def gpx_times_to_epoch(stamps) -> np.ndarray:
    """Convert ISO 8601 time stamps to seconds since the UNIX epoch (UTC), vectorised.

    Parameters
    ----------
    stamps
        Sequence of bytes ``b"YYYY-MM-DDThh:mm:ss[.f{1,9}][Z|+hh:mm|-hh:mm]"`` (xsd:dateTime),
        or ``b""`` for a point without time (-> NaN). A stamp without offset is read as UTC
        (common practice for GPS logs).

    Returns
    -------
    float64 array of seconds (UTC); resolution is that of float64 (about 0.2 us in this era).

    Raises
    ------
    TimeError
        Naming the first stamp that is malformed or names an impossible date, clock time
        (``ss`` = 60 included) or offset.

    Notes
    -----
    Days from the civil date by the proleptic Gregorian algorithm of H. Hinnant,
    "chrono-Compatible Low-Level Date Algorithms" (days_from_civil), in integer numpy arithmetic.
    """
    n = len(stamps)
    out = np.full(n, np.nan)
    if n == 0:
        return out
    a = np.array(stamps, dtype="S35")
    has = a != b""
    if not has.any():
        return out
    idx = np.flatnonzero(has)
    u = a[has].view(np.uint8).reshape(-1, 35).astype(np.int16)
    # fraction: '.' then 1-9 digits
    fd = u[:, 20:29] - 48
    is_digit = (fd >= 0) & (fd <= 9)
    dot = u[:, 19] == 46
    ndig = np.where(dot, is_digit.cumprod(axis=1).sum(axis=1), 0)
    frac_ok = ~dot | (ndig >= 1)
    ns = (np.where(np.arange(9) < ndig[:, None], fd, 0).astype(np.int64)) @ (10 ** np.arange(8, -1, -1, dtype=np.int64))
    # offset: starts after the fraction; '', 'Z' or sign hh ':' mm, then nothing
    start = np.where(dot, 20 + ndig, 19)
    o = np.take_along_axis(u, np.minimum(start[:, None] + np.arange(7), 34), axis=1)
    o[start[:, None] + np.arange(7) > 34] = 0
    signed = (o[:, 0] == 43) | (o[:, 0] == 45)
    od = o[:, [1, 2, 4, 5]] - 48
    hh = od[:, 0] * 10 + od[:, 1]
    mm = od[:, 2] * 10 + od[:, 3]
    off_ok = signed & ((od >= 0) & (od <= 9)).all(axis=1) & (o[:, 3] == 58) & (o[:, 6] == 0)
    off_ok &= (hh <= 23) & (mm <= 59)
    utc_like = ((o[:, 0] == 0) | (o[:, 0] == 90)) & (o[:, 1:] == 0).all(axis=1)  # '' or 'Z'
    ok = frac_ok & np.where(signed, off_ok, utc_like)
    u = u[:, :19].astype(np.int64)
    d = u[:, _DIGIT_COLS] - 48
    ok &= ((d >= 0) & (d <= 9)).all(axis=1)
    ok &= (u[:, 4] == 45) & (u[:, 7] == 45) & (u[:, 10] == 84) & (u[:, 13] == 58) & (u[:, 16] == 58)
    year = d[:, 0] * 1000 + d[:, 1] * 100 + d[:, 2] * 10 + d[:, 3]
    month = d[:, 4] * 10 + d[:, 5]
    day = d[:, 6] * 10 + d[:, 7]
    hour, minute, second = (d[:, 8] * 10 + d[:, 9], d[:, 10] * 10 + d[:, 11], d[:, 12] * 10 + d[:, 13])
    month_ok = (month >= 1) & (month <= 12)
    leap = (year % 4 == 0) & ((year % 100 != 0) | (year % 400 == 0))
    dim = _DAYS_IN_MONTH[np.where(month_ok, month, 0)] + ((month == 2) & leap)
    ok &= month_ok & (day >= 1) & (day <= dim) & (hour <= 23) & (minute <= 59) & (second <= 59)
    if not ok.all():
        i = int(idx[np.argmin(ok)])
        raise TimeError(i, bytes(stamps[i]).decode("ascii", "replace"))
    y = year - (month <= 2)
    era = np.floor_divide(y, 400)
    yoe = y - era * 400
    doy = (153 * (month + np.where(month > 2, -3, 9)) + 2) // 5 + day - 1
    doe = yoe * 365 + yoe // 4 - yoe // 100 + doy
    days = era * 146097 + doe - 719468
    sign = np.where(o[:, 0] == 45, -1, 1)
    sec = days * 86400 + hour * 3600 + minute * 60 + second - np.where(signed, sign * (hh * 3600 + mm * 60), 0)
    out[idx] = sec.astype(np.float64) + ns.astype(np.float64) * 1e-9
    return out


def normalise_time(text: str) -> bytes | None:
    """Rewrite one time stamp of an accepted shape as canonical xsd:dateTime bytes.

    ``2024-5-1 7:03:09.5+0200`` -> ``b"2024-05-01T07:03:09.5+02:00"``; fractions are cut to
    9 digits (nanoseconds).

    Returns ``None`` when ``text`` is not a time stamp of an accepted shape.
    """
    m = TIME_RE.match(text)
    if m is None:
        return None
    y, mo, d, h, mi, s, frac, off = m.groups()
    base = b"%s-%02d-%02dT%02d:%02d:%02d" % (y.encode(), int(mo), int(d), int(h), int(mi), int(s))
    fr = b"." + frac[:9].encode() if frac else b""
    if not off or off == "Z":
        o = off.encode() if off else b""
    else:
        sign = b"-" if off[0] in "-\u2212" else b"+"
        digits = off[1:].replace(":", "")
        o = sign + (digits[:2] + ":" + (digits[2:4] or "00")).encode()
    return base + fr + o


def parse_number(text: str | None) -> float | None:
    """Parse an xsd:decimal (exponent allowed); ``None`` if it is not one."""
    if text is None:
        return None
    m = NUMBER_RE.match(text)
    return float(m.group(1)) if m else None


def xml_error(path: str, exc: Exception) -> InputError:
    """One-line InputError for an lxml parse error."""
    line = getattr(exc, "lineno", None)
    msg = getattr(exc, "msg", None) or str(exc) or type(exc).__name__
    msg = msg.split(", line ")[0]
    return InputError(path, f"not well-formed XML ({msg})", f"line {line}" if line else None)


def root_format(path: str, root) -> tuple[str, str]:
    """Check the root element is a GPX 1.0/1.1 ``gpx``; return (namespace, format string)."""
    tag = root.tag if isinstance(root.tag, str) else ""
    q = etree.QName(tag) if tag else None
    local = q.localname if q else "?"
    ns = (q.namespace or "") if q else ""
    if local != "gpx":
        raise InputError(path, f"not a GPX file (root element is <{local}>)", f"line {root.sourceline}")
    if ns in FORMAT_BY_NS:
        return ns, FORMAT_BY_NS[ns]
    if ns == "":
        version = (root.get("version") or "").strip()
        return "", "gpx-1.0" if version == "1.0" else "gpx-1.1"
    raise InputError(path, f"not a GPX 1.0/1.1 file (root namespace {ns!r})", f"line {root.sourceline}")


#: Only these elements produce parse events (any namespace; checked against the root's below).
_WATCHED = ["{*}trk", "{*}trkseg", "{*}trkpt", "{*}rte", "{*}rtept"]


def read_safe(path: str, data: bytes) -> Fixes:
    """Read every track point (else every route point) with lxml's streaming parser.

    Memory stays bounded by the points, not the XML tree: finished points are freed as the
    parse goes on. Raises ``InputError`` for anything that is not valid GPX.
    """
    it = etree.iterparse(io.BytesIO(data), events=("start", "end"), tag=_WATCHED, **XML_OPTIONS)
    root = None
    ns = ""
    fmt = ""
    tags: dict[str, str] = {}
    pts: dict[str, list] = {"trkpt": [], "rtept": []}
    seg_no = {"trkpt": -1, "rtept": -1}
    try:
        for event, el in it:
            if root is None:
                root = el.getroottree().getroot()
                ns, fmt = root_format(path, root)
                pre = f"{{{ns}}}" if ns else ""
                tags = {pre + k: k for k in ("trk", "trkseg", "trkpt", "rte", "rtept")}
            kind = tags.get(el.tag)
            if kind is None:
                continue
            parent = el.getparent()
            if event == "start":
                if kind == "trkseg" and parent is not None and parent.getparent() is root:
                    seg_no["trkpt"] += 1
                elif kind == "rte" and parent is root:
                    seg_no["rtept"] += 1
                continue
            if kind not in pts:
                continue
            if kind == "trkpt":
                ok = (
                    parent is not None
                    and tags.get(parent.tag) == "trkseg"
                    and tags.get(parent.getparent().tag) == "trk"
                    and parent.getparent().getparent() is root
                )
            else:
                ok = parent is not None and tags.get(parent.tag) == "rte" and parent.getparent() is root
            if ok:
                pts[kind].append(_point(path, el, kind, len(pts[kind]) + 1, ns, seg_no[kind]))
                el.clear(keep_tail=True)
                while el.getprevious() is not None:
                    del parent[0]
    except etree.XMLSyntaxError as exc:
        raise xml_error(path, exc) from None
    except (ValueError, LookupError, UnicodeError) as exc:  # encoding problems lxml reports this way
        raise InputError(path, f"cannot decode the XML ({exc})") from None
    if root is None:
        root = it.root
        if root is None:
            raise InputError(path, "not a GPX file (no XML element)")
        ns, fmt = root_format(path, root)
    if root.getroottree().docinfo.internalDTD is not None:  # belt and braces: gpx.py refuses first
        raise InputError(path, "refused: the XML declares a DTD/entities (GPX needs none)")
    kind = "trkpt" if pts["trkpt"] else "rtept"
    return _assemble(path, fmt, pts[kind], kind)


def _point(path: str, el, kind: str, number: int, ns: str, seg: int) -> tuple:
    """One point as (lat, lon, ele, time text, hdop, sat, speed, course, seg, line, number);
    speed (m/s) and course (degrees, true) are GPX 1.0 elements (absent from GPX 1.1)."""
    where = f"line {el.sourceline}, {kind} {number}"
    vals = []
    for attr, limit in (("lat", 90.0), ("lon", 180.0)):
        text = el.get(attr)
        if text is None:
            raise InputError(path, f"{kind} has no {attr} attribute", where)
        v = parse_number(text)
        if v is None:
            raise InputError(path, f"{attr} {text.strip()[:40]!r} is not a number", where)
        if not -limit <= v <= limit:
            raise InputError(path, f"{attr} {v:g} is out of range [-{limit:g}, {limit:g}]", where)
        vals.append(v)
    pre = f"{{{ns}}}" if ns else ""
    found: dict[str, str] = {}
    for ch in el:
        tag = ch.tag
        if isinstance(tag, str) and tag.startswith(pre):
            name = tag[len(pre):]
            if name in _POINT_CHILDREN and name not in found:
                found[name] = "".join(ch.itertext())
    out = [vals[0], vals[1]]
    for name in _POINT_CHILDREN:
        text = found.get(name)
        if text is None or not text.strip():
            out.append(None)
        elif name == "time":
            parts = normalise_time(text)
            if parts is None:
                raise InputError(path, f"time {text.strip()[:40]!r} is not an ISO 8601 date-time", where)
            out.append(parts)
        else:
            v = parse_number(text)
            if v is None:
                raise InputError(path, f"{name} {text.strip()[:40]!r} is not a number", where)
            if name == "speed" and v < 0:
                raise InputError(path, f"speed {v:g} is negative", where)
            if name == "course" and not 0.0 <= v <= 360.0:
                raise InputError(path, f"course {v:g} is out of range [0, 360]", where)
            out.append(v)
    return (*out, seg, el.sourceline, number)


#: Point children read, in the order ``_point`` returns them (speed and course: GPX 1.0 only).
_POINT_CHILDREN = ("ele", "time", "hdop", "sat", "speed", "course")


def _assemble(path: str, fmt: str, pts: list, kind: str) -> Fixes:
    n = len(pts)
    if n == 0:
        return Fixes(fmt, *(np.empty(0) for _ in range(4)), np.empty(0, np.int32))
    lat, lon, ele, tm, hdop, sat, speed, course, seg, line, number = zip(*pts)
    tparts = [t or b"" for t in tm]
    try:
        time_s = gpx_times_to_epoch(tparts)
    except TimeError as exc:
        raise InputError(
            path, f"time {exc.text!r} is not a valid date-time", f"line {line[exc.index]}, {kind} {exc.index + 1}"
        ) from None
    notes = []
    naive = sum(1 for t in tparts if t and t[-1:] != b"Z" and t[-6:-5] not in (b"+", b"-"))
    if naive:
        notes.append(f"{naive} time stamps had no UTC offset; read as UTC")

    def col(values) -> np.ndarray:
        return np.array([np.nan if v is None else v for v in values], dtype=np.float64)

    _, seg_ids = np.unique(np.asarray(seg), return_inverse=True)
    return Fixes(
        fmt=fmt,
        lat_deg=np.asarray(lat, dtype=np.float64),
        lon_deg=np.asarray(lon, dtype=np.float64),
        height_m=col(ele),
        time_s=time_s,
        segment=seg_ids.astype(np.int32),
        hdop=col(hdop) if any(v is not None for v in hdop) else None,
        satellites=col(sat) if any(v is not None for v in sat) else None,
        notes=notes + ([] if kind == "trkpt" else ["no track points; read the route points"]),
        speed_mps=col(speed) if any(v is not None for v in speed) else None,
        course_deg=col(course) % 360.0 if any(v is not None for v in course) else None,
    )
