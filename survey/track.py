"""The Track: one GNSS log as parallel numpy arrays, whatever the source format.

Conventions
-----------
* ``time_s`` is float seconds since the UNIX epoch 1970-01-01T00:00:00 UTC (``TIME_EPOCH_UTC``);
  NaN where the log has no time (e.g. a GPX route).
* ``lat_deg``/``lon_deg`` are WGS 84 geodetic degrees.
* ``height_m`` is NaN where the fix has no height; ``height_ref`` says what it is measured from
  and is the same for every fix of a Track (readers never mix references silently).
* Optional per-fix quality arrays are ``None`` when the format does not carry them, and hold NaN
  (float) where a particular fix lacks the value.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields, replace
from datetime import datetime, timezone

import numpy as np
from numpy.typing import NDArray

TIME_EPOCH_UTC = datetime(1970, 1, 1, tzinfo=timezone.utc)

#: Height references a Track may carry.
HEIGHT_ELLIPSOID = "ellipsoid"  # above the WGS 84 ellipsoid
HEIGHT_MSL = "msl"  # above the geoid / mean sea level (GPX <ele>, GGA altitude without separation)
HEIGHT_UNKNOWN = "unknown"  # the log does not say (CSV without an explicit reference)
HEIGHT_NONE = "none"  # the log has no heights at all
HEIGHT_REFS = (HEIGHT_ELLIPSOID, HEIGHT_MSL, HEIGHT_UNKNOWN, HEIGHT_NONE)

FloatArray = NDArray[np.float64]


@dataclass(frozen=True)
class SourceInfo:
    """Where a Track came from and what the reader had to skip.

    Attributes
    ----------
    path
        The file as the user named it.
    format
        ``"gpx-1.1"``, ``"gpx-1.0"``, ``"nmea"`` or ``"csv"``.
    records
        Records (points, sentences, rows) the reader looked at.
    skipped
        Reason -> count of records the reader skipped (e.g. ``{"bad checksum": 3}``).
    reader
        Which code path read it (e.g. ``"gpx-bulk"`` or ``"gpx-safe"``), for diagnostics.
    notes
        Free-form remarks worth showing the user (e.g. which columns a CSV mapped to).
    """

    path: str
    format: str
    records: int = 0
    skipped: dict[str, int] = field(default_factory=dict)
    reader: str = ""
    notes: tuple[str, ...] = ()


@dataclass(frozen=True, eq=False)
class Track:
    """One log: parallel arrays of fixes plus source metadata.

    Attributes
    ----------
    time_s
        Seconds since 1970-01-01T00:00:00 UTC, float64; NaN when the log carries no time.
    lat_deg, lon_deg
        WGS 84 latitude and longitude in degrees.
    height_m
        Height in metres above ``height_ref``; NaN where absent.
    height_ref
        One of ``HEIGHT_REFS``.
    segment
        int32 segment number per fix (source segments such as ``trkseg``; cleaning adds gap splits).
    source
        ``SourceInfo``.
    accuracy_m
        Horizontal 1-sigma position accuracy in metres, if the log gives one.
    hdop
        Horizontal dilution of precision.
    satellites
        Satellites used (float so NaN can mark a missing value).
    fix_quality
        GGA fix quality indicator (0 invalid, 1 GPS, 2 DGPS, 4 RTK fixed, 5 RTK float, ...), float.
    speed_mps
        Speed over ground reported by the receiver, m/s.
    course_deg
        Course over ground reported by the receiver: true course (direction of travel, not the
        heading of the body), degrees clockwise from true north in [0, 360). With ``speed_mps``
        it gives the horizontal velocity east = v sin(course), north = v cos(course).
    suspect
        Boolean per fix: ``True`` where cleaning judged the fix physically impossible (multipath
        jump). Suspect fixes stay in the Track so counts and exports can show them; the smoother
        ignores them.
    """

    time_s: FloatArray
    lat_deg: FloatArray
    lon_deg: FloatArray
    height_m: FloatArray
    height_ref: str
    segment: NDArray[np.int32]
    source: SourceInfo
    accuracy_m: FloatArray | None = None
    hdop: FloatArray | None = None
    satellites: FloatArray | None = None
    fix_quality: FloatArray | None = None
    speed_mps: FloatArray | None = None
    course_deg: FloatArray | None = None
    suspect: NDArray[np.bool_] | None = None

    def __post_init__(self) -> None:
        if self.height_ref not in HEIGHT_REFS:
            raise ValueError(f"height_ref must be one of {HEIGHT_REFS}, not {self.height_ref!r}")
        n = len(self.lat_deg)
        for name in self.array_fields():
            arr = getattr(self, name)
            if arr is not None and len(arr) != n:
                raise ValueError(f"Track.{name} has {len(arr)} values, lat_deg has {n}")

    @staticmethod
    def array_fields() -> tuple[str, ...]:
        """Names of the per-fix array attributes (fixed and optional)."""
        return tuple(f.name for f in fields(Track) if f.name not in ("height_ref", "source"))

    def __len__(self) -> int:
        return len(self.lat_deg)

    @property
    def has_time(self) -> bool:
        """True when at least one fix has a finite time."""
        return bool(len(self) and np.isfinite(self.time_s).any())

    @property
    def has_height(self) -> bool:
        """True when at least one fix has a finite height."""
        return bool(len(self) and np.isfinite(self.height_m).any())

    def take(self, index: NDArray) -> "Track":
        """Return a Track with every per-fix array indexed by ``index`` (mask or integer array)."""
        changes = {}
        for name in self.array_fields():
            arr = getattr(self, name)
            if arr is not None:
                changes[name] = arr[index]
        return replace(self, **changes)

    def with_arrays(self, **changes) -> "Track":
        """Return a copy with some attributes replaced (thin wrapper over ``dataclasses.replace``)."""
        return replace(self, **changes)


def make_track(
    path: str,
    fmt: str,
    time_s,
    lat_deg,
    lon_deg,
    height_m=None,
    height_ref: str = HEIGHT_UNKNOWN,
    segment=None,
    records: int | None = None,
    skipped: dict[str, int] | None = None,
    reader: str = "",
    notes: tuple[str, ...] = (),
    **optional,
) -> Track:
    """Build a Track from array-likes, coercing dtypes and filling defaults.

    ``height_m=None`` gives all-NaN heights with ``height_ref`` forced to ``"none"``;
    ``segment=None`` puts every fix in segment 0. ``optional`` takes the optional arrays by name
    (``accuracy_m``, ``hdop``, ``satellites``, ``fix_quality``, ``speed_mps``, ``course_deg``); ``None`` values
    are dropped.
    """
    lat = np.asarray(lat_deg, dtype=np.float64)
    n = len(lat)
    if height_m is None:
        height = np.full(n, np.nan)
        height_ref = HEIGHT_NONE
    else:
        height = np.asarray(height_m, dtype=np.float64)
        if n and not np.isfinite(height).any():
            height_ref = HEIGHT_NONE
    seg = np.zeros(n, np.int32) if segment is None else np.asarray(segment, dtype=np.int32)
    opt = {k: np.asarray(v, dtype=np.float64) for k, v in optional.items() if v is not None}
    return Track(
        time_s=np.asarray(time_s, dtype=np.float64),
        lat_deg=lat,
        lon_deg=np.asarray(lon_deg, dtype=np.float64),
        height_m=height,
        height_ref=height_ref,
        segment=seg,
        source=SourceInfo(
            path=str(path),
            format=fmt,
            records=n if records is None else records,
            skipped=dict(skipped or {}),
            reader=reader,
            notes=tuple(notes),
        ),
        **opt,
    )
