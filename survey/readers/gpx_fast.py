"""GPX bulk path: compiled regular expressions over the bytes plus numpy conversion.

How it stays a correct reader
-----------------------------
1. Every ``<trkpt`` in the file must match one strict, anchored pattern of a *canonical* point:
   ``lat``/``lon`` attributes only (either order, either quote), then optionally ``ele``,
   ``time`` (``YYYY-MM-DDThh:mm:ss[.f{1,9}][Z|+hh:mm]``), plain-text GPX children, ``sat``,
   ``hdop`` in schema order, unprefixed, no attributes, no comments, CDATA, entities other than
   the five predefined ones, no extensions. The pattern admits only well-formed XML.
2. Each canonical point is replaced by one placeholder byte and each run of them by one
   placeholder element; that small *skeleton* (header, metadata, waypoints, trk/trkseg tags)
   goes through the same hardened lxml parser as the safe path. Every placeholder must come back
   as a direct child of ``gpx/trk/trkseg`` in the GPX namespace (so points inside comments,
   CDATA, extensions or the wrong parent are caught) and no other track point may be left.
3. The captured strings become arrays with numpy (numbers, ISO times); any impossible value
   (date, offset, lat/lon range) sends the file to the safe path, which reports it properly.

When any check fails ``read_fast`` returns ``None`` and the caller uses ``gpx_safe.read_safe``.
Routes (files without track points) always take the safe path.
"""

from __future__ import annotations

import codecs
import re

import numpy as np
from lxml import etree

from .gpx_safe import XML_OPTIONS, Fixes, TimeError, gpx_times_to_epoch, root_format

_WS = rb"[ \t\r\n]*"
_NUM = rb"[ \t\r\n]*([-+]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][-+]?[0-9]+)?)[ \t\r\n]*"
_TEXT = rb"(?:[^<>&\x00-\x08\x0b\x0c\x0e-\x1f]|&(?:amp|lt|gt|quot|apos|#[0-9]{1,7}|#x[0-9a-fA-F]{1,6});)*"
_TIME = (
    rb"([0-9]{4}-[0-9]{2}-[0-9]{2}T[0-9]{2}:[0-9]{2}:[0-9]{2})(?:\.([0-9]{1,9}))?(Z|[-+][0-9]{2}:[0-9]{2})?"
)
# Plain-text children of wptType that may sit between time and sat (GPX 1.0 and 1.1 names), and
# those after hdop. Their text is ignored, so their order among themselves is not enforced.
_BEFORE_SAT = (b"course", b"speed", b"magvar", b"geoidheight", b"name", b"cmt", b"desc", b"src",
               b"url", b"urlname", b"sym", b"type", b"fix")
_AFTER_HDOP = (b"vdop", b"pdop", b"ageofdgpsdata", b"dgpsid")


def _plain(names) -> bytes:
    return rb"(?:(?:" + rb"|".join(rb"<%s>" % n + _TEXT + rb"</%s>" % n for n in names) + rb")" + _WS + rb")*"


def _attr(name: bytes, quote_group: int) -> bytes:
    return name + _WS + rb"=" + _WS + rb"([\"'])" + _NUM + rb"\%d" % quote_group


#: Groups: 1 q, 2 lat, 3 q, 4 lon | 5 q, 6 lon, 7 q, 8 lat; 9 ele; 10-12 time; 13 sat; 14 hdop.
TRKPT_RE = re.compile(
    rb"<trkpt[ \t\r\n]+(?:"
    + _attr(b"lat", 1) + rb"[ \t\r\n]+" + _attr(b"lon", 3)
    + rb"|"
    + _attr(b"lon", 5) + rb"[ \t\r\n]+" + _attr(b"lat", 7)
    + rb")" + _WS
    + rb"(?:/>|>" + _WS
    + rb"(?:<ele>" + _NUM + rb"</ele>" + _WS + rb")?"
    + rb"(?:<time>" + _WS + _TIME + _WS + rb"</time>" + _WS + rb")?"
    + _plain(_BEFORE_SAT)
    + rb"(?:<sat>" + _NUM + rb"</sat>" + _WS + rb")?"
    + rb"(?:<hdop>" + _NUM + rb"</hdop>" + _WS + rb")?"
    + _plain(_AFTER_HDOP)
    + rb"</trkpt>)" + _WS
)

_RUN_RE = re.compile(rb"\x01+")
_PLACEHOLDER = "tf_bulk_run_"
_ENCODING_RE = re.compile(
    rb"\A(?:\xef\xbb\xbf)?[ \t\r\n]*<\?xml[^>]*?encoding[ \t\r\n]*=[ \t\r\n]*[\"']([A-Za-z0-9._-]+)[\"']"
)
_UTF8 = {b"utf-8", b"utf8"}
_ASCII_SUPERSETS = {b"us-ascii", b"ascii", b"iso-8859-1", b"iso8859-1", b"latin-1", b"latin1",
                    b"windows-1252", b"cp1252"}
CHUNK_BYTES = 4 << 20


def read_fast(data: bytes) -> Fixes | None:
    """Read the track points of ``data`` in bulk, or return ``None`` to ask for the safe path."""
    if not _encoding_ok(data) or b"\x01" in data:
        return None
    skeleton, n = TRKPT_RE.subn(b"\x01", data)
    if n == 0 or n != data.count(b"<trkpt"):
        return None
    found = _segments_from_skeleton(skeleton)
    if found is None or sum(found[1]) != n:
        return None
    fmt, seg_sizes = found
    del skeleton
    cols = _bulk_columns(data)
    if cols is None or len(cols["lat"]) != n:
        return None
    lat, lon = cols["lat"], cols["lon"]
    if not ((np.abs(lat) <= 90.0).all() and (np.abs(lon) <= 180.0).all()):
        return None
    notes = []
    if cols["naive"]:
        notes.append(f"{cols['naive']} time stamps had no UTC offset; read as UTC")
    return Fixes(
        fmt=fmt,
        lat_deg=lat,
        lon_deg=lon,
        height_m=cols["ele"],
        time_s=cols["time"],
        segment=np.repeat(np.arange(len(seg_sizes), dtype=np.int32), seg_sizes),
        hdop=cols["hdop"] if cols["has_hdop"] else None,
        satellites=cols["sat"] if cols["has_sat"] else None,
        notes=notes,
    )


def _encoding_ok(data: bytes) -> bool:
    """True when the bytes are an ASCII superset the patterns can read directly."""
    head = data[:4]
    if head.startswith((b"\xff\xfe", b"\xfe\xff")) or b"\x00" in head:
        return False
    m = _ENCODING_RE.match(data[:512])
    enc = m.group(1).lower() if m else b"utf-8"
    if enc in _UTF8:
        return data.isascii() or _valid_utf8(data)
    return enc in _ASCII_SUPERSETS


def _valid_utf8(data: bytes) -> bool:
    dec = codecs.getincrementaldecoder("utf-8")()
    view = memoryview(data)
    try:
        for i in range(0, len(data), CHUNK_BYTES):
            dec.decode(view[i : i + CHUNK_BYTES])
        dec.decode(b"", final=True)
    except UnicodeDecodeError:
        return False
    return True


def _segments_from_skeleton(skeleton: bytes) -> tuple[str, list[int]] | None:
    """Parse the skeleton; return the format and the point count of each non-empty trkseg.

    ``None`` when the skeleton is not a GPX document whose every placeholder (in order) is a
    direct child of ``gpx/trk/trkseg``, or when a track point is left that the pattern refused.
    """
    runs: list[int] = []

    def mark(m: re.Match) -> bytes:
        runs.append(len(m.group()))
        return b'<%s i="%d"/>' % (_PLACEHOLDER.encode(), len(runs) - 1)

    marked = _RUN_RE.sub(mark, skeleton)
    try:
        root = etree.fromstring(marked, etree.XMLParser(**XML_OPTIONS))
        ns, fmt = root_format("", root)
    except Exception:  # any problem at all: the safe path will find and report it
        return None
    if root.getroottree().docinfo.internalDTD is not None:
        return None
    pre = f"{{{ns}}}" if ns else ""
    trk, trkseg, trkpt, ph = pre + "trk", pre + "trkseg", pre + "trkpt", pre + _PLACEHOLDER
    sizes: list[int] = []
    seen = 0
    for t in root.iterchildren(trk):
        for s in t.iterchildren(trkseg):
            size = 0
            for ch in s.iterchildren(ph, trkpt):
                if ch.tag == trkpt or ch.get("i") != str(seen):
                    return None
                size += runs[seen]
                seen += 1
            if size:
                sizes.append(size)
    if seen != len(runs):
        return None
    return fmt, sizes


def _bulk_columns(data: bytes) -> dict | None:
    """Run the point pattern over ``data`` chunk by chunk and convert the captures with numpy."""
    parts: dict[str, list] = {k: [] for k in ("lat", "lon", "ele", "time", "sat", "hdop")}
    naive = 0
    has_sat = has_hdop = False
    pos, size = 0, len(data)
    while pos < size:
        end = data.find(b"<trkpt", pos + CHUNK_BYTES)
        end = size if end < 0 else end
        rows = TRKPT_RE.findall(data, pos, end)
        pos = end
        if not rows:
            continue
        c = list(zip(*rows))
        lat = np.array([a or b for a, b in zip(c[1], c[7])])
        lon = np.array([a or b for a, b in zip(c[3], c[5])])
        parts["lat"].append(lat.astype(np.float64))
        parts["lon"].append(lon.astype(np.float64))
        for key, g in (("ele", 8), ("sat", 12), ("hdop", 13)):
            parts[key].append(_optional_numbers(c[g]))
        has_sat = has_sat or any(c[12])
        has_hdop = has_hdop or any(c[13])
        try:
            parts["time"].append(gpx_times_to_epoch(c[9], c[10], c[11]))
        except TimeError:
            return None
        off = np.array(c[11])
        naive += int(np.count_nonzero((np.array(c[9]) != b"") & (off == b"")))
    if not parts["lat"]:
        return None
    out = {k: np.concatenate(v) for k, v in parts.items()}
    out.update(naive=naive, has_sat=has_sat, has_hdop=has_hdop)
    return out


def _optional_numbers(strings) -> np.ndarray:
    arr = np.array(strings)
    out = np.full(len(arr), np.nan)
    have = arr != b""
    if have.all():
        return arr.astype(np.float64)
    if have.any():
        out[have] = arr[have].astype(np.float64)
    return out
