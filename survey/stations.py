"""The Profile: geometry at fixed chainage stations, the record every later stage reads.

Frames and signs
----------------
* ``east_m``/``north_m``/``up_m`` are in the run's local frame (``frame`` describes it: ENU
  topocentric at an origin, or a projected CRS with heights).
* ``tangent``/``normal``/``binormal`` are unit vectors in that frame, shape (n, 3), with
  B = T x N. Where curvature is too small for N to be defined they are NaN (tangent still valid).
* ``curvature_per_m`` is the Frenet curvature kappa >= 0; ``radius_m`` = 1/kappa (inf on a
  straight). ``torsion_per_m`` is signed; NaN where it is undefined, with the reason in
  ``torsion_reason``.
* ``plan_curvature_per_m`` is the signed curvature of the horizontal projection: positive for a
  left-hand (anticlockwise seen from above) bend (common practice for plan geometry).
* ``vertical_curvature_per_m`` is d(grade)/d(horizontal distance), grade as a fraction
  (road vertical-curve practice): positive on a sag, negative on a crest.
* ``grade_pct`` is 100 * d(up)/d(plan chainage).
* ``lateral_accel_mps2`` = speed^2 * kappa where time exists, else NaN.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields

import numpy as np
from numpy.typing import NDArray

FloatArray = NDArray[np.float64]

#: Codes for ``Profile.torsion_reason`` (why torsion is NaN at a station).
TORSION_OK = 0
TORSION_LOW_CURVATURE = 1  # kappa not significantly above zero: the osculating plane is undefined
TORSION_NO_DATA = 2  # station lies in a gap / outside the smoothed data
TORSION_REASONS = {
    TORSION_OK: "",
    TORSION_LOW_CURVATURE: "curvature not clearly above its uncertainty: no osculating plane",
    TORSION_NO_DATA: "no data (gap or outage)",
}

#: Extra columns written when the Profile carries IMU-fused fields (attribute, description).
IMU_PROFILE_COLUMNS: tuple[tuple[str, str], ...] = (
    ("bank_deg", "deg, + = left side low"),
    ("bank_sd_deg", "deg, 1-sigma"),
    ("twist_deg_per_m", "deg/m, rate of change of bank"),
    ("gyro_plan_curvature_per_m", "1/m, yaw rate / speed, + = left"),
    ("pitch_deg", "deg, + = nose up"),
    ("imu_outage", "1 inside a GNSS outage bridged by the IMU"),
)

#: Columns written by ``trackframe profile``, in order: (attribute, unit/description).
PROFILE_COLUMNS: tuple[tuple[str, str], ...] = (
    ("chainage_m", "m along the smoothed 3D path from the first station"),
    ("time_s", "s since 1970-01-01T00:00:00Z"),
    ("lat", "deg WGS 84"),
    ("lon", "deg WGS 84"),
    ("alt_m", "m, same height reference as the log"),
    ("east_m", "m local frame"),
    ("north_m", "m local frame"),
    ("up_m", "m local frame"),
    ("speed_mps", "m/s"),
    ("grade_pct", "%"),
    ("curvature_per_m", "1/m"),
    ("radius_m", "m"),
    ("torsion_per_m", "1/m, empty where undefined"),
    ("curvature_sd_per_m", "1/m, 1-sigma from receiver noise (not the smoothing's rounding of abrupt changes)"),
    ("torsion_sd_per_m", "1/m, 1-sigma from receiver noise (as above)"),
    ("plan_curvature_per_m", "1/m, + = left bend"),
    ("plan_radius_m", "m, signed like plan curvature"),
    ("vertical_curvature_per_m", "1/m, + = sag"),
    ("lateral_accel_mps2", "m/s^2 = speed^2 * curvature"),
    ("torsion_note", "why torsion is empty"),
    ("segment", "segment number"),
)


@dataclass(frozen=True, eq=False)
class Profile:
    """Geometry at stations spaced ``step_m`` apart along the chainage (see module doc)."""

    chainage_m: FloatArray
    time_s: FloatArray
    lat_deg: FloatArray
    lon_deg: FloatArray
    height_m: FloatArray
    east_m: FloatArray
    north_m: FloatArray
    up_m: FloatArray
    speed_mps: FloatArray
    grade_pct: FloatArray
    tangent: FloatArray
    normal: FloatArray
    binormal: FloatArray
    curvature_per_m: FloatArray
    radius_m: FloatArray
    torsion_per_m: FloatArray
    curvature_sd_per_m: FloatArray
    torsion_sd_per_m: FloatArray
    plan_curvature_per_m: FloatArray
    plan_radius_m: FloatArray
    vertical_curvature_per_m: FloatArray
    lateral_accel_mps2: FloatArray
    torsion_reason: NDArray[np.int8]
    segment: NDArray[np.int32]
    #: 1-sigma of plan curvature, 1/m (None when the builder does not provide it).
    plan_curvature_sd_per_m: FloatArray | None = None
    # -- present only when an IMU log was fused (``--imu``); None otherwise --------------------
    #: Roll (bank) angle of the vehicle, degrees, + = left side low (same sign as a left bend).
    bank_deg: FloatArray | None = None
    #: 1-sigma of ``bank_deg``, degrees.
    bank_sd_deg: FloatArray | None = None
    #: Rate of change of bank per metre of chainage, degrees/m: the twist a rider feels.
    twist_deg_per_m: FloatArray | None = None
    #: Plan curvature seen by the gyro, yaw rate / speed, 1/m (+ = left), an independent check.
    gyro_plan_curvature_per_m: FloatArray | None = None
    #: Pitch angle, degrees, + = nose up.
    pitch_deg: FloatArray | None = None
    #: True where the station lies in a GNSS outage bridged by the IMU alone.
    imu_outage: NDArray[np.bool_] | None = None
    step_m: float = 1.0
    height_ref: str = "unknown"
    frame: str = ""
    settings: dict = field(default_factory=dict)
    messages: tuple[str, ...] = ()

    def __len__(self) -> int:
        return len(self.chainage_m)

    @staticmethod
    def array_fields() -> tuple[str, ...]:
        """Names of the per-station array attributes (optional ones may hold None)."""
        scalars = {"step_m", "height_ref", "frame", "settings", "messages"}
        return tuple(f.name for f in fields(Profile) if f.name not in scalars)

    def columns(self) -> tuple[tuple[str, str], ...]:
        """(name, unit) of every exported column: ``PROFILE_COLUMNS``, plus
        ``IMU_PROFILE_COLUMNS`` when an IMU log was fused."""
        return PROFILE_COLUMNS + (IMU_PROFILE_COLUMNS if self.bank_deg is not None else ())

    def column(self, name: str) -> np.ndarray:
        """One output column of ``columns()`` by its exported name."""
        alias = {"lat": "lat_deg", "lon": "lon_deg", "alt_m": "height_m"}
        if name == "torsion_note":
            return np.array([TORSION_REASONS[int(c)] for c in self.torsion_reason], dtype=object)
        if name == "imu_outage":
            return self.imu_outage.astype(np.float64)
        return getattr(self, alias.get(name, name))

    def nbytes(self) -> int:
        """Memory held by the per-station arrays, bytes."""
        arrays = (getattr(self, n) for n in self.array_fields())
        return int(sum(a.nbytes for a in arrays if a is not None))
