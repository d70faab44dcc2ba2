"""Frenet geometry of a smoothed path from its time derivatives (pure numpy, any batch shape).

Given velocity v = r', acceleration a = r'' and jerk j = r''' in the local frame (east, north,
up; any regular parameter), the Frenet-Serret quantities are (REFERENCES.md, "Geometry of
curves"; do Carmo 1976)::

    T = v/|v|,  B = (v x a)/|v x a|,  N = B x T,
    kappa = |v x a| / |v|^3,   tau = (v x a) . j / |v x a|^2.

These are independent of the parameterisation, so time (or raw chainage for logs without time)
can be used directly; kappa and tau are per metre of 3D arc length. Plan quantities use the
horizontal projection (east, north)::

    plan kappa = (v_e a_n - v_n a_e) / |v_h|^3     (+ = left bend, anticlockwise from above)
    grade      = v_u / |v_h|                      (rise over plan run)
    vertical curvature = d(grade)/d(plan distance) = (a_u |v_h|^2 - v_u (v_h . a_h)) / |v_h|^4

Vertical curvature is taken per metre of plan distance, as road vertical curves are designed
(grade changing linearly with horizontal distance on a parabolic curve: common practice); it
differs from the per-3D-metre value by the factor sqrt(1 + grade^2).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

FloatArray = NDArray[np.float64]


def _dot(a: FloatArray, b: FloatArray) -> FloatArray:
    return a[..., 0] * b[..., 0] + a[..., 1] * b[..., 1] + a[..., 2] * b[..., 2]


def _cross(a: FloatArray, b: FloatArray) -> FloatArray:
    """a x b over the last axis (3), written out: np.cross is slow on long arrays."""
    out = np.empty(np.broadcast_shapes(a.shape, b.shape))
    out[..., 0] = a[..., 1] * b[..., 2] - a[..., 2] * b[..., 1]
    out[..., 1] = a[..., 2] * b[..., 0] - a[..., 0] * b[..., 2]
    out[..., 2] = a[..., 0] * b[..., 1] - a[..., 1] * b[..., 0]
    return out


def curvature_torsion(v: FloatArray, a: FloatArray, j: FloatArray) -> tuple[FloatArray, FloatArray]:
    """kappa (1/m, >= 0) and tau (1/m, signed; NaN where v x a = 0) from (..., 3) derivatives."""
    c = _cross(v, a)
    c2 = _dot(c, c)
    speed = np.sqrt(_dot(v, v))
    with np.errstate(invalid="ignore", divide="ignore"):
        kappa = np.sqrt(c2) / speed**3
        tau = np.where(c2 > 0, _dot(c, j) / np.where(c2 > 0, c2, 1.0), np.nan)
    return kappa, tau


def frenet(v: FloatArray, a: FloatArray, j: FloatArray) -> dict[str, FloatArray]:
    """Every per-station geometric quantity from (..., 3) velocity, acceleration and jerk.

    Returns
    -------
    dict with ``speed`` (|v|, parameter units), ``tangent``, ``normal``, ``binormal`` (..., 3),
    ``curvature_per_m``, ``torsion_per_m``, ``plan_curvature_per_m``, ``grade`` (fraction),
    ``vertical_curvature_per_m``.
    """
    speed = np.sqrt(_dot(v, v))
    c = _cross(v, a)
    c2 = _dot(c, c)
    cn = np.sqrt(c2)
    with np.errstate(invalid="ignore", divide="ignore"):
        kappa = cn / speed**3
        tau = np.where(c2 > 0, _dot(c, j) / np.where(c2 > 0, c2, 1.0), np.nan)
        T = v / speed[..., None]
        B = c / cn[..., None]
        N = _cross(B, T)
        vh2 = v[..., 0] ** 2 + v[..., 1] ** 2
        vh = np.sqrt(vh2)
        plan = (v[..., 0] * a[..., 1] - v[..., 1] * a[..., 0]) / vh**3
        grade = v[..., 2] / vh
        vha = v[..., 0] * a[..., 0] + v[..., 1] * a[..., 1]
        vert = (a[..., 2] * vh2 - v[..., 2] * vha) / vh2**2
    return {
        "speed": speed,
        "tangent": T,
        "normal": N,
        "binormal": B,
        "curvature_per_m": kappa,
        "torsion_per_m": tau,
        "plan_curvature_per_m": plan,
        "grade": grade,
        "vertical_curvature_per_m": vert,
    }
