"""Naive baseline: per-axis cubic smoothing spline in time (GCV, scipy.interpolate.make_smoothing_spline),
kappa and tau from its derivatives at the fix times (Craven & Wahba 1979; REFERENCES.md)."""

import numpy as np
from scipy.interpolate import make_smoothing_spline

from survey.geometry import curvature_torsion


def baseline_kappa_tau(time_s, enu_m):
    t, idx = np.unique(time_s, return_index=True)
    y = enu_m[idx]
    splines = [make_smoothing_spline(t, y[:, k]) for k in range(3)]
    v = np.column_stack([s.derivative(1)(t) for s in splines])
    a = np.column_stack([s.derivative(2)(t) for s in splines])
    j = np.column_stack([s.derivative(3)(t) for s in splines])
    k, tau = curvature_torsion(v, a, j)
    return t, k, tau
