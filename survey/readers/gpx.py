"""GPX 1.0 / 1.1 reader: track points (else route points) into a Track.

``read_gpx`` refuses DTDs and entity declarations outright, tries the bulk path
(``gpx_fast.read_fast``: regular expressions + numpy, validated) and falls back to the safe path
(``gpx_safe.read_safe``: lxml without entities or network) whenever the bulk path declines.
Both give the same fixes on every file the bulk path accepts.

Conventions (GPX 1.1 schema, http://www.topografix.com/GPX/1/1; GPX 1.0 schema,
http://www.topografix.com/GPX/1/0):

* ``<ele>`` is elevation in metres above mean sea level (geoid) -> ``height_ref = "msl"``.
* ``<time>`` is xsd:dateTime, UTC in practice; stamps with an offset are shifted to UTC, stamps
  without one are read as UTC (common practice) and counted in ``source.notes``.
* Each non-empty ``trkseg`` (across all ``trk``) is its own segment number, 0, 1, 2, ...; each
  ``rte`` likewise when the file has no track points.
* ``<hdop>`` and ``<sat>`` fill ``Track.hdop`` / ``Track.satellites`` when any point has them.
"""

from __future__ import annotations

import re

import numpy as np

from ..errors import InputError
from ..track import HEIGHT_MSL, Track, make_track
from .gpx_fast import read_fast
from .gpx_safe import Fixes, read_safe

__all__ = ["read_gpx"]

READER_BULK = "gpx-bulk"
READER_SAFE = "gpx-safe"
MODES = ("auto", "safe", "bulk")
_BLANK_RE = re.compile(rb"(?:\xef\xbb\xbf)?[ \t\r\n]*\Z")


def read_gpx(path: str, data: bytes, mode: str = "auto") -> Track:
    """Read a GPX 1.0 or 1.1 file into a Track.

    Parameters
    ----------
    path
        The file name, used in messages and ``Track.source``.
    data
        The whole file as bytes.
    mode
        ``"auto"`` (bulk path, safe path as fallback), ``"safe"`` (safe path only) or ``"bulk"``
        (bulk path only: ``InputError`` if it declines; for benchmarks and tests).

    Returns
    -------
    Track
        WGS 84 degrees, heights above MSL (NaN where absent), UTC epoch seconds (NaN where absent),
        ``source.reader`` ``"gpx-bulk"`` or ``"gpx-safe"``.

    Raises
    ------
    InputError
        Empty or non-XML input, a DTD or entity declaration, a root other than GPX 1.0/1.1
        ``gpx``, a bad number, time or coordinate (naming the line and point), or no points.
    """
    if mode not in MODES:
        raise ValueError(f"mode must be one of {MODES}, not {mode!r}")
    refuse_unsafe(path, data)
    fixes = None if mode == "safe" else read_fast(data)
    reader = READER_BULK
    if fixes is None:
        if mode == "bulk":
            raise InputError(path, "the bulk GPX path declined this file")
        fixes = read_safe(path, data)
        reader = READER_SAFE
    if len(fixes) == 0:
        raise InputError(path, "GPX file has no track or route points")
    return _to_track(path, fixes, reader)


def refuse_unsafe(path: str, data: bytes) -> None:
    """Refuse empty input and any DOCTYPE / ENTITY declaration before parsing.

    GPX needs no DTD; internal entities are the 'billion laughs' memory bomb (refusing them is
    the OWASP XML guidance; libxml2's own amplification cap is not relied on).
    """
    body = data
    if data[:2] in (b"\xff\xfe", b"\xfe\xff") or b"\x00" in data[:4]:
        for enc in ("utf-16", "utf-32"):
            try:
                body = data.decode(enc).encode("utf-8")
                break
            except UnicodeError:
                continue
    if _BLANK_RE.match(body):
        raise InputError(path, "file is empty")
    at = body.find(b"<!")
    while at >= 0:  # one scan: comments and CDATA also start with "<!"
        if body[at + 2 : at + 9].upper() == b"DOCTYPE" or body[at + 2 : at + 8].upper() == b"ENTITY":
            line = body.count(b"\n", 0, at) + 1
            raise InputError(path, "refused: XML with a DTD or entity declaration (GPX needs none)", f"line {line}")
        at = body.find(b"<!", at + 2)


def _to_track(path: str, fx: Fixes, reader: str) -> Track:
    return make_track(
        path,
        fx.fmt,
        time_s=fx.time_s,
        lat_deg=fx.lat_deg,
        lon_deg=fx.lon_deg,
        height_m=fx.height_m,
        height_ref=HEIGHT_MSL,
        segment=np.asarray(fx.segment, dtype=np.int32),
        records=len(fx),
        reader=reader,
        notes=tuple(fx.notes),
        hdop=fx.hdop,
        satellites=fx.satellites,
        speed_mps=fx.speed_mps,
        course_deg=fx.course_deg,
    )
