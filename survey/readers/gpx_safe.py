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

    ``time_base`` holds ``b"YYYY-MM-DDThh:mm:ss"`` (local clock of the offset) or ``b""``;
    ``time_frac`` up to 9 fraction digits; ``time_off`` ``b""``, ``b"Z"`` or ``b"+hh:mm"``.
    Converted by ``gpx_times_to_epoch``.
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

    def __len__(self) -> int:
        return len(self.lat_deg)


class TimeError(ValueError):
    """A time stamp that is not a valid date and time; ``index`` says which."""

    def __init__(self, index: int, text: str):
        super().__init__(text)
        self.index = index
        self.text = text


def gpx_times_to_epoch(base, frac, off) -> np.ndarray:
    """Convert split ISO 8601 time stamps to seconds since the UNIX epoch (UTC), vectorised.

    Parameters
    ----------
    base
        Sequence of ``b"YYYY-MM-DDThh:mm:ss"`` (``b""`` for a point without time -> NaN).
    frac
        Sequence of fraction-of-second digit strings, at most 9 digits (``b""`` for none).
    off
        Sequence of UTC offsets ``b""`` / ``b"Z"`` (UTC) or ``b"+hh:mm"`` / ``b"-hh:mm"``.
        A time without offset is read as UTC (common practice for GPS logs).

    Returns
    -------
    float64 array of seconds (UTC); resolution is that of float64 (about 0.2 us in this era).

    Raises
    ------
    TimeError
        Naming the first stamp with an impossible date, clock time or offset.
    """
    n = len(base)
    out = np.full(n, np.nan)
    if n == 0:
        return out
    b = np.asarray(base, dtype="S19")
    has = b != b""
    if not has.any():
        return out
    b = b[has]
    try:
        sec = b.astype("datetime64[s]").astype(np.int64)
    except ValueError:
        raise _first_bad_time(base) from None
    f = np.asarray(frac, dtype="S9")[has]
    digits = f.view(np.uint8).reshape(len(f), 9).astype(np.int64)
    digits = np.where(digits == 0, 0, digits - 48)
    ns = digits @ (10 ** np.arange(8, -1, -1, dtype=np.int64))
    o = np.asarray(off, dtype="S6")[has]
    ob = o.view(np.uint8).reshape(len(o), 6).astype(np.int64)
    signed = (ob[:, 0] == ord("+")) | (ob[:, 0] == ord("-"))
    hh = np.where(signed, (ob[:, 1] - 48) * 10 + (ob[:, 2] - 48), 0)
    mm = np.where(signed, (ob[:, 4] - 48) * 10 + (ob[:, 5] - 48), 0)
    bad = (hh > 23) | (mm > 59)
    if bad.any():
        idx = np.flatnonzero(has)[np.argmax(bad)]
        raise TimeError(int(idx), f"{base[idx]!r}{off[idx]!r}")
    sign = np.where(ob[:, 0] == ord("-"), -1, 1)
    utc = sec - sign * (hh * 3600 + mm * 60)
    out[has] = utc.astype(np.float64) + ns.astype(np.float64) * 1e-9
    return out


def _first_bad_time(base) -> TimeError:
    for i, s in enumerate(base):
        if s:
            try:
                np.datetime64(s.decode("ascii"), "s")
            except ValueError:
                return TimeError(i, s.decode("ascii", "replace"))
    return TimeError(0, "?")  # pragma: no cover - numpy refused the batch but no single stamp


def split_time(text: str) -> tuple[bytes, bytes, bytes] | None:
    """Split one ISO 8601 time stamp into (base, fraction digits, offset) canonical bytes.

    Returns ``None`` when ``text`` is not a time stamp of an accepted shape.
    """
    m = TIME_RE.match(text)
    if m is None:
        return None
    y, mo, d, h, mi, s, frac, off = m.groups()
    base = b"%s-%02d-%02dT%02d:%02d:%02d" % (y.encode(), int(mo), int(d), int(h), int(mi), int(s))
    fr = (frac or "")[:9].encode()
    if not off or off == "Z":
        o = off.encode() if off else b""
    else:
        sign = b"-" if off[0] in "-\u2212" else b"+"
        digits = off[1:].replace(":", "")
        o = sign + (digits[:2] + ":" + (digits[2:4] or "00")).encode()
    return base, fr, o


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


def read_safe(path: str, data: bytes) -> Fixes:
    """Read every track point (else every route point) with lxml's streaming parser.

    Memory stays bounded by the points, not the XML tree: finished points are freed as the
    parse goes on. Raises ``InputError`` for anything that is not valid GPX.
    """
    it = etree.iterparse(io.BytesIO(data), events=("start", "end"), **XML_OPTIONS)
    root = None
    ns = ""
    fmt = ""
    tags: dict[str, str] = {}
    pts: dict[str, list] = {"trkpt": [], "rtept": []}
    seg_no = {"trkpt": -1, "rtept": -1}
    try:
        for event, el in it:
            if root is None:
                root = el
                ns, fmt = root_format(path, root)
                pre = f"{{{ns}}}" if ns else ""
                tags = {pre + k: k for k in ("trk", "trkseg", "trkpt", "rte", "rtept")}
                continue
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
        raise InputError(path, "not a GPX file (no XML element)")
    if root.getroottree().docinfo.internalDTD is not None:  # belt and braces: gpx.py refuses first
        raise InputError(path, "refused: the XML declares a DTD/entities (GPX needs none)")
    kind = "trkpt" if pts["trkpt"] else "rtept"
    return _assemble(path, fmt, pts[kind], kind)


def _point(path: str, el, kind: str, number: int, ns: str, seg: int) -> tuple:
    """One point as (lat, lon, ele, time text, hdop, sat, seg, line, number)."""
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
            if name in ("ele", "time", "hdop", "sat") and name not in found:
                found[name] = "".join(ch.itertext())
    out = [vals[0], vals[1]]
    for name in ("ele", "time", "hdop", "sat"):
        text = found.get(name)
        if text is None or not text.strip():
            out.append(None)
        elif name == "time":
            parts = split_time(text)
            if parts is None:
                raise InputError(path, f"time {text.strip()[:40]!r} is not an ISO 8601 date-time", where)
            out.append(parts)
        else:
            v = parse_number(text)
            if v is None:
                raise InputError(path, f"{name} {text.strip()[:40]!r} is not a number", where)
            out.append(v)
    return (*out, seg, el.sourceline, number)


def _assemble(path: str, fmt: str, pts: list, kind: str) -> Fixes:
    n = len(pts)
    if n == 0:
        return Fixes(fmt, *(np.empty(0) for _ in range(4)), np.empty(0, np.int32))
    lat, lon, ele, tm, hdop, sat, seg, line, number = zip(*pts)
    tparts = [t or (b"", b"", b"") for t in tm]
    base, frac, off = zip(*tparts)
    try:
        time_s = gpx_times_to_epoch(base, frac, off)
    except TimeError as exc:
        raise InputError(
            path, f"time {exc.text!r} is not a valid date-time", f"line {line[exc.index]}, {kind} {exc.index + 1}"
        ) from None
    notes = []
    naive = sum(1 for t in tparts if t[0] and not t[2])
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
    )
