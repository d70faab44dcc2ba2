"""Closed-form road Profiles for the section, export and flag tests (no tests in this file).

A road is a list of pieces (length_m, radius_m, side): a straight has radius inf; an arc has
signed plan curvature side/R on its stations (closed interval [start, end]) and 0 elsewhere, so
the expected sections are known exactly. Heading, plan coordinates and heights come from
integrating the curvature and a constant grade; lat/lon come from pymap3d.enu2geodetic (an
independent reference library).
"""

from __future__ import annotations

import math

import numpy as np
import pymap3d

from survey.stations import TORSION_LOW_CURVATURE, TORSION_OK, Profile

ORIGIN = (-12.3456, 134.5678, 150.0)  # invented place (lat deg, lon deg, height m)
T0_S = 1_700_000_000.0  # 2023-11-14T22:13:20Z, arbitrary


def arc_curvature(chainage_m, pieces):
    """Signed plan curvature per station for pieces (length_m, radius_m, side); arcs are closed
    intervals, so their first and last stations carry 1/R."""
    kappa = np.zeros_like(chainage_m)
    start = 0.0
    for length, radius, side in pieces:
        end = start + length
        if math.isfinite(radius):
            on = (chainage_m >= start - 1e-9) & (chainage_m <= end + 1e-9)
            kappa[on] = side / radius
        start = end
    return kappa


def road_profile(
    pieces,
    step_m: float = 1.0,
    speed_mps: float = 20.0,
    grade: float = 0.0,
    curvature_sd_per_m: float = 1e-5,
    torsion_sd_per_m: float = 1e-4,
    **overrides,
) -> Profile:
    """A Profile of a road made of straights and arcs of known radius (see module doc).

    ``overrides`` replace any Profile field by name (e.g. ``curvature_per_m=...``); when
    ``curvature_per_m`` is overridden, radius and lateral acceleration follow it.
    """
    total = sum(p[0] for p in pieces)
    s = np.arange(0.0, total + step_m / 2, step_m)
    n = len(s)
    plan_k = arc_curvature(s, pieces)
    heading = np.concatenate(([0.0], np.cumsum(0.5 * (plan_k[1:] + plan_k[:-1]) * np.diff(s))))
    cos_h, sin_h = np.cos(heading), np.sin(heading)
    east = np.concatenate(([0.0], np.cumsum(0.5 * (cos_h[1:] + cos_h[:-1]) * np.diff(s))))
    north = np.concatenate(([0.0], np.cumsum(0.5 * (sin_h[1:] + sin_h[:-1]) * np.diff(s))))
    up = grade * s
    lat, lon, h = pymap3d.enu2geodetic(east, north, up, *ORIGIN)
    kappa = overrides.pop("curvature_per_m", np.abs(plan_k))
    kappa = np.asarray(kappa, dtype=float)
    with np.errstate(divide="ignore"):
        radius = np.where(kappa > 0, 1.0 / kappa, np.inf)
        plan_radius = np.where(plan_k != 0, 1.0 / plan_k, np.inf)
    tangent = np.stack([cos_h, sin_h, np.zeros(n)], axis=1)
    side = np.sign(plan_k)[:, None]
    normal = np.where(side != 0, side * np.stack([-sin_h, cos_h, np.zeros(n)], axis=1), np.nan)
    binormal = np.cross(tangent, normal)
    torsion = np.where(kappa > 0, 0.0, np.nan)  # plane curve: tau = 0 wherever kappa != 0
    reason = np.where(kappa > 0, TORSION_OK, TORSION_LOW_CURVATURE).astype(np.int8)
    fields = dict(
        chainage_m=s,
        time_s=T0_S + s / speed_mps,
        lat_deg=np.asarray(lat, dtype=float),
        lon_deg=np.asarray(lon, dtype=float),
        height_m=np.asarray(h, dtype=float),
        east_m=east,
        north_m=north,
        up_m=up,
        speed_mps=np.full(n, float(speed_mps)),
        grade_pct=np.full(n, 100.0 * grade),
        tangent=tangent,
        normal=normal,
        binormal=binormal,
        curvature_per_m=kappa,
        radius_m=radius,
        torsion_per_m=torsion,
        curvature_sd_per_m=np.full(n, float(curvature_sd_per_m)),
        torsion_sd_per_m=np.full(n, float(torsion_sd_per_m)),
        plan_curvature_per_m=plan_k,
        plan_radius_m=plan_radius,
        vertical_curvature_per_m=np.zeros(n),
        lateral_accel_mps2=speed_mps**2 * kappa,
        torsion_reason=reason,
        segment=np.zeros(n, dtype=np.int32),
        step_m=step_m,
        height_ref="ellipsoid",
        frame="ENU at -12.3456, 134.5678, 150 m (test road)",
    )
    fields.update(overrides)
    return Profile(**fields)

