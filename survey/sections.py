"""Sections: stretches of a Profile flagged as sharp, twisting, below design radius, or hand-marked.

Detection (one kind at a time, all vectorised over stations)
------------------------------------------------------------
For a per-station value x (curvature, |torsion| or |plan curvature|), its 1-sigma uncertainty
sd, an *enter* level L and a *leave* level L_out = (1 - hysteresis) L:

1. *hold* stations have x >= L_out (finite x only); runs of hold stations within one segment
   are candidate sections (hysteresis: a section ends only when x falls back below L_out, so
   noise around L does not chop a curve into slivers).
2. A candidate is kept only when at least one station *enters* with confidence:
   x > L and (x - L) / sd >= ``confidence_sigma``. A stretch above L only by noise (small z) is
   not flagged. Where sd is not finite the point estimate alone decides and the confidence is
   reported as NaN (unknown).
3. Kept sections of the same kind and segment closer than ``merge_gap_m`` (chainage from the
   last station of one to the first of the next) are merged.
4. Sections shorter than ``min_length_m`` (chainage of last minus first station) are dropped.

Confidence of a section = Phi(max z) over its stations: the probability, under a normal
approximation of the estimate, that the true value is beyond the limit at the station where the
evidence is strongest. It is a lower bound on the probability that the section truly contains a
point beyond the limit.

Levels per kind: sharp uses kappa against 1/``sharp_radius_m`` with ``curvature_sd_per_m``;
twisting uses |tau| against ``twist_per_m`` with ``torsion_sd_per_m``; design uses |plan
curvature| against 1/R_min (see ``survey.design``) with ``curvature_sd_per_m`` as its uncertainty
(the Profile has no separate plan-curvature sd; for road grades the two differ little).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, fields
from typing import Iterable, Sequence

import numpy as np
from scipy.special import ndtr

from .design import CAUTION, Limits, balance_speed_kmh
from .stations import Profile

KIND_SHARP = "sharp"
KIND_TWISTING = "twisting"
KIND_DESIGN = "design"
KIND_MARKED = "marked"
KINDS = (KIND_SHARP, KIND_TWISTING, KIND_DESIGN, KIND_MARKED)
_ID_PREFIX = {KIND_SHARP: "S", KIND_TWISTING: "T", KIND_DESIGN: "D", KIND_MARKED: "M"}


@dataclass(frozen=True)
class Section:
    """One flagged or hand-marked stretch. NaN means "not defined / not available".

    Attributes
    ----------
    id
        ``S<n>``, ``T<n>``, ``D<n>`` (numbered along the chainage per kind) or ``M<mark id>``.
    kind
        One of ``KINDS``.
    start_chainage_m, end_chainage_m, length_m
        Chainage of the first and last station (marked: the ends the user set), metres.
    start_lat_deg, start_lon_deg, end_lat_deg, end_lon_deg
        WGS 84 position of the ends, degrees.
    min_radius_m, min_radius_at_m
        Smallest 3D radius of curvature in the section and its chainage (inf on a straight).
    max_abs_torsion_per_m, max_abs_torsion_at_m
        Largest |torsion| where torsion is defined, 1/m, and its chainage.
    max_lateral_accel_mps2
        Largest speed^2 * curvature at the recorded speed, m/s^2 (NaN without time).
    mean_grade_pct, max_grade_pct
        Mean grade, and the grade of largest magnitude (sign kept: + uphill), percent.
    start_time_s, end_time_s
        Seconds since 1970-01-01T00:00:00 UTC at the ends (NaN without time).
    confidence
        Probability in [0, 1] that the flag is real (see module doc); NaN for marked sections.
    note
        The user's note (marked) or what tripped the flag (automatic).
    limit
        The threshold that was applied: radius in m (sharp, design) or 1/m (twisting); NaN for
        marked.
    balance_speed_kmh
        Design sections: speed at which the tightest plan radius uses up e + f, km/h.
    segment
        Segment number of the first station.
    """

    id: str
    kind: str
    start_chainage_m: float
    end_chainage_m: float
    length_m: float
    start_lat_deg: float
    start_lon_deg: float
    end_lat_deg: float
    end_lon_deg: float
    min_radius_m: float
    min_radius_at_m: float
    max_abs_torsion_per_m: float
    max_abs_torsion_at_m: float
    max_lateral_accel_mps2: float
    mean_grade_pct: float
    max_grade_pct: float
    start_time_s: float
    end_time_s: float
    confidence: float
    note: str
    limit: float = math.nan
    balance_speed_kmh: float = math.nan
    segment: int = 0

    def as_dict(self) -> dict:
        return asdict(self)

    @property
    def caution(self) -> str:
        """The design caution for design sections, else an empty string."""
        return CAUTION if self.kind == KIND_DESIGN else ""


#: Exported section columns in order: (field, unit/description).
SECTION_COLUMNS: tuple[tuple[str, str], ...] = (
    ("id", "section id"),
    ("kind", "sharp / twisting / design / marked"),
    ("start_chainage_m", "m"),
    ("end_chainage_m", "m"),
    ("length_m", "m"),
    ("start_lat_deg", "deg WGS 84"),
    ("start_lon_deg", "deg WGS 84"),
    ("end_lat_deg", "deg WGS 84"),
    ("end_lon_deg", "deg WGS 84"),
    ("min_radius_m", "m, empty on a straight"),
    ("min_radius_at_m", "chainage m"),
    ("max_abs_torsion_per_m", "1/m, empty where undefined"),
    ("max_abs_torsion_at_m", "chainage m"),
    ("max_lateral_accel_mps2", "m/s^2 at the recorded speed"),
    ("mean_grade_pct", "%"),
    ("max_grade_pct", "%, largest magnitude, + = uphill"),
    ("start_time_s", "s since 1970-01-01T00:00:00Z"),
    ("end_time_s", "s since 1970-01-01T00:00:00Z"),
    ("confidence", "probability 0-1 that the flag is real"),
    ("note", "text"),
    ("limit", "threshold: m (sharp, design) or 1/m (twisting)"),
    ("balance_speed_kmh", "km/h at which lateral demand equals e + f (design)"),
    ("segment", "segment number"),
)
assert tuple(c for c, _ in SECTION_COLUMNS) == tuple(f.name for f in fields(Section))


# ----------------------------------------------------------------------------------------------
# Run finding (pure numpy)


def hysteresis_runs(
    value: np.ndarray,
    sd: np.ndarray,
    enter: float,
    leave: float,
    confidence_sigma: float,
    segment: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Runs of stations flagged with hysteresis and a confidence test (steps 1-2 of module doc).

    Parameters
    ----------
    value
        Per-station value compared upward against the levels (e.g. curvature, 1/m).
    sd
        1-sigma uncertainty of ``value``, same unit; NaN where unknown.
    enter, leave
        Levels, ``leave <= enter``.
    confidence_sigma
        Required margin (value - enter) / sd at one station at least.
    segment
        Optional per-station segment numbers; runs never cross a change.

    Returns
    -------
    starts, ends, z_max
        Inclusive station indices of each kept run, and the largest z = (value - enter) / sd in
        it (NaN when no station has a finite sd; +inf where sd == 0 and value > enter).
    """
    x = np.asarray(value, dtype=float)
    s = np.asarray(sd, dtype=float)
    n = len(x)
    empty = np.zeros(0, dtype=np.intp)
    if n == 0:
        return empty, empty, np.zeros(0)
    finite = np.isfinite(x)
    hold = finite & (x >= leave)
    with np.errstate(divide="ignore", invalid="ignore"):
        z = (x - enter) / s
    z = np.where(s == 0.0, np.where(x > enter, np.inf, -np.inf), z)
    sd_known = np.isfinite(s) & (s >= 0.0)
    strong = hold & (x > enter) & (~sd_known | (z >= confidence_sigma))

    cont = np.zeros(n, dtype=bool)  # station i continues the run of station i-1
    cont[1:] = hold[1:] & hold[:-1]
    if segment is not None:
        seg = np.asarray(segment)
        cont[1:] &= seg[1:] == seg[:-1]
    starts = np.flatnonzero(hold & ~cont)
    nxt = np.zeros(n, dtype=bool)
    nxt[:-1] = cont[1:]
    ends = np.flatnonzero(hold & ~nxt)

    if len(starts) == 0:
        return empty, empty, np.zeros(0)
    cs = np.concatenate(([0], np.cumsum(strong)))
    keep = (cs[ends + 1] - cs[starts]) > 0
    zk = np.where(hold & sd_known, z, -np.inf)
    # reduceat over [start_k, start_{k+1}) also covers the stations between two runs: those are
    # not in hold (zk = -inf) so they never raise the maximum.
    z_max = np.maximum.reduceat(zk, starts)
    z_max = np.where(np.isneginf(z_max), np.nan, z_max)
    return starts[keep], ends[keep], z_max[keep]


def merge_and_filter(
    chainage_m: np.ndarray,
    starts: np.ndarray,
    ends: np.ndarray,
    z_max: np.ndarray,
    merge_gap_m: float,
    min_length_m: float,
    segment: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Merge runs closer than ``merge_gap_m`` (same segment), then drop runs shorter than
    ``min_length_m``. Chainage in metres; indices inclusive. Returns (starts, ends, z_max)."""
    c = np.asarray(chainage_m, dtype=float)
    if len(starts) == 0:
        return starts, ends, z_max
    gap = c[starts[1:]] - c[ends[:-1]]
    join = gap <= merge_gap_m
    if segment is not None:
        seg = np.asarray(segment)
        join &= seg[starts[1:]] == seg[ends[:-1]]
    first = np.concatenate(([True], ~join))
    last = np.concatenate((~join, [True]))
    group_starts = np.flatnonzero(first)
    z_filled = np.where(np.isnan(z_max), -np.inf, z_max)
    zg = np.maximum.reduceat(z_filled, group_starts)
    zg = np.where(np.isneginf(zg), np.nan, zg)
    s2, e2 = starts[first], ends[last]
    keep = (c[e2] - c[s2]) >= min_length_m
    return s2[keep], e2[keep], zg[keep]


# ----------------------------------------------------------------------------------------------
# Section description


def value_at(chainage_m: np.ndarray, values: np.ndarray, where_m: float) -> float:
    """``values`` linearly interpolated at chainage ``where_m`` between the two neighbouring
    stations (NaN outside the stations or when a neighbour is NaN). O(log n): no full-array work,
    so it is cheap to call once per section end."""
    c = chainage_m
    n = len(c)
    if n == 0 or not math.isfinite(where_m) or where_m < c[0] or where_m > c[-1]:
        return math.nan
    j = int(np.searchsorted(c, where_m, side="left"))
    if j < n and c[j] == where_m:
        return float(values[j])
    c0, c1 = float(c[j - 1]), float(c[j])
    v0, v1 = float(values[j - 1]), float(values[j])
    w = (where_m - c0) / (c1 - c0)
    return v0 + w * (v1 - v0)


def _nan_extreme(values: np.ndarray, chain: np.ndarray, largest: bool) -> tuple[float, float]:
    """(value, chainage) of the min (or max) of the finite-or-inf values; (nan, nan) if none."""
    ok = ~np.isnan(values)
    if not ok.any():
        return math.nan, math.nan
    idx = np.flatnonzero(ok)
    sub = values[idx]
    k = int(np.argmax(sub) if largest else np.argmin(sub))
    return float(sub[k]), float(chain[idx[k]])


def describe(
    profile: Profile,
    i0: int,
    i1: int,
    kind: str,
    section_id: str,
    confidence: float = math.nan,
    note: str = "",
    limit: float = math.nan,
    balance_kmh: float = math.nan,
    start_chainage_m: float | None = None,
    end_chainage_m: float | None = None,
) -> Section:
    """Summarise stations ``i0..i1`` (inclusive) of ``profile`` as a Section.

    ``start_chainage_m``/``end_chainage_m`` override the ends (marked sections keep the user's
    ends; positions there are interpolated along the chainage). ``i1 < i0`` (no station inside)
    gives NaN statistics.
    """
    c = profile.chainage_m
    sl = slice(i0, i1 + 1) if i1 >= i0 else slice(0, 0)
    ch = c[sl]
    c0 = float(c[i0]) if start_chainage_m is None else float(start_chainage_m)
    c1 = float(c[i1]) if end_chainage_m is None else float(end_chainage_m)

    def at(arr: np.ndarray, i: int, where: float | None) -> float:
        return float(arr[i]) if where is None else value_at(c, arr, where)

    radius = profile.radius_m[sl].astype(float)
    r_min, r_at = _nan_extreme(radius, ch, largest=False)
    tau = np.abs(profile.torsion_per_m[sl].astype(float))
    t_max, t_at = _nan_extreme(tau, ch, largest=True)
    lat_acc = profile.lateral_accel_mps2[sl].astype(float)
    acc = float(np.nanmax(lat_acc)) if np.isfinite(lat_acc).any() else math.nan
    grade = profile.grade_pct[sl].astype(float)
    g_ok = np.isfinite(grade)
    if g_ok.any():
        g_mean = float(np.mean(grade[g_ok]))
        g_max = float(grade[g_ok][np.argmax(np.abs(grade[g_ok]))])
    else:
        g_mean = g_max = math.nan
    seg = int(profile.segment[i0]) if len(profile.segment) and 0 <= i0 < len(profile) else 0
    return Section(
        id=section_id,
        kind=kind,
        start_chainage_m=c0,
        end_chainage_m=c1,
        length_m=c1 - c0,
        start_lat_deg=at(profile.lat_deg, i0, start_chainage_m),
        start_lon_deg=at(profile.lon_deg, i0, start_chainage_m),
        end_lat_deg=at(profile.lat_deg, i1, end_chainage_m),
        end_lon_deg=at(profile.lon_deg, i1, end_chainage_m),
        min_radius_m=r_min,
        min_radius_at_m=r_at,
        max_abs_torsion_per_m=t_max,
        max_abs_torsion_at_m=t_at,
        max_lateral_accel_mps2=acc,
        mean_grade_pct=g_mean,
        max_grade_pct=g_max,
        start_time_s=at(profile.time_s, i0, start_chainage_m),
        end_time_s=at(profile.time_s, i1, end_chainage_m),
        confidence=float(confidence),
        note=note,
        limit=float(limit),
        balance_speed_kmh=float(balance_kmh),
        segment=seg,
    )


# ----------------------------------------------------------------------------------------------
# Public entry points


def _confidence(z_max: float) -> float:
    return math.nan if math.isnan(z_max) else float(ndtr(z_max))  # standard normal CDF


def detect_kind(profile: Profile, kind: str, limits: Limits) -> list[Section]:
    """Automatic sections of one kind (``sharp``, ``twisting`` or ``design``) in ``profile``.

    Returns an empty list when ``limits`` does not switch that check on.
    """
    h = limits.hysteresis
    balance = None
    if kind == KIND_SHARP:
        if limits.sharp_radius_m is None:
            return []
        value = profile.curvature_per_m
        sd = profile.curvature_sd_per_m
        enter = 1.0 / limits.sharp_radius_m
        limit = limits.sharp_radius_m
    elif kind == KIND_TWISTING:
        if limits.twist_per_m is None:
            return []
        value = np.abs(profile.torsion_per_m)
        sd = profile.torsion_sd_per_m
        enter = limits.twist_per_m
        limit = limits.twist_per_m
    elif kind == KIND_DESIGN:
        if limits.design_speed_kmh is None:
            return []
        value = np.abs(profile.plan_curvature_per_m)
        sd = profile.curvature_sd_per_m
        limit = limits.design_radius_m
        enter = 1.0 / limit
        e, f = limits.design_superelevation, limits.design_friction
        balance = (e, f)
    else:
        raise ValueError(f"unknown automatic section kind {kind!r}")
    leave = (1.0 - h) * enter
    starts, ends, z = hysteresis_runs(value, sd, enter, leave, limits.confidence_sigma, profile.segment)
    starts, ends, z = merge_and_filter(
        profile.chainage_m, starts, ends, z, limits.merge_gap_m, limits.min_length_m, profile.segment
    )
    out: list[Section] = []
    for k, (i0, i1, zk) in enumerate(zip(starts.tolist(), ends.tolist(), z.tolist()), start=1):
        sid = f"{_ID_PREFIX[kind]}{k}"
        if kind == KIND_SHARP:
            r = float(np.nanmin(profile.radius_m[i0 : i1 + 1]))
            note = f"radius down to {r:.1f} m, limit {limit:g} m"
            sec = describe(profile, i0, i1, kind, sid, _confidence(zk), note, limit)
        elif kind == KIND_TWISTING:
            t = float(np.nanmax(np.abs(profile.torsion_per_m[i0 : i1 + 1])))
            note = f"|torsion| up to {t:.4g} 1/m, limit {limit:g} 1/m"
            sec = describe(profile, i0, i1, kind, sid, _confidence(zk), note, limit)
        else:
            assert balance is not None
            kp = float(np.nanmax(np.abs(profile.plan_curvature_per_m[i0 : i1 + 1])))
            r_plan = 1.0 / kp if kp > 0 else math.inf
            vb = balance_speed_kmh(r_plan, *balance)
            note = (
                f"plan radius down to {r_plan:.1f} m, under {limit:.1f} m for "
                f"{limits.design_speed_kmh:g} km/h (e {balance[0]:g}, f {balance[1]:g}); "
                f"e + f used up at {vb:.0f} km/h. {CAUTION}"
            )
            sec = describe(profile, i0, i1, kind, sid, _confidence(zk), note, limit, vb)
        out.append(sec)
    return out


def detect_sections(profile: Profile, limits: Limits) -> list[Section]:
    """All automatic sections (sharp, twisting, design) of ``profile``, sorted along the chainage."""
    out: list[Section] = []
    for kind in (KIND_SHARP, KIND_TWISTING, KIND_DESIGN):
        out.extend(detect_kind(profile, kind, limits))
    return sort_sections(out)


def marked_sections(profile: Profile, marks: Iterable) -> list[Section]:
    """Sections for hand marks (objects with ``id``, ``start_m``, ``end_m``, ``note``).

    The section keeps the user's ends; statistics cover the stations between them (NaN when the
    mark holds no station, e.g. it lies outside the profile).
    """
    c = profile.chainage_m
    out = []
    for m in marks:
        i0 = int(np.searchsorted(c, m.start_m, side="left"))
        i1 = int(np.searchsorted(c, m.end_m, side="right")) - 1
        i0c = min(i0, len(c) - 1) if len(c) else 0
        out.append(
            describe(
                profile,
                i0c,
                i1,
                KIND_MARKED,
                f"{_ID_PREFIX[KIND_MARKED]}{m.id}",
                note=m.note,
                start_chainage_m=m.start_m,
                end_chainage_m=m.end_m,
            )
        )
    return out


def marks_outside(profile: Profile, marks: Iterable) -> list:
    """Marks that reach outside the profile's chainage range (worth a warning)."""
    c = profile.chainage_m
    if len(c) == 0:
        return list(marks)
    lo, hi = float(np.nanmin(c)), float(np.nanmax(c))
    return [m for m in marks if m.start_m < lo or m.end_m > hi]


def sort_sections(sections: Sequence[Section]) -> list[Section]:
    """Sort along the chainage (ties: by kind order, then id)."""
    order = {k: i for i, k in enumerate(KINDS)}
    return sorted(sections, key=lambda s: (s.start_chainage_m, order.get(s.kind, 9), s.id))


def all_sections(profile: Profile, limits: Limits, marks: Iterable = ()) -> list[Section]:
    """Automatic sections plus hand-marked ones, sorted along the chainage."""
    return sort_sections(detect_sections(profile, limits) + marked_sections(profile, marks))
