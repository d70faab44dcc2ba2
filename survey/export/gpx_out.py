"""Sections as GPX 1.1 (schema http://www.topografix.com/GPX/1/1), streamed with lxml.

One <trk> per section; its points are the section's positions (ends plus the stations between;
see ``geojson_out.section_positions``). Each track's <name> is "<id> <kind>", its <type> the
kind, its <desc> a summary and the note (plus the caution for design sections). <ele> is the
profile height, whose reference (``Profile.height_ref``) the metadata <desc> states; <time> is
UTC. Coordinates keep full float precision (shortest round-trip repr).
"""

from __future__ import annotations

import math
from typing import IO, Sequence

import numpy as np
from lxml import etree

from ..sections import Section
from ..stations import Profile
from .cells import xml_safe
from .geojson_out import section_positions
from .table import RunInfo

GPX_NS = "http://www.topografix.com/GPX/1/1"
_Q = "{" + GPX_NS + "}"


def _describe(sec: Section) -> str:
    parts = [f"{sec.kind} {sec.start_chainage_m:.1f}-{sec.end_chainage_m:.1f} m, length {sec.length_m:.1f} m"]
    if math.isfinite(sec.min_radius_m):
        parts.append(f"min radius {sec.min_radius_m:.1f} m at {sec.min_radius_at_m:.1f} m")
    if math.isfinite(sec.max_abs_torsion_per_m):
        parts.append(f"max |torsion| {sec.max_abs_torsion_per_m:.4g} 1/m")
    if math.isfinite(sec.confidence):
        parts.append(f"confidence {sec.confidence:.3f}")
    text = "; ".join(parts)
    if sec.note:
        text += f". Note: {sec.note}"
    if sec.caution and sec.caution not in text:
        text += f" {sec.caution}"
    return xml_safe(text)


def _iso_times(time_s: np.ndarray) -> list[str | None]:
    """ISO 8601 UTC with milliseconds for each time (None where not finite), vectorised."""
    ok = np.isfinite(time_s)
    out: list[str | None] = [None] * len(time_s)
    if ok.any():
        ms = np.round(time_s[ok] * 1000.0).astype("int64").astype("datetime64[ms]")
        texts = np.datetime_as_string(ms, unit="ms")
        for i, s in zip(np.flatnonzero(ok).tolist(), texts.tolist()):
            out[i] = s + "Z"
    return out


def write_sections_gpx(fh: IO[bytes], sections: Sequence[Section], profile: Profile, run: RunInfo) -> None:
    """Write GPX 1.1 to a binary stream."""
    with etree.xmlfile(fh, encoding="utf-8") as xf:
        xf.write_declaration()
        with xf.element(_Q + "gpx", nsmap={None: GPX_NS}, version="1.1", creator=f"trackframe {run.tool_version}"):
            xf.write("\n")
            with xf.element(_Q + "metadata"):
                meta_desc = (
                    f"input sha256 {run.input_sha256}; frame {run.frame or profile.frame}; "
                    f"elevations: {profile.height_ref} heights"
                )
                for tag, text in (("name", f"trackframe sections of {run.input_path}"), ("desc", meta_desc), ("time", run.created_utc)):
                    with xf.element(_Q + tag):
                        xf.write(xml_safe(text))
            xf.write("\n")
            for sec in sections:
                # Streamed element by element: the namespace is declared once, on <gpx>
                # (gpxpy, for one, only understands a single declaration).
                with xf.element(_Q + "trk"):
                    for tag, text in (("name", f"{sec.id} {sec.kind}"), ("desc", _describe(sec)), ("type", sec.kind)):
                        with xf.element(_Q + tag):
                            xf.write(xml_safe(text))
                    _, lat, lon, h, t = section_positions(profile, sec)
                    with xf.element(_Q + "trkseg"):
                        for la, lo, hh, tt in zip(lat.tolist(), lon.tolist(), h.tolist(), _iso_times(t)):
                            with xf.element(_Q + "trkpt", lat=repr(la), lon=repr(lo)):
                                if math.isfinite(hh):
                                    with xf.element(_Q + "ele"):
                                        xf.write(repr(hh))
                                if tt is not None:
                                    with xf.element(_Q + "time"):
                                        xf.write(tt)
                xf.write("\n")
