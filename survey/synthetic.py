"""Closed-form ground truth: synthetic trajectories, GNSS error and log corruptions.

This is the one place where tests, benchmarks and the demo generator get paths whose curvature
and torsion are known exactly. Everything is in a local metric frame (east, north, up), metres
and seconds.

Curves
------
A ``Curve`` is a parametric space curve ``r(u)`` with closed-form first, second and third
derivatives in its own parameter ``u``. Curvature and torsion follow from the Frenet-Serret
formulas, which do not depend on the parameterisation::

    kappa = |r' x r''| / |r'|^3,      tau = (r' x r'') . r''' / |r' x r''|^2

(do Carmo, *Differential Geometry of Curves and Surfaces*, 1976; see /work/shared/REFERENCES.md).
Torsion is NaN where ``r' x r''`` vanishes (straights).

* ``helix_curve``: r(t) = (a cos t, a sin t, c t); kappa = a/(a^2+c^2), tau = c/(a^2+c^2).
* ``alignment_curve``: plan geometry from pieces of linearly varying curvature (tangent = 0 -> 0,
  circular arc = k -> k, clothoid = 0 -> 1/R with A^2 = R L). Coordinates of every piece are
  exact, from ``scipy.special.fresnel`` (which returns ``(S, C)`` in that order, kernels
  sin/cos(pi t^2 / 2)); for a clothoid starting at the origin heading east,
  x(s) = A sqrt(pi) C(s / (A sqrt(pi))), y(s) = A sqrt(pi) S(s / (A sqrt(pi))), kappa(s) = s/A^2.
  Heights come from a grade line with parabolic vertical curves (grade linear in plan distance),
  as in road design (common practice).
* ``tilted_ellipse_curve``: a plane curve (tau = 0 exactly) whose plane is tilted, so heights vary.

Sampling
--------
``sample_path`` moves along a curve at a given speed (with optional stops), samples it at a rate
with optional timing jitter, and returns a ``Trajectory`` with true positions, velocity, chainage,
curvature, torsion and plan curvature at every fix.

GNSS error
----------
``add_gnss_error`` adds white noise plus a first-order Gauss-Markov wander (correlation time
30-120 s), horizontal and vertical with their own sizes. Default sizes per receiver grade follow
REFERENCES.md "GNSS accuracy": RTK about 1-2 cm (vendor specifications, 1 cm + 1 ppm),
dual-frequency / SBAS-class about 0.3 m 1-sigma (FAA WAAS report no. 10, 2004: 0.6-1.1 m 95 %),
phone / single-frequency a few metres (GPS SPS Performance Standard 2020: <= 9 m 95 %), heights
about 1.7x horizontal (same sources). The split between white and wander is common practice, not
a published figure.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Callable, Sequence

import numpy as np
from numpy.typing import NDArray
from scipy.special import fresnel

FloatArray = NDArray[np.float64]

__all__ = [
    "Curve",
    "Trajectory",
    "Fixes",
    "GNSS_GRADES",
    "frenet_from_derivatives",
    "helix_curve",
    "alignment_curve",
    "tilted_ellipse_curve",
    "switchback_curve",
    "concat_curves",
    "sample_path",
    "helix",
    "road_alignment",
    "plane_loop",
    "switchbacks",
    "add_gnss_error",
    "add_outliers",
    "add_outage",
    "duplicate_fixes",
    "exact_fixes",
    "fixes_to_track",
]


# --------------------------------------------------------------------------------------------
# Differential geometry of a parametric curve
# --------------------------------------------------------------------------------------------


def frenet_from_derivatives(
    d1: FloatArray, d2: FloatArray, d3: FloatArray
) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Curvature, torsion and signed plan curvature from r', r'', r''' (any parameter).

    Parameters
    ----------
    d1, d2, d3
        (n, 3) first, second and third derivatives of the position (east, north, up) with respect
        to any regular parameter.

    Returns
    -------
    kappa_per_m, tau_per_m, plan_kappa_per_m
        Frenet curvature (>= 0), torsion (NaN where r' x r'' vanishes), and the signed curvature
        of the horizontal projection (positive anticlockwise seen from above, i.e. a left bend).
    """
    cross = np.cross(d1, d2)
    speed = np.linalg.norm(d1, axis=1)
    cross_sq = np.einsum("ij,ij->i", cross, cross)
    kappa = np.sqrt(cross_sq) / speed**3
    with np.errstate(invalid="ignore", divide="ignore"):
        tau = np.einsum("ij,ij->i", cross, d3) / cross_sq
    tau = np.where(cross_sq > 1e-20 * speed**4, tau, np.nan)
    hspeed_sq = d1[:, 0] ** 2 + d1[:, 1] ** 2
    with np.errstate(invalid="ignore", divide="ignore"):
        plan = (d1[:, 0] * d2[:, 1] - d1[:, 1] * d2[:, 0]) / hspeed_sq**1.5
    return kappa, tau, plan


@dataclass(frozen=True)
class Curve:
    """A parametric space curve with closed-form derivatives.

    Attributes
    ----------
    evaluate
        ``evaluate(u) -> (r, r', r'', r''')``, each (n, 3), for parameter values ``u`` (n,) in
        ``[0, u_end]``.
    u_end
        Parameter value at the end of the curve.
    name
        Short label.
    """

    evaluate: Callable[[FloatArray], tuple[FloatArray, FloatArray, FloatArray, FloatArray]]
    u_end: float
    name: str = "curve"

    def arc_length_table(self, n: int = 200_001) -> tuple[FloatArray, FloatArray]:
        """(u, s) on a fine grid: 3D arc length s(u) by Simpson-accurate cumulative quadrature."""
        u = np.linspace(0.0, self.u_end, n)
        speed = np.linalg.norm(self.evaluate(u)[1], axis=1)
        mid = 0.5 * (u[1:] + u[:-1])
        speed_mid = np.linalg.norm(self.evaluate(mid)[1], axis=1)
        # Simpson's rule on each sub-interval (ends + midpoint).
        ds = (u[1:] - u[:-1]) * (speed[:-1] + 4.0 * speed_mid + speed[1:]) / 6.0
        return u, np.concatenate(([0.0], np.cumsum(ds)))

    def length_m(self) -> float:
        """Total 3D arc length, metres."""
        return float(self.arc_length_table()[1][-1])


def helix_curve(radius_m: float, rise_per_rad_m: float, turns: float, centre=(0.0, 0.0, 0.0)) -> Curve:
    """Circular helix r(t) = (a cos t, a sin t, c t) + centre for t in [0, 2 pi turns].

    kappa = a/(a^2+c^2), tau = c/(a^2+c^2) (do Carmo 1976; checked with sympy in the tests).
    """
    a, c = float(radius_m), float(rise_per_rad_m)
    cx, cy, cz = (float(v) for v in centre)

    def evaluate(t):
        t = np.asarray(t, dtype=float)
        ct, st = np.cos(t), np.sin(t)
        z0, z1 = np.zeros_like(t), np.ones_like(t)
        r = np.column_stack((cx + a * ct, cy + a * st, cz + c * t))
        d1 = np.column_stack((-a * st, a * ct, c * z1))
        d2 = np.column_stack((-a * ct, -a * st, z0))
        d3 = np.column_stack((a * st, -a * ct, z0))
        return r, d1, d2, d3

    return Curve(evaluate, 2.0 * np.pi * float(turns), "helix")


@dataclass(frozen=True)
class _PlanPiece:
    length_m: float
    k0: float  # signed plan curvature at start, 1/m (+ = left)
    k1: float  # at end


def _plan_piece_xy(s: FloatArray, k0: float, k1: float, length: float) -> tuple[FloatArray, FloatArray]:
    """Exact plan coordinates of a linear-curvature piece starting at the origin heading east.

    heading theta(s) = k0 s + c s^2 / 2 with c = (k1 - k0)/L. For c != 0 complete the square and
    use Fresnel integrals (scipy.special.fresnel returns (S, C)); for c = 0 it is an arc or line.
    """
    c = (k1 - k0) / length
    if abs(c) < 1e-15:
        if abs(k0) < 1e-15:
            return s.copy(), np.zeros_like(s)
        return np.sin(k0 * s) / k0, (1.0 - np.cos(k0 * s)) / k0
    sign = 1.0 if c > 0 else -1.0
    ac = abs(c)
    scale = np.sqrt(np.pi / ac)  # = A sqrt(pi) with A^2 = 1/|c|
    u0 = k0 / c  # u = s + k0/c
    z = lambda u: u / scale  # noqa: E731  (argument of the Fresnel integrals)
    S1, C1 = fresnel(z(s + u0))
    S0, C0 = fresnel(z(np.array([u0])))
    # integral_0^s exp(i theta) ds = exp(-i k0^2/(2c)) * scale * [C + i sign S]_{z(u0)}^{z(s+u0)}
    dC = scale * (C1 - C0[0])
    dS = scale * sign * (S1 - S0[0])
    phase = -(k0**2) / (2.0 * c)
    cp, sp = np.cos(phase), np.sin(phase)
    return cp * dC - sp * dS, sp * dC + cp * dS


def alignment_curve(
    pieces: Sequence[tuple[str, float, float]],
    grades: Sequence[tuple[float, float, float]] = (),
    start_heading_rad: float = 0.0,
    start=(0.0, 0.0, 0.0),
) -> Curve:
    """A road-like alignment parameterised by plan distance x (metres).

    Parameters
    ----------
    pieces
        Plan pieces in order, each ``(kind, length_m, value)``:
        ``("tangent", L, 0)``; ``("arc", L, k)`` with signed curvature k = +-1/R (+ = left);
        ``("spiral", L, k_end)``: curvature changes linearly from the previous piece's end
        curvature to ``k_end`` (a clothoid, A^2 = R L when it runs from 0 to 1/R).
    grades
        Vertical pieces ``(length_m, grade_start, grade_end)`` in plan distance, grades as
        fractions; grade linear within a piece (parabolic vertical curve when start != end).
        Missing length at the end continues the last grade; empty means level.
    """
    plan: list[_PlanPiece] = []
    k_prev = 0.0
    for kind, length, value in pieces:
        if kind == "tangent":
            plan.append(_PlanPiece(float(length), 0.0, 0.0))
            k_prev = 0.0
        elif kind == "arc":
            plan.append(_PlanPiece(float(length), float(value), float(value)))
            k_prev = float(value)
        elif kind == "spiral":
            plan.append(_PlanPiece(float(length), k_prev, float(value)))
            k_prev = float(value)
        else:
            raise ValueError(f"unknown alignment piece {kind!r}")
    x_starts = np.concatenate(([0.0], np.cumsum([p.length_m for p in plan])))
    total = float(x_starts[-1])
    # Start pose of every piece (exact, chaining the closed forms).
    poses = [(float(start[0]), float(start[1]), float(start_heading_rad))]
    for p in plan:
        x0, y0, th0 = poses[-1]
        px, py = _plan_piece_xy(np.array([p.length_m]), p.k0, p.k1, p.length_m)
        ct, st = np.cos(th0), np.sin(th0)
        th_end = th0 + p.k0 * p.length_m + 0.5 * (p.k1 - p.k0) * p.length_m
        poses.append((x0 + ct * px[0] - st * py[0], y0 + st * px[0] + ct * py[0], th_end))

    gpieces = [(float(L), float(g0), float(g1)) for L, g0, g1 in grades]
    if not gpieces:
        gpieces = [(total, 0.0, 0.0)]
    g_starts = np.concatenate(([0.0], np.cumsum([g[0] for g in gpieces])))
    if g_starts[-1] < total:
        gpieces.append((total - g_starts[-1] + 1.0, gpieces[-1][2], gpieces[-1][2]))
        g_starts = np.concatenate(([0.0], np.cumsum([g[0] for g in gpieces])))
    # Height at the start of every vertical piece.
    z_starts = [float(start[2])]
    for L, g0, g1 in gpieces:
        z_starts.append(z_starts[-1] + L * (g0 + g1) / 2.0)

    def evaluate(x):
        x = np.clip(np.asarray(x, dtype=float), 0.0, total)
        n = len(x)
        r = np.empty((n, 3))
        d1 = np.empty((n, 3))
        d2 = np.empty((n, 3))
        d3 = np.empty((n, 3))
        idx = np.clip(np.searchsorted(x_starts, x, side="right") - 1, 0, len(plan) - 1)
        for i, p in enumerate(plan):
            m = idx == i
            if not m.any():
                continue
            s = x[m] - x_starts[i]
            x0, y0, th0 = poses[i]
            px, py = _plan_piece_xy(s, p.k0, p.k1, p.length_m)
            ct, st = np.cos(th0), np.sin(th0)
            c = (p.k1 - p.k0) / p.length_m
            k = p.k0 + c * s
            th = th0 + p.k0 * s + 0.5 * c * s**2
            r[m, 0] = x0 + ct * px - st * py
            r[m, 1] = y0 + st * px + ct * py
            cth, sth = np.cos(th), np.sin(th)
            d1[m, 0], d1[m, 1] = cth, sth
            d2[m, 0], d2[m, 1] = -sth * k, cth * k
            d3[m, 0] = -cth * k**2 - sth * c
            d3[m, 1] = -sth * k**2 + cth * c
        gidx = np.clip(np.searchsorted(g_starts, x, side="right") - 1, 0, len(gpieces) - 1)
        for i, (L, g0, g1) in enumerate(gpieces):
            m = gidx == i
            if not m.any():
                continue
            s = x[m] - g_starts[i]
            gc = (g1 - g0) / L
            r[m, 2] = z_starts[i] + g0 * s + 0.5 * gc * s**2
            d1[m, 2] = g0 + gc * s
            d2[m, 2] = gc
            d3[m, 2] = 0.0
        return r, d1, d2, d3

    return Curve(evaluate, total, "alignment")


def tilted_ellipse_curve(
    semi_major_m: float, semi_minor_m: float, tilt_rad: float, turns: float = 1.0, centre=(0.0, 0.0, 0.0)
) -> Curve:
    """An ellipse in a plane tilted by ``tilt_rad`` about the east axis: a plane curve, tau = 0."""
    a, b = float(semi_major_m), float(semi_minor_m)
    ca, sa = np.cos(tilt_rad), np.sin(tilt_rad)
    cx, cy, cz = (float(v) for v in centre)

    def evaluate(t):
        t = np.asarray(t, dtype=float)
        ct, st = np.cos(t), np.sin(t)

        def tilt(x, y, off):
            return np.column_stack((x + off[0], y * ca + off[1], y * sa + off[2]))

        zero = (0.0, 0.0, 0.0)
        return (
            tilt(a * ct, b * st, (cx, cy, cz)),
            tilt(-a * st, b * ct, zero),
            tilt(-a * ct, -b * st, zero),
            tilt(a * st, -b * ct, zero),
        )

    return Curve(evaluate, 2.0 * np.pi * float(turns), "plane loop")


def switchback_curve(
    radius_m: float = 8.0, leg_m: float = 40.0, turns: int = 4, grade: float = 0.08, lead_in_m: float = 20.0
) -> Curve:
    """Trail switchbacks: straight legs joined by alternating 180-degree turns of ``radius_m``,
    climbing on a steady ``grade`` (fraction of plan distance)."""
    pieces: list[tuple[str, float, float]] = [("tangent", lead_in_m, 0.0)]
    k = 1.0 / radius_m
    for i in range(turns):
        sign = 1.0 if i % 2 == 0 else -1.0
        pieces.append(("arc", np.pi * radius_m, sign * k))
        pieces.append(("tangent", leg_m, 0.0))
    total = sum(p[1] for p in pieces)
    return alignment_curve(pieces, grades=[(total, grade, grade)])


def random_drive_pieces(
    length_m: float,
    rng: np.random.Generator,
    radii_m: Sequence[float] = (40.0, 90.0, 200.0, 600.0),
    tangent_m: tuple[float, float] = (150.0, 600.0),
    arc_turn_halfturns: tuple[float, float] = (0.3, 1.0),
) -> tuple[list[tuple[str, float, float]], float]:
    """Plan pieces of an invented drive of at least ``length_m``: tangent, clothoid, arc,
    clothoid groups on random sides, for ``alignment_curve``.

    Each group draws a radius from ``radii_m``, a side, a tangent length uniform in ``tangent_m``
    and an arc of U(``arc_turn_halfturns``) x pi x R; clothoids are 0.3 R long, clipped to
    20-120 m. Returns the pieces and their total plan length, m.
    """
    pieces: list[tuple[str, float, float]] = []
    total = 0.0
    while total < length_m:
        r = float(rng.choice(list(radii_m)))
        k = (1.0 if rng.random() < 0.5 else -1.0) / r
        tangent = float(rng.uniform(*tangent_m))
        spiral = max(20.0, min(120.0, 0.3 * r))
        arc = float(rng.uniform(*arc_turn_halfturns)) * np.pi * r
        pieces += [("tangent", tangent, 0.0), ("spiral", spiral, k), ("arc", arc, k), ("spiral", spiral, 0.0)]
        total += tangent + 2 * spiral + arc
    return pieces, total


def concat_curves(curves: Sequence[Curve], name: str = "route") -> Curve:
    """Join curves end to end by parameter (each keeps its own coordinates: build them so that
    each starts where the previous ends). Handy to compose scenes for the demo generator."""
    ends = np.concatenate(([0.0], np.cumsum([c.u_end for c in curves])))

    def evaluate(u):
        u = np.clip(np.asarray(u, dtype=float), 0.0, ends[-1])
        idx = np.clip(np.searchsorted(ends, u, side="right") - 1, 0, len(curves) - 1)
        out = [np.empty((len(u), 3)) for _ in range(4)]
        for i, c in enumerate(curves):
            m = idx == i
            if m.any():
                for o, v in zip(out, c.evaluate(u[m] - ends[i])):
                    o[m] = v
        return tuple(out)

    return Curve(evaluate, float(ends[-1]), name)


# --------------------------------------------------------------------------------------------
# Sampling in time
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class Trajectory:
    """True motion sampled at the fix times (local frame: east, north, up; metres, seconds).

    ``curvature_per_m``/``torsion_per_m`` are the exact Frenet values of the 3D path;
    ``torsion_per_m`` is NaN where undefined (straights). ``plan_curvature_per_m`` is signed,
    + = left bend.
    """

    time_s: FloatArray
    enu_m: FloatArray
    velocity_mps: FloatArray
    chainage_m: FloatArray
    curvature_per_m: FloatArray
    torsion_per_m: FloatArray
    plan_curvature_per_m: FloatArray
    name: str = ""
    curve: Curve | None = None
    length_m: float = float("nan")

    def __len__(self) -> int:
        return len(self.time_s)

    def truth_at_chainage(self, chainage_m: FloatArray) -> dict[str, FloatArray]:
        """Exact geometry at arbitrary chainages (needs ``curve``): position, kappa, tau, plan kappa."""
        if self.curve is None:
            raise ValueError("trajectory has no curve attached")
        u_tab, s_tab = self.curve.arc_length_table()
        u = np.interp(chainage_m, s_tab, u_tab)
        r, d1, d2, d3 = self.curve.evaluate(u)
        k, t, pk = frenet_from_derivatives(d1, d2, d3)
        return {"enu_m": r, "curvature_per_m": k, "torsion_per_m": t, "plan_curvature_per_m": pk}


def sample_path(
    curve: Curve,
    speed_mps: float,
    rate_hz: float,
    jitter: float = 0.0,
    stops: Sequence[tuple[float, float]] = (),
    rng: np.random.Generator | None = None,
    t0_s: float = 0.0,
    name: str | None = None,
) -> Trajectory:
    """Move along ``curve`` at constant ``speed_mps`` and sample it at ``rate_hz``.

    Parameters
    ----------
    jitter
        Timing jitter as a fraction of the nominal interval (uniform, 0 = regular sampling);
        samples stay strictly increasing for jitter < 0.5.
    stops
        ``(chainage_m, duration_s)`` pairs: the mover stands still there (speed exactly 0).
    t0_s
        Time of the first fix (e.g. a UNIX epoch time for a demo log).
    """
    rng = rng or np.random.default_rng(0)
    u_tab, s_tab = curve.arc_length_table()
    length = float(s_tab[-1])
    stops = sorted((float(s), float(d)) for s, d in stops)
    # time at which chainage s is reached: s / v + durations of stops before s
    moving_time = length / speed_mps
    total_time = moving_time + sum(d for _, d in stops)
    dt = 1.0 / rate_hz
    t = np.arange(0.0, total_time + 1e-9, dt)
    if jitter:
        t = t + rng.uniform(-jitter, jitter, len(t)) * dt
        t[0] = 0.0
        t = np.clip(t, 0.0, total_time)
        t = np.sort(t)
    # chainage as a function of time (piecewise: move, stop, move, ...)
    knots_t, knots_s = [0.0], [0.0]
    for s_stop, dur in stops:
        knots_t.append(knots_t[-1] + (s_stop - knots_s[-1]) / speed_mps)
        knots_s.append(s_stop)
        knots_t.append(knots_t[-1] + dur)
        knots_s.append(s_stop)
    knots_t.append(knots_t[-1] + (length - knots_s[-1]) / speed_mps)
    knots_s.append(length)
    s = np.interp(t, knots_t, knots_s)
    moving = np.ones(len(t), bool)
    for (s_stop, _), (ta, tb) in zip(stops, zip(knots_t[1::2], knots_t[2::2])):
        moving &= ~((t > ta) & (t < tb))
    u = np.interp(s, s_tab, u_tab)
    r, d1, d2, d3 = curve.evaluate(u)
    k, tau, pk = frenet_from_derivatives(d1, d2, d3)
    dudt = np.where(moving, speed_mps / np.linalg.norm(d1, axis=1), 0.0)
    vel = d1 * dudt[:, None]
    return Trajectory(
        time_s=t + t0_s,
        enu_m=r,
        velocity_mps=vel,
        chainage_m=s,
        curvature_per_m=k,
        torsion_per_m=tau,
        plan_curvature_per_m=pk,
        name=name or curve.name,
        curve=curve,
        length_m=length,
    )


def helix(
    radius_m: float = 50.0,
    rise_per_rad_m: float = 5.0,
    speed_mps: float = 10.0,
    rate_hz: float = 10.0,
    turns: float = 2.0,
    **kw,
) -> Trajectory:
    """A helix flown at constant speed (e.g. a drone orbit climbing around a mast)."""
    return sample_path(helix_curve(radius_m, rise_per_rad_m, turns), speed_mps, rate_hz, name="helix", **kw)


def road_alignment(speed_mps: float = 80 / 3.6, rate_hz: float = 10.0, radius_m: float = 400.0, **kw) -> Trajectory:
    """Tangent - clothoid - left arc - clothoid - tangent - clothoid - right arc - clothoid -
    tangent, on a 4 % climb with a parabolic crest vertical curve into a -3 % descent.

    Clothoid length L = 80 m for R = 400 m gives A = sqrt(R L) ~ 179 m (A^2 = R L).
    """
    L = 80.0
    k = 1.0 / radius_m
    pieces = [
        ("tangent", 200.0, 0.0),
        ("spiral", L, k),
        ("arc", 300.0, k),
        ("spiral", L, 0.0),
        ("tangent", 150.0, 0.0),
        ("spiral", L, -k),
        ("arc", 250.0, -k),
        ("spiral", L, 0.0),
        ("tangent", 200.0, 0.0),
    ]
    total = sum(p[1] for p in pieces)
    grades = [(500.0, 0.04, 0.04), (300.0, 0.04, -0.03), (total - 800.0, -0.03, -0.03)]
    return sample_path(alignment_curve(pieces, grades), speed_mps, rate_hz, name="road", **kw)


def plane_loop(
    semi_major_m: float = 120.0, semi_minor_m: float = 70.0, tilt_deg: float = 6.0, speed_mps: float = 8.0,
    rate_hz: float = 5.0, **kw,
) -> Trajectory:
    """A closed ellipse in a tilted plane: a plane curve, so torsion is exactly zero."""
    curve = tilted_ellipse_curve(semi_major_m, semi_minor_m, np.radians(tilt_deg))
    return sample_path(curve, speed_mps, rate_hz, name="plane loop", **kw)


def switchbacks(
    radius_m: float = 8.0, grade: float = 0.08, speed_mps: float = 1.3, rate_hz: float = 1.0, **kw
) -> Trajectory:
    """Tight trail switchbacks walked at walking pace."""
    return sample_path(switchback_curve(radius_m, grade=grade), speed_mps, rate_hz, name="switchbacks", **kw)


# --------------------------------------------------------------------------------------------
# Receiver error and log corruptions
# --------------------------------------------------------------------------------------------

#: Per-grade error sizes: (white horizontal sigma m, wander horizontal sigma m, wander tau s,
#: vertical factor). Totals ~2 cm (RTK), ~0.3 m (dual-frequency), ~3.4 m (phone); sources in the
#: module docstring.
GNSS_GRADES: dict[str, tuple[float, float, float, float]] = {
    "rtk": (0.012, 0.012, 60.0, 1.7),
    "dual": (0.15, 0.25, 60.0, 1.7),
    "phone": (1.5, 3.0, 60.0, 1.6),
}


@dataclass(frozen=True, eq=False)
class Fixes:
    """What a receiver would log: times, local positions, per-fix horizontal 1-sigma accuracy.

    ``truth_index`` maps every fix back to its sample in the source ``Trajectory``;
    ``outlier`` marks fixes corrupted by ``add_outliers``; ``velocity_mps`` (n, 2), when set by
    ``add_doppler_velocity``, is the horizontal velocity (east, north) the receiver reports.
    """

    time_s: FloatArray
    enu_m: FloatArray
    accuracy_m: FloatArray
    truth_index: NDArray[np.int64]
    outlier: NDArray[np.bool_] = field(default=None)  # type: ignore[assignment]
    velocity_mps: FloatArray | None = None

    def __post_init__(self):
        if self.outlier is None:
            object.__setattr__(self, "outlier", np.zeros(len(self.time_s), bool))

    def __len__(self) -> int:
        return len(self.time_s)

    def take(self, index) -> "Fixes":
        return Fixes(self.time_s[index], self.enu_m[index], self.accuracy_m[index],
                     self.truth_index[index], self.outlier[index],
                     None if self.velocity_mps is None else self.velocity_mps[index])


def exact_fixes(traj: Trajectory, accuracy_m: float = 0.0) -> Fixes:
    """The true positions as fixes (no error)."""
    n = len(traj)
    return Fixes(traj.time_s.copy(), traj.enu_m.copy(), np.full(n, accuracy_m), np.arange(n))


def _gauss_markov(time_s: FloatArray, sigma: float, tau_s: float, rng: np.random.Generator, dim: int) -> FloatArray:
    """First-order Gauss-Markov sequence, stationary std ``sigma``, correlation time ``tau_s``.

    The correlation per step uses the mean sampling interval (adequate for a noise model).
    """
    from scipy.signal import lfilter

    n = len(time_s)
    if n == 0 or sigma == 0.0:
        return np.zeros((n, dim))
    dt = float(np.mean(np.diff(time_s))) if n > 1 else 1.0
    phi = np.exp(-dt / tau_s)
    e = rng.standard_normal((n, dim)) * sigma * np.sqrt(1.0 - phi**2)
    e[0] = rng.standard_normal(dim) * sigma
    return lfilter([1.0], [1.0, -phi], e, axis=0)


def add_gnss_error(
    traj: Trajectory | Fixes,
    grade: str = "dual",
    rng: np.random.Generator | None = None,
    white_m: float | None = None,
    wander_m: float | None = None,
    wander_tau_s: float | None = None,
    vertical_factor: float | None = None,
) -> Fixes:
    """Add receiver error of a grade ("rtk", "dual", "phone"); any size can be overridden.

    Returns ``Fixes`` whose ``accuracy_m`` is the total horizontal per-axis 1-sigma
    sqrt(white^2 + wander^2), as a receiver would report it.
    """
    if grade not in GNSS_GRADES:
        raise ValueError(f"grade must be one of {sorted(GNSS_GRADES)}")
    rng = rng or np.random.default_rng()
    w0, g0, tau0, vf0 = GNSS_GRADES[grade]
    white = w0 if white_m is None else white_m
    wander = g0 if wander_m is None else wander_m
    tau = tau0 if wander_tau_s is None else wander_tau_s
    vf = vf0 if vertical_factor is None else vertical_factor
    base = exact_fixes(traj) if isinstance(traj, Trajectory) else traj
    t = base.time_s
    n = len(t)
    scale = np.array([1.0, 1.0, vf])
    err = rng.standard_normal((n, 3)) * white * scale + _gauss_markov(t, wander, tau, rng, 3) * scale
    acc = np.full(n, float(np.hypot(white, wander)))
    return replace(base, enu_m=base.enu_m + err, accuracy_m=acc)


def add_outliers(fixes: Fixes, frac: float = 0.01, size_m: float = 20.0, rng: np.random.Generator | None = None) -> Fixes:
    """Multipath-like jumps: a fraction ``frac`` of fixes moved by ``size_m`` (x U(0.5, 1.5)) in a
    random direction (vertical part doubled, as multipath hits heights harder: common practice)."""
    rng = rng or np.random.default_rng()
    n = len(fixes)
    k = int(round(frac * n))
    idx = rng.choice(n, size=k, replace=False) if k else np.array([], int)
    d = rng.standard_normal((k, 3))
    d /= np.linalg.norm(d, axis=1, keepdims=True)
    d[:, 2] *= 2.0
    enu = fixes.enu_m.copy()
    enu[idx] += d * (size_m * rng.uniform(0.5, 1.5, k))[:, None]
    mask = fixes.outlier.copy()
    mask[idx] = True
    return replace(fixes, enu_m=enu, outlier=mask)


def add_outage(fixes: Fixes, start_s: float, length_s: float) -> Fixes:
    """Drop every fix with ``start_s <= t - t0 < start_s + length_s`` (t0 = first fix time)."""
    rel = fixes.time_s - fixes.time_s[0]
    keep = ~((rel >= start_s) & (rel < start_s + length_s))
    return fixes.take(keep)


def duplicate_fixes(fixes: Fixes, frac: float = 0.01, rng: np.random.Generator | None = None) -> Fixes:
    """Repeat a fraction of fixes verbatim (same time and position), as some loggers do."""
    rng = rng or np.random.default_rng()
    n = len(fixes)
    k = int(round(frac * n))
    idx = np.sort(np.concatenate((np.arange(n), rng.choice(n, size=k, replace=False))))
    return fixes.take(idx)


#: Receiver velocity (Doppler) 1-sigma per horizontal axis, m/s: phone ~0.15, dual-frequency
#: ~0.05, RTK ~0.02 (from memory; receivers measure velocity from the carrier Doppler, which the
#: slow position wander does not enter).
DOPPLER_SIGMA_MPS: dict[str, float] = {"rtk": 0.02, "dual": 0.05, "phone": 0.15}


def add_doppler_velocity(fixes: Fixes, traj: Trajectory, grade: str = "dual", rng: np.random.Generator | None = None,
                         sigma_mps: float | None = None) -> Fixes:
    """Fixes that also report their horizontal velocity: the true velocity of their trajectory
    sample plus white noise of ``DOPPLER_SIGMA_MPS[grade]`` (or ``sigma_mps``) per axis."""
    rng = rng or np.random.default_rng()
    sigma = DOPPLER_SIGMA_MPS[grade] if sigma_mps is None else sigma_mps
    v = traj.velocity_mps[fixes.truth_index, :2] + rng.standard_normal((len(fixes), 2)) * sigma
    return replace(fixes, velocity_mps=v)


def fixes_to_track(
    fixes: Fixes,
    inverse: Callable[[FloatArray, FloatArray, FloatArray], tuple[FloatArray, FloatArray, FloatArray]],
    path: str = "synthetic",
    with_accuracy: bool = True,
    height_ref: str = "ellipsoid",
    with_time: bool = True,
):
    """Turn fixes into a ``survey.track.Track`` using a frame's ``inverse(e, n, u) -> (lat, lon, h)``."""
    from .track import make_track

    lat, lon, h = inverse(fixes.enu_m[:, 0], fixes.enu_m[:, 1], fixes.enu_m[:, 2])
    t = fixes.time_s if with_time else np.full(len(fixes), np.nan)
    speed = course = None
    if fixes.velocity_mps is not None:  # frame north taken as true north (small synthetic scenes)
        ve, vn = fixes.velocity_mps[:, 0], fixes.velocity_mps[:, 1]
        speed = np.hypot(ve, vn)
        course = np.degrees(np.arctan2(ve, vn)) % 360.0
    return make_track(
        path, "csv", t, lat, lon, h, height_ref=height_ref, reader="synthetic",
        accuracy_m=fixes.accuracy_m if with_accuracy else None, speed_mps=speed, course_deg=course,
    )
