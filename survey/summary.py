"""Human and JSON summaries of a loaded log (``trackframe info``)."""

from __future__ import annotations

from datetime import datetime, timezone

import numpy as np

from .length import path_length
from .pipeline import LoadedLog
from .track import HEIGHT_ELLIPSOID, HEIGHT_MSL, HEIGHT_NONE, TIME_EPOCH_UTC

HEIGHT_WORDS = {
    HEIGHT_ELLIPSOID: "ellipsoidal (WGS 84)",
    HEIGHT_MSL: "above mean sea level / geoid",
    HEIGHT_NONE: "none in the log (path taken as flat)",
    "unknown": "reference not stated by the log",
}


def summarize(loaded: LoadedLog) -> dict:
    """Everything ``trackframe info`` reports, as plain JSON-ready values (SI units)."""
    track, report = loaded.track, loaded.report
    t = track.time_s
    good = ~track.suspect if track.suspect is not None else np.ones(len(track), bool)
    length = path_length(
        loaded.enu_m[good],
        track.segment[good],
        t[good] if track.has_time else None,
        None if track.accuracy_m is None else track.accuracy_m[good],
    )
    h = track.height_m[np.isfinite(track.height_m)]
    out = {
        "file": track.source.path,
        "format": track.source.format,
        "reader": track.source.reader,
        "records_read": track.source.records,
        "skipped": dict(track.source.skipped),
        "notes": list(track.source.notes),
        "fixes": len(track),
        "segments": report.segments,
        "start_utc": _iso(t[0]) if track.has_time else None,
        "end_utc": _iso(t[-1]) if track.has_time else None,
        "duration_s": float(t[-1] - t[0]) if track.has_time else None,
        "path_length_m": round(length.length_3d_m, 3),
        "plan_length_m": round(length.plan_length_m, 3),
        "stationary_fixes": length.stationary_fixes,
        "noise_estimate_m": round(length.noise_m, 3),
        "bbox": {
            "lat_min": float(track.lat_deg.min()),
            "lat_max": float(track.lat_deg.max()),
            "lon_min": float(track.lon_deg.min()),
            "lon_max": float(track.lon_deg.max()),
            "height_min_m": float(h.min()) if h.size else None,
            "height_max_m": float(h.max()) if h.size else None,
        },
        "height_reference": track.height_ref,
        "cleaning": report.as_dict(),
        "frame": loaded.frame.as_dict(),
    }
    return out


def format_summary(info: dict) -> str:
    """Plain-text rendering of ``summarize`` output, one fact per line."""
    c = info["cleaning"]
    b = info["bbox"]
    lines = [
        f"file        {info['file']}",
        f"format      {info['format']} (read by {info['reader'] or 'reader'}; {info['records_read']} records)",
        f"fixes       {info['fixes']} kept of {c['fixes_read']} read, in {info['segments']} segment(s)",
    ]
    if info["duration_s"] is not None:
        lines.append(f"time        {info['start_utc']} -> {info['end_utc']} ({_duration(info['duration_s'])})")
    else:
        lines.append("time        none in the log (speeds and accelerations unavailable)")
    lines += [
        f"length      {info['path_length_m'] / 1000:.3f} km through the fixes, {info['plan_length_m'] / 1000:.3f} km "
        f"in plan (noise removed, {info['stationary_fixes']} stationary fixes collapsed)",
        f"extent      lat {b['lat_min']:.6f} .. {b['lat_max']:.6f}, lon {b['lon_min']:.6f} .. {b['lon_max']:.6f}",
    ]
    if b["height_min_m"] is not None:
        lines.append(
            f"heights     {b['height_min_m']:.1f} .. {b['height_max_m']:.1f} m, "
            f"{HEIGHT_WORDS.get(info['height_reference'], info['height_reference'])}"
        )
    else:
        lines.append(f"heights     {HEIGHT_WORDS[HEIGHT_NONE]}")
    lines.append(
        "cleaning    "
        f"{c['exact_duplicates']} exact duplicates dropped, "
        f"{c['same_time_conflicts']} same-time conflicts dropped, "
        f"{c['out_of_order']} out-of-order fixes sorted, "
        f"{c['untimed_dropped']} untimed fixes dropped, "
        f"{c['gap_splits']} gaps > {c['gap_limit_s']:g} s split, "
        f"{c['suspect_jumps']} impossible jumps flagged"
    )
    if info["skipped"]:
        skipped = ", ".join(f"{v} {k}" for k, v in sorted(info["skipped"].items()))
        lines.append(f"skipped     {skipped}")
    lines.append(f"frame       {info['frame']['description']}")
    for note in info["notes"]:
        lines.append(f"note        {note}")
    return "\n".join(lines)


def _iso(t: float) -> str:
    dt = datetime.fromtimestamp(float(t), tz=timezone.utc)
    return dt.isoformat(timespec="milliseconds").replace("+00:00", "Z")


def _duration(seconds: float) -> str:
    s = int(round(seconds))
    return f"{s // 3600}h{s % 3600 // 60:02d}m{s % 60:02d}s"


assert TIME_EPOCH_UTC.tzinfo is timezone.utc  # time_s is UNIX time; _iso relies on it
