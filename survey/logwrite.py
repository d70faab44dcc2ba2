"""Write a Track in the log formats trackframe reads: GPX 1.1, NMEA 0183 (GGA + RMC), CSV.

Used by the demo generator, tests and benchmarks to produce logs from synthetic tracks. Output
is written atomically (``survey.atomic``).
"""

from __future__ import annotations

import csv
import io
from datetime import datetime, timezone
from functools import reduce
from xml.sax.saxutils import escape

import numpy as np

from .atomic import atomic_open
from .track import Track

#: 1 knot = 1852 m per hour exactly (international nautical mile), in m/s.
KNOT_MPS = 1852.0 / 3600.0


def iso_times(time_s: np.ndarray, decimals: int = 3) -> list[str]:
    """UNIX seconds -> ISO 8601 UTC strings with ``decimals`` fractional digits and a ``Z``."""
    unit = {0: "s", 3: "ms", 6: "us"}[decimals]
    stamps = np.datetime_as_string(np.round(time_s * 10**decimals).astype("int64").astype(f"datetime64[{unit}]"), unit=unit)
    return [s + "Z" for s in stamps]


def gpx_text(track: Track, name: str = "", creator: str = "trackframe") -> str:
    """GPX 1.1 document (namespace http://www.topografix.com/GPX/1/1), one trkseg per segment."""
    lat = np.char.mod("%.8f", track.lat_deg)
    lon = np.char.mod("%.8f", track.lon_deg)
    has_h = np.isfinite(track.height_m)
    ele = np.char.mod("%.3f", np.nan_to_num(track.height_m))
    times = iso_times(track.time_s) if track.has_time else [""] * len(track)
    out = [
        '<?xml version="1.0" encoding="UTF-8"?>',
        f'<gpx version="1.1" creator="{escape(creator)}" xmlns="http://www.topografix.com/GPX/1/1">',
        f"  <trk><name>{escape(name)}</name>",
    ]
    seg = track.segment
    for i in range(len(track)):
        if i == 0 or seg[i] != seg[i - 1]:
            if i:
                out.append("    </trkseg>")
            out.append("    <trkseg>")
        inner = (f"<ele>{ele[i]}</ele>" if has_h[i] else "") + (f"<time>{times[i]}</time>" if times[i] else "")
        out.append(f'      <trkpt lat="{lat[i]}" lon="{lon[i]}">{inner}</trkpt>')
    if len(track):
        out.append("    </trkseg>")
    out += ["  </trk>", "</gpx>", ""]
    return "\n".join(out)


def nmea_checksum(body: str) -> str:
    """NMEA 0183 checksum: XOR of every character between '$' and '*', two upper-case hex digits."""
    return f"{reduce(lambda a, c: a ^ ord(c), body, 0):02X}"


def nmea_sentence(body: str) -> str:
    """``$body*CS``."""
    return f"${body}*{nmea_checksum(body)}"


def _nmea_angle(value: float, is_lat: bool) -> tuple[str, str]:
    hemi = ("N" if value >= 0 else "S") if is_lat else ("E" if value >= 0 else "W")
    a = abs(value)
    deg = int(a)
    minutes = (a - deg) * 60.0
    if round(minutes, 6) >= 60.0:
        deg, minutes = deg + 1, 0.0
    width = 2 if is_lat else 3
    return f"{deg:0{width}d}{minutes:09.6f}", hemi


def nmea_text(track: Track, geoid_separation_m: float = 0.0, talker: str = "GN") -> str:
    """GGA + RMC per fix. ``track.height_m`` is taken as ellipsoidal; GGA altitude is written as
    height minus ``geoid_separation_m`` (MSL) with the separation in its own field, so a reader
    recovers the ellipsoidal height as altitude + separation (NMEA 0183). RMC carries the speed
    over ground (knots) and true course (degrees) when the Track has them (empty fields
    otherwise; NMEA 0183 v4.10 RMC layout)."""
    if not track.has_time:
        raise ValueError("NMEA needs times")
    lines = []
    speed = track.speed_mps if track.speed_mps is not None else np.full(len(track), np.nan)
    course = track.course_deg if track.course_deg is not None else np.full(len(track), np.nan)
    for i in range(len(track)):
        dt = datetime.fromtimestamp(float(track.time_s[i]), tz=timezone.utc)
        hms = dt.strftime("%H%M%S") + f".{dt.microsecond // 10000:02d}"
        lat, ns = _nmea_angle(track.lat_deg[i], True)
        lon, ew = _nmea_angle(track.lon_deg[i], False)
        sats = 12 if track.satellites is None else int(track.satellites[i])
        hdop = 0.8 if track.hdop is None else float(track.hdop[i])
        h = track.height_m[i]
        alt = f"{h - geoid_separation_m:.3f},M,{geoid_separation_m:.3f},M" if np.isfinite(h) else ",,,"
        lines.append(nmea_sentence(f"{talker}GGA,{hms},{lat},{ns},{lon},{ew},2,{sats:02d},{hdop:.1f},{alt},,"))
        kn = "" if not np.isfinite(speed[i]) else f"{speed[i] / KNOT_MPS:.3f}"
        cog = "" if not np.isfinite(course[i]) else f"{course[i] % 360.0:.2f}"
        lines.append(nmea_sentence(f"{talker}RMC,{hms},A,{lat},{ns},{lon},{ew},{kn},{cog},{dt:%d%m%y},,,D"))
    return "\r\n".join(lines) + "\r\n"


def csv_text(track: Track, height_column: str = "height_m") -> str:
    """CSV with header ``time,lat,lon,<height_column>[,accuracy_m][,speed_mps][,course_deg]``
    (optional columns only when the Track has them; empty cells for NaN); ISO 8601 times."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    header = ["time", "lat", "lon", height_column]
    extra = [(name, getattr(track, name)) for name in ("accuracy_m", "speed_mps", "course_deg")
             if getattr(track, name) is not None]
    header += [name for name, _ in extra]
    w.writerow(header)
    times = iso_times(track.time_s) if track.has_time else [""] * len(track)
    for i in range(len(track)):
        row = [times[i], f"{track.lat_deg[i]:.8f}", f"{track.lon_deg[i]:.8f}", f"{track.height_m[i]:.3f}"]
        row += [f"{v[i]:.3f}" if np.isfinite(v[i]) else "" for _, v in extra]
        w.writerow(row)
    return buf.getvalue()


def write_text(path: str, text: str) -> None:
    """Write ``text`` (UTF-8) atomically."""
    with atomic_open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write(text)
