"""Local metric frame: geodetic WGS 84 <-> metres, through pyproj.

Two kinds of frame:

* ``enu`` (default): a local tangent plane, east/north/up, topocentric at a stated origin
  (PROJ ``topocentric`` conversion after geodetic -> ECEF ``cart``). Distances and angles are true
  3D Euclidean values; nothing is distorted by a map projection.
* ``crs``: a projected CRS (``EPSG:NNNN``, or ``utm`` for the automatic UTM zone of the track);
  east/north are grid coordinates and up is the log's height. Grid scale distortion applies
  (e.g. up to 0.04 % inside a UTM zone, common practice), which is why ENU is the default.

Heights keep the reference of the log (see ``Track.height_ref``): the frame does not apply a
geoid model. A log without heights is placed at height 0 (the path is then planar).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from pyproj import CRS, Transformer
from pyproj.aoi import AreaOfInterest
from pyproj.database import query_utm_crs_info
from pyproj.enums import TransformDirection
from pyproj.exceptions import CRSError

from .errors import InputError
from .track import Track

WGS84_LONLAT = "EPSG:4326"


@dataclass(frozen=True)
class LocalFrame:
    """A metric frame for one run.

    Attributes
    ----------
    kind
        ``"enu"`` or ``"crs"``.
    origin_lat_deg, origin_lon_deg, origin_h_m
        ENU origin (geodetic WGS 84, height in the log's reference). For ``crs`` frames these
        record the track's reference point for information only.
    crs
        The projected CRS as ``"EPSG:NNNN"`` (``crs`` frames only).
    """

    kind: str
    origin_lat_deg: float
    origin_lon_deg: float
    origin_h_m: float = 0.0
    crs: str = ""
    _transformer: Transformer = field(default=None, repr=False, compare=False)  # type: ignore[assignment]

    # -- construction -----------------------------------------------------------------------
    @classmethod
    def enu(cls, origin_lat_deg: float, origin_lon_deg: float, origin_h_m: float = 0.0) -> "LocalFrame":
        """East/north/up topocentric frame at the given origin (degrees, metres)."""
        lat0, lon0, h0 = float(origin_lat_deg), float(origin_lon_deg), float(origin_h_m)
        if not (-90.0 <= lat0 <= 90.0 and -180.0 <= lon0 <= 180.0 and np.isfinite(h0)):
            raise InputError(None, f"frame origin {lat0}, {lon0}, {h0} is out of range")
        pipeline = (
            "+proj=pipeline"
            " +step +proj=unitconvert +xy_in=deg +xy_out=rad"
            " +step +proj=cart +ellps=WGS84"
            f" +step +proj=topocentric +ellps=WGS84 +lat_0={lat0!r} +lon_0={lon0!r} +h_0={h0!r}"
        )
        return cls("enu", lat0, lon0, h0, "", Transformer.from_pipeline(pipeline))

    @classmethod
    def projected(cls, crs: str, ref_lat_deg: float, ref_lon_deg: float, ref_h_m: float = 0.0) -> "LocalFrame":
        """A projected CRS frame; ``crs`` is anything pyproj accepts (``"EPSG:32633"``...)."""
        try:
            target = CRS.from_user_input(crs)
        except CRSError:
            raise InputError(None, f"--crs {crs!r}: not a coordinate reference system pyproj knows") from None
        if not target.is_projected:
            raise InputError(None, f"--crs {crs!r}: not a projected CRS (need metres east/north)")
        auth = target.to_authority()
        name = f"{auth[0]}:{auth[1]}" if auth else target.to_string()
        transformer = Transformer.from_crs(WGS84_LONLAT, target, always_xy=True)
        return cls("crs", float(ref_lat_deg), float(ref_lon_deg), float(ref_h_m), name, transformer)

    @classmethod
    def for_track(cls, track: Track, crs: str | None = None, origin: tuple[float, ...] | None = None) -> "LocalFrame":
        """The frame a run uses for ``track``.

        Parameters
        ----------
        crs
            ``None`` for ENU; ``"utm"`` for the track's UTM zone; otherwise a projected CRS.
        origin
            ``(lat_deg, lon_deg[, h_m])`` for the ENU origin. Default: the centre of the track's
            latitude/longitude bounding box, at the median height of the track (0 without heights).
        """
        lat0, lon0, h0 = default_origin(track) if origin is None else _origin3(origin)
        if crs is None:
            return cls.enu(lat0, lon0, h0)
        if crs.strip().lower() == "utm":
            return cls.projected(utm_crs_for(track), lat0, lon0, h0)
        return cls.projected(crs, lat0, lon0, h0)

    # -- conversion -------------------------------------------------------------------------
    def forward(self, lat_deg, lon_deg, h_m=None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Geodetic (deg, deg, m) -> (east_m, north_m, up_m) in this frame; NaN heights -> 0."""
        lat = np.asarray(lat_deg, dtype=np.float64)
        lon = np.asarray(lon_deg, dtype=np.float64)
        h = np.zeros_like(lat) if h_m is None else np.nan_to_num(np.asarray(h_m, dtype=np.float64), nan=0.0)
        if self.kind == "enu":
            e, n, u = self._transformer.transform(lon, lat, h)
            return np.asarray(e), np.asarray(n), np.asarray(u)
        e, n = self._transformer.transform(lon, lat)
        return np.asarray(e), np.asarray(n), h.copy()

    def inverse(self, east_m, north_m, up_m) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(east_m, north_m, up_m) in this frame -> geodetic (lat_deg, lon_deg, h_m)."""
        e = np.asarray(east_m, dtype=np.float64)
        n = np.asarray(north_m, dtype=np.float64)
        u = np.asarray(up_m, dtype=np.float64)
        if self.kind == "enu":
            lon, lat, h = self._transformer.transform(e, n, u, direction=TransformDirection.INVERSE)
            return np.asarray(lat), np.asarray(lon), np.asarray(h)
        lon, lat = self._transformer.transform(e, n, direction=TransformDirection.INVERSE)
        return np.asarray(lat), np.asarray(lon), u.copy()

    def ground_velocity(self, lat_deg, lon_deg, speed_mps, course_deg) -> tuple[np.ndarray, np.ndarray]:
        """Receiver speed and true course over ground -> horizontal velocity (east, north) in this
        frame, m/s per axis (arrays of the inputs' shape; NaN where speed or course is).

        A course is measured from true north, but the frame's north is the grid north of a
        projected CRS (off true north by the meridian convergence, about 2.5 degrees at the edge
        of a UTM zone at 60 degrees latitude, and scaled by the grid scale factor) or, in the local
        ENU frame, the north of its origin (off by about the longitude difference x sin(latitude)
        away from it). So a metre of true north and of true east at every fix is carried through
        ``forward`` (a 1e-6 degree step, its ground length from the WGS 84 meridian and
        prime-vertical radii of curvature) and the velocity is v (sin(course) east_vector +
        cos(course) north_vector).
        """
        lat = np.asarray(lat_deg, dtype=np.float64)
        lon = np.asarray(lon_deg, dtype=np.float64)
        a, f = 6378137.0, 1.0 / 298.257223563  # WGS 84 defining constants
        e2 = f * (2.0 - f)
        phi = np.radians(lat)
        w = np.sqrt(1.0 - e2 * np.sin(phi) ** 2)
        meridian_r = a * (1.0 - e2) / w**3  # M, metres of ground per radian of latitude
        normal_r = a / w  # N; a parallel has radius N cos(phi)
        step = 1e-6
        e0, n0, _ = self.forward(lat, lon)
        en, nn, _ = self.forward(lat + step, lon)
        ee, ne, _ = self.forward(lat, lon + step)
        rad = np.radians(step)
        north = np.stack([en - e0, nn - n0]) / (meridian_r * rad)
        east = np.stack([ee - e0, ne - n0]) / (normal_r * np.cos(phi) * rad)
        c = np.radians(np.asarray(course_deg, dtype=np.float64))
        v = np.asarray(speed_mps, dtype=np.float64)
        vel = v * (np.sin(c) * east + np.cos(c) * north)
        return vel[0], vel[1]

    def describe(self) -> str:
        """One line naming the frame and its origin, for summaries and file headers."""
        if self.kind == "enu":
            return (
                f"local ENU (topocentric, WGS 84) at {self.origin_lat_deg:.7f}, "
                f"{self.origin_lon_deg:.7f}, h {self.origin_h_m:.2f} m"
            )
        return f"projected {self.crs} (grid east/north, height as in the log)"

    def as_dict(self) -> dict:
        """JSON-ready description."""
        return {
            "kind": self.kind,
            "crs": self.crs or None,
            "origin_lat_deg": self.origin_lat_deg,
            "origin_lon_deg": self.origin_lon_deg,
            "origin_h_m": self.origin_h_m,
            "description": self.describe(),
        }


def default_origin(track: Track) -> tuple[float, float, float]:
    """Centre of the lat/lon bounding box and median height (0 without heights)."""
    ok = np.isfinite(track.lat_deg) & np.isfinite(track.lon_deg)
    if not ok.any():
        raise InputError(track.source.path, "no valid latitude/longitude")
    lat, lon = track.lat_deg[ok], track.lon_deg[ok]
    h = track.height_m[np.isfinite(track.height_m)]
    lat0 = 0.5 * (lat.min() + lat.max())
    lon0 = _mid_longitude(lon)
    return float(lat0), float(lon0), float(np.median(h)) if h.size else 0.0


def utm_crs_for(track: Track) -> str:
    """``EPSG:NNNN`` of the WGS 84 UTM zone covering the track's centre (pyproj database)."""
    lat0, lon0, _ = default_origin(track)
    infos = query_utm_crs_info(
        datum_name="WGS 84",
        area_of_interest=AreaOfInterest(lon0, lat0, lon0, lat0),
    )
    if not infos or not -80.0 <= lat0 <= 84.0:
        raise InputError(track.source.path, "no UTM zone covers this track (polar?); give --crs EPSG:NNNN")
    return f"{infos[0].auth_name}:{infos[0].code}"


def _mid_longitude(lon: np.ndarray) -> float:
    """Middle of the longitude range, taking the short way across the antimeridian."""
    lo, hi = float(lon.min()), float(lon.max())
    if hi - lo <= 180.0:
        return 0.5 * (lo + hi)
    shifted = np.where(lon < 0, lon + 360.0, lon)
    mid = 0.5 * (shifted.min() + shifted.max())
    return float(mid - 360.0 if mid > 180.0 else mid)


def _origin3(origin: tuple[float, ...]) -> tuple[float, float, float]:
    if len(origin) not in (2, 3):
        raise InputError(None, "--origin takes LAT,LON or LAT,LON,HEIGHT")
    lat, lon = float(origin[0]), float(origin[1])
    return lat, lon, float(origin[2]) if len(origin) == 3 else 0.0
