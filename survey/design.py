"""Design-speed check and flagging presets (advisory geometry limits).

Highway curve formula
---------------------
A vehicle at speed V on a curve of radius R needs a lateral acceleration v^2/R; superelevation e
and side friction f together supply g (e + f) (small-angle form). With V in km/h this gives the
published minimum-radius formula

    R_min = V^2 / (127 (e + f))          [m]

(127 = 3.6^2 * 9.81, rounded). Worked example: 100 km/h, e = 0.08, f = 0.12 -> 393.7 m (Ethiopian
Roads Authority, Geometric Design Manual 2002, ch. 8). Turned round, the speed at which a curve of
radius R uses up exactly e + f is

    V_balance = sqrt(127 (e + f) R)      [km/h].

Default e and f
---------------
* ``DEFAULT_SUPERELEVATION`` = 0.08: a common maximum superelevation for rural roads where snow and
  ice are rare (AASHTO "Green Book", from memory); the ERA worked example above also uses 0.08.
* ``SIDE_FRICTION_BY_SPEED``: maximum side-friction factor by design speed, AASHTO Green Book
  metric table (from memory). Rows agree with the published ERA Table 8-2 at 100 km/h (f = 0.12)
  and with the formula rows listed in /work/shared/REFERENCES.md (80 km/h, e = 8 % -> 229 m;
  100 km/h, e = 6 % -> 437 m). ERA Table 8-2 gives f = 0.10 at 120 km/h where the AASHTO table
  gives 0.09; we keep the AASHTO row (the smaller f, i.e. the more cautious radius).

Everything here is advisory: :data:`CAUTION` must accompany any design advice shown to a user.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, fields, replace

import numpy as np

#: Shown wherever design-speed advice appears (CLI output, exports).
CAUTION = (
    "Advisory only: these figures come from a survey log and a textbook formula; "
    "the local design code and a licensed engineer decide."
)

#: 3.6^2 * 9.81 = 127.1, published as 127 (ERA Geometric Design Manual 2002, ch. 8).
KMH_FORMULA_CONSTANT = 127.0

#: Common maximum superelevation, decimal (AASHTO, from memory; ERA 2002 ch. 8 example uses 0.08).
DEFAULT_SUPERELEVATION = 0.08

#: (design speed km/h, maximum side-friction factor): AASHTO Green Book metric table, from memory.
SIDE_FRICTION_BY_SPEED: tuple[tuple[float, float], ...] = (
    (20.0, 0.35),
    (30.0, 0.28),
    (40.0, 0.23),
    (50.0, 0.19),
    (60.0, 0.17),
    (70.0, 0.15),
    (80.0, 0.14),
    (90.0, 0.13),
    (100.0, 0.12),
    (110.0, 0.11),
    (120.0, 0.09),
    (130.0, 0.08),
)


def min_radius_m(speed_kmh, superelevation, friction):
    """Minimum curve radius for a design speed, metres: R = V^2 / (127 (e + f)).

    Parameters
    ----------
    speed_kmh
        Design speed V, km/h (scalar or array).
    superelevation
        Maximum superelevation e, decimal (0.08 for 8 %).
    friction
        Side-friction factor f, decimal.
    """
    v = np.asarray(speed_kmh, dtype=float)
    ef = np.asarray(superelevation, dtype=float) + np.asarray(friction, dtype=float)
    out = v**2 / (KMH_FORMULA_CONSTANT * ef)
    return float(out) if out.ndim == 0 else out


def balance_speed_kmh(radius_m, superelevation, friction):
    """Speed at which a curve's lateral demand equals e + f, km/h: V = sqrt(127 (e + f) R).

    ``radius_m`` may be an array; an infinite radius gives an infinite speed.
    """
    r = np.asarray(radius_m, dtype=float)
    ef = np.asarray(superelevation, dtype=float) + np.asarray(friction, dtype=float)
    out = np.sqrt(KMH_FORMULA_CONSTANT * ef * r)
    return float(out) if out.ndim == 0 else out


def default_friction(speed_kmh: float) -> float:
    """Side-friction factor for a design speed, linear between the rows of
    :data:`SIDE_FRICTION_BY_SPEED` (AASHTO, from memory); outside the table the end rows hold."""
    speeds, frictions = zip(*SIDE_FRICTION_BY_SPEED)
    return float(np.interp(float(speed_kmh), speeds, frictions))


@dataclass(frozen=True)
class Limits:
    """Every threshold the section detector uses, in SI units.

    Attributes
    ----------
    sharp_radius_m
        Flag "sharp" where the 3D radius of curvature is below this (None: no sharp check).
    twist_per_m
        Flag "twisting" where |torsion| is above this, 1/m (None: no twist check).
    design_speed_kmh, superelevation, friction
        Design-speed check (None: off). ``superelevation``/``friction`` None take the defaults
        (:data:`DEFAULT_SUPERELEVATION`, :func:`default_friction`). The design check uses the
        horizontal (plan) curvature, since e and f act in the horizontal plane.
    hysteresis
        Leave a section only when the value is back past the limit by this fraction: for
        curvature the leave level is ``(1 - hysteresis) / limit_radius``, for torsion
        ``(1 - hysteresis) * twist_per_m``.
    min_length_m
        Drop sections shorter than this (after merging).
    merge_gap_m
        Merge sections of the same kind whose gap is at most this.
    confidence_sigma
        A section needs at least one station whose value is beyond the limit by this many
        standard deviations (1.64: one-sided 95 % under a normal approximation).
    """

    sharp_radius_m: float | None = None
    twist_per_m: float | None = None
    design_speed_kmh: float | None = None
    superelevation: float | None = None
    friction: float | None = None
    hysteresis: float = 0.10
    min_length_m: float = 5.0
    merge_gap_m: float = 10.0
    confidence_sigma: float = 1.64

    def __post_init__(self) -> None:
        _check_positive("sharp_radius_m", self.sharp_radius_m)
        _check_positive("twist_per_m", self.twist_per_m)
        _check_positive("design_speed_kmh", self.design_speed_kmh)
        if self.superelevation is not None and not (0.0 <= self.superelevation < 1.0):
            raise ValueError(
                f"superelevation must be a decimal in [0, 1) (0.08 for 8 %), not {self.superelevation}"
            )
        if self.friction is not None and not (0.0 < self.friction < 1.0):
            raise ValueError(f"friction must be a decimal in (0, 1) (e.g. 0.12), not {self.friction}")
        if not (0.0 <= self.hysteresis < 1.0):
            raise ValueError(f"hysteresis must be a fraction in [0, 1), not {self.hysteresis}")
        for name in ("min_length_m", "merge_gap_m", "confidence_sigma"):
            v = getattr(self, name)
            if not (math.isfinite(v) and v >= 0.0):
                raise ValueError(f"{name} must be a finite number >= 0, not {v}")

    @property
    def design_on(self) -> bool:
        return self.design_speed_kmh is not None

    @property
    def design_superelevation(self) -> float:
        """e used by the design check (explicit or default)."""
        return DEFAULT_SUPERELEVATION if self.superelevation is None else float(self.superelevation)

    @property
    def design_friction(self) -> float:
        """f used by the design check (explicit or by speed from the table)."""
        if self.friction is not None:
            return float(self.friction)
        if self.design_speed_kmh is None:
            raise ValueError("no design speed set")
        return default_friction(self.design_speed_kmh)

    @property
    def design_radius_m(self) -> float | None:
        """R_min of the design check, or None when it is off."""
        if self.design_speed_kmh is None:
            return None
        return min_radius_m(self.design_speed_kmh, self.design_superelevation, self.design_friction)

    @property
    def any_check(self) -> bool:
        return any(v is not None for v in (self.sharp_radius_m, self.twist_per_m, self.design_speed_kmh))

    def as_dict(self) -> dict:
        """Thresholds as plain values (for run settings), including the resolved e, f and R_min."""
        d = asdict(self)
        if self.design_on:
            d["superelevation"] = self.design_superelevation
            d["friction"] = self.design_friction
            d["design_min_radius_m"] = self.design_radius_m
        return d

    def updated(self, **changes) -> "Limits":
        """Copy with the given fields replaced; ``None`` values are ignored (keep the current)."""
        known = {f.name for f in fields(Limits)}
        unknown = set(changes) - known
        if unknown:
            raise ValueError(f"unknown limit(s): {', '.join(sorted(unknown))}")
        return replace(self, **{k: v for k, v in changes.items() if v is not None})


def _check_positive(name: str, value: float | None) -> None:
    if value is not None and not (math.isfinite(value) and value > 0.0):
        raise ValueError(f"{name} must be a finite number > 0, not {value}")


@dataclass(frozen=True)
class Preset:
    """A named starting set of limits (names and values are our own starting points)."""

    name: str
    summary: str
    limits: Limits


def _road(speed_kmh: float) -> Limits:
    return Limits(design_speed_kmh=speed_kmh, min_length_m=10.0, merge_gap_m=20.0)


#: Presets. The road presets use the design-speed formula with default e and f (see module doc).
#: The trail and drone values are our own starting points, not taken from any standard: tune them
#: with the direct options.
PRESETS: dict[str, Preset] = {
    p.name: p
    for p in (
        Preset("road-50", "road, design speed 50 km/h (e, f defaults)", _road(50.0)),
        Preset("road-80", "road, design speed 80 km/h (e, f defaults)", _road(80.0)),
        Preset("road-100", "road, design speed 100 km/h (e, f defaults)", _road(100.0)),
        Preset("road-120", "road, design speed 120 km/h (e, f defaults)", _road(120.0)),
        Preset(
            "footpath",
            "walking trail: turns tighter than 3 m radius",
            Limits(sharp_radius_m=3.0, min_length_m=1.0, merge_gap_m=3.0),
        ),
        Preset(
            "ride-trail",
            "bike or horse trail: turns tighter than 6 m radius, corkscrew over 0.05 1/m",
            Limits(sharp_radius_m=6.0, twist_per_m=0.05, min_length_m=2.0, merge_gap_m=5.0),
        ),
        Preset(
            "drone-orbit",
            "drone orbit: radius under 15 m, twist over 0.02 1/m",
            Limits(sharp_radius_m=15.0, twist_per_m=0.02, min_length_m=5.0, merge_gap_m=10.0),
        ),
    )
}


def preset_limits(name: str) -> Limits:
    """Limits of a preset by name; ``KeyError`` lists the known names."""
    try:
        return PRESETS[name].limits
    except KeyError:
        raise KeyError(f"unknown preset {name!r} (choose from {', '.join(PRESETS)})") from None
