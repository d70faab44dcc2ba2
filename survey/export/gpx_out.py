"""Sections as GPX 1.1 (written with gpxpy): one <trk> per section, its points the section's
positions (ends plus stations between; see ``geojson_out.section_positions``).

Each track's name is "<id> <kind>", its type the kind, its description the section summary and
note (with the caution for design sections). Elevations are the profile heights, whose reference
(``Profile.height_ref``) is stated in the file's metadata description.
"""

from __future__ import annotations

import math
from datetime import datetime, timezone
from typing import IO, Sequence

import gpxpy.gpx
import numpy as np

from ..sections import Section
from ..stations import Profile
from .cells import xml_safe
from .geojson_out import section_positions
from .table import RunInfo


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


def build_gpx(sections: Sequence[Section], profile: Profile, run: RunInfo) -> gpxpy.gpx.GPX:
    gpx = gpxpy.gpx.GPX()
    gpx.creator = f"trackframe {run.tool_version}"
    gpx.name = xml_safe(f"trackframe sections of {run.input_path}")
    gpx.description = xml_safe(
        f"input sha256 {run.input_sha256}; frame {run.frame or profile.frame}; "
        f"elevations: {profile.height_ref} heights"
    )
    for sec in sections:
        trk = gpxpy.gpx.GPXTrack(name=xml_safe(f"{sec.id} {sec.kind}"), description=_describe(sec))
        trk.type = sec.kind
        seg = gpxpy.gpx.GPXTrackSegment()
        ch, lat, lon, h = section_positions(profile, sec)
        ok_t = np.isfinite(profile.time_s) & np.isfinite(profile.chainage_m)
        if ok_t.any():
            t = np.interp(ch, profile.chainage_m[ok_t], profile.time_s[ok_t], left=np.nan, right=np.nan)
        else:
            t = np.full(len(ch), np.nan)
        for la, lo, hh, tt in zip(lat.tolist(), lon.tolist(), h.tolist(), t.tolist()):
            seg.points.append(
                gpxpy.gpx.GPXTrackPoint(
                    latitude=la,
                    longitude=lo,
                    elevation=hh if math.isfinite(hh) else None,
                    time=datetime.fromtimestamp(tt, timezone.utc) if math.isfinite(tt) else None,
                )
            )
        trk.segments.append(seg)
        gpx.tracks.append(trk)
    return gpx


def write_sections_gpx(fh: IO[str], sections: Sequence[Section], profile: Profile, run: RunInfo) -> None:
    """Write GPX 1.1 text."""
    fh.write(build_gpx(sections, profile, run).to_xml(version="1.1"))
