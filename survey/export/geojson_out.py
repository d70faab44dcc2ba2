"""Sections as GeoJSON (RFC 7946): a FeatureCollection with one LineString Feature per section.

* Positions are [longitude, latitude] in WGS 84 degrees (RFC 7946 section 3.1.1), rounded to
  1e-8 degree (about 1 mm). A height is added as the third value only when the profile heights
  are ellipsoidal, because RFC 7946 defines the third value as height above the WGS 84
  ellipsoid; the ``height_ref`` member says which applies.
* A section's line runs through its end positions and every profile station between them; a
  section with no position (a mark outside the profile) has ``"geometry": null`` (RFC 7946 3.2).
* Properties are the section table columns (NaN / infinite -> null); design sections carry the
  caution. The collection carries a foreign member ``"trackframe"`` with the run settings.
* Text is not quote-prefixed here: GeoJSON is data, not a spreadsheet.
"""

from __future__ import annotations

import json
from typing import IO, Sequence

import numpy as np

from ..design import CAUTION
from ..sections import KIND_DESIGN, Section, value_at
from ..stations import Profile
from .table import RunInfo, run_settings_rows, section_record

COORD_DECIMALS = 8
HEIGHT_DECIMALS = 3


def section_positions(
    profile: Profile, sec: Section
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(chainage m, lat deg, lon deg, height m, time s) along a section: its ends plus the
    stations strictly between them, keeping only finite positions. O(section length + log n)."""
    c = profile.chainage_m
    i0 = int(np.searchsorted(c, sec.start_chainage_m, side="right"))
    i1 = int(np.searchsorted(c, sec.end_chainage_m, side="left"))
    inner = slice(i0, max(i0, i1))
    a, b = sec.start_chainage_m, sec.end_chainage_m
    ch = np.concatenate(([a], c[inner], [b]))
    lat = np.concatenate(([sec.start_lat_deg], profile.lat_deg[inner], [sec.end_lat_deg]))
    lon = np.concatenate(([sec.start_lon_deg], profile.lon_deg[inner], [sec.end_lon_deg]))
    h = np.concatenate(([value_at(c, profile.height_m, a)], profile.height_m[inner], [value_at(c, profile.height_m, b)]))
    t = np.concatenate(([sec.start_time_s], profile.time_s[inner], [sec.end_time_s]))
    ok = np.isfinite(lat) & np.isfinite(lon)
    return ch[ok], lat[ok], lon[ok], h[ok], t[ok]


def feature_collection(sections: Sequence[Section], profile: Profile, run: RunInfo) -> dict:
    """The GeoJSON document as a dict."""
    with_height = profile.height_ref == "ellipsoid"
    features = []
    for sec in sections:
        _, lat, lon, h, _ = section_positions(profile, sec)
        geometry = None
        if len(lat) >= 1:
            if len(lat) == 1:  # a LineString needs two positions (RFC 7946 3.1.4)
                lat, lon, h = np.repeat(lat, 2), np.repeat(lon, 2), np.repeat(h, 2)
            cols = [np.round(lon, COORD_DECIMALS), np.round(lat, COORD_DECIMALS)]
            if with_height and np.isfinite(h).all():
                cols.append(np.round(h, HEIGHT_DECIMALS))
            geometry = {"type": "LineString", "coordinates": np.column_stack(cols).tolist()}
        props = section_record(sec)
        if sec.kind != KIND_DESIGN:
            props.pop("caution")
        features.append({"type": "Feature", "id": sec.id, "geometry": geometry, "properties": props})
    meta = {k: v for k, v in run_settings_rows(run, profile, sections, guard=False)}
    doc = {
        "type": "FeatureCollection",
        "trackframe": {**meta, "height_ref": profile.height_ref, "third_coordinate": "ellipsoidal height m" if with_height else "omitted"},
        "features": features,
    }
    if run.design_on or any(s.kind == KIND_DESIGN for s in sections):
        doc["trackframe"]["caution"] = CAUTION
    return doc


def write_sections_geojson(fh: IO[str], sections: Sequence[Section], profile: Profile, run: RunInfo) -> None:
    """Write the FeatureCollection as UTF-8 JSON text (no NaN: RFC 8259 JSON only)."""
    # One-shot dumps without indent uses the C encoder (several times faster on long lines).
    fh.write(json.dumps(feature_collection(sections, profile, run), ensure_ascii=False, allow_nan=False))
    fh.write("\n")
