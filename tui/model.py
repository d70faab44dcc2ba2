"""What the view shows, without any drawing: cursor, chainage window, sections, marks, limits.

``ViewModel`` is plain Python + numpy so the keyboard behaviour can be tested without a
terminal. Stations are addressed by index (``0 .. n-1``); the chainage window is the stations
``i0 .. i0 + span - 1``. Everything that depends on the track length is computed once here
(envelope pyramids, coverage counts), so what a key press costs does not grow with it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from survey.design import Limits
from survey.sections import (
    KIND_DESIGN,
    KIND_MARKED,
    KIND_SHARP,
    KIND_TWISTING,
    Section,
    detect_sections,
    marked_sections,
    sort_sections,
)
from survey.stations import TORSION_REASONS, Profile

from .envelope import Pyramid, PrefixCount

#: Kinds of automatic flag (what "next/previous flagged section" walks through).
AUTO_KINDS = (KIND_SHARP, KIND_TWISTING, KIND_DESIGN)
#: One-letter tags of section kinds, used wherever colour might otherwise carry the kind.
KIND_LETTER = {KIND_SHARP: "S", KIND_TWISTING: "T", KIND_DESIGN: "D", KIND_MARKED: "M"}
#: Priority when several kinds cover one column (first wins).
KIND_PRIORITY = (KIND_MARKED, KIND_DESIGN, KIND_SHARP, KIND_TWISTING)
#: Smallest chainage window, stations.
MIN_SPAN = 8


@dataclass(frozen=True)
class Channel:
    """Envelope pyramids of one charted quantity: value min/max and band (value -/+ 1 sigma)."""

    vmin: Pyramid
    vmax: Pyramid
    bmin: Pyramid | None = None
    bmax: Pyramid | None = None
    defined: PrefixCount | None = None  # stations where the value is defined

    @property
    def nbytes(self) -> int:
        parts = [self.vmin, self.vmax, self.bmin, self.bmax, self.defined]
        return int(sum(p.nbytes for p in parts if p is not None))


def _band_channel(value: np.ndarray, sd: np.ndarray, with_defined: bool = False) -> Channel:
    """Value pyramids plus band pyramids built from value -/+ sd without keeping those arrays."""
    n = len(value)
    lo_fn = lambda idx: value[idx] - sd[idx]  # noqa: E731
    hi_fn = lambda idx: value[idx] + sd[idx]  # noqa: E731
    with np.errstate(invalid="ignore"):
        bmin = Pyramid(lo_fn, "min", n=n, full=(value - sd).astype(np.float32))
        bmax = Pyramid(hi_fn, "max", n=n, full=(value + sd).astype(np.float32))
    return Channel(
        Pyramid(value, "min"),
        Pyramid(value, "max"),
        bmin,
        bmax,
        PrefixCount(np.isfinite(value)) if with_defined else None,
    )


class ViewModel:
    """State of one open log in the viewer.

    Parameters
    ----------
    profile
        The stations to show.
    limits
        Active flagging limits.
    marks
        A ``survey.marks.MarkStore`` (or ``None``: marking is then unavailable).
    log_name, frame_text
        For the header line.
    """

    def __init__(
        self,
        profile: Profile,
        limits: Limits,
        marks=None,
        log_name: str = "",
        frame_text: str = "",
        auto_sections: Sequence[Section] | None = None,
    ):
        if len(profile) < 2:
            raise ValueError("a profile needs at least two stations to view")
        self.profile = profile
        self.n = len(profile)
        self.store = marks
        self.log_name = log_name
        self.frame_text = frame_text or profile.frame
        p = profile
        self.kappa = _band_channel(p.curvature_per_m, p.curvature_sd_per_m)
        self.tau = _band_channel(p.torsion_per_m, p.torsion_sd_per_m, with_defined=True)
        self.height = Channel(Pyramid(p.height_m, "min"), Pyramid(p.height_m, "max"), defined=PrefixCount(np.isfinite(p.height_m)))
        self.grade = Channel(Pyramid(p.grade_pct, "min"), Pyramid(p.grade_pct, "max"))
        self.east = Channel(Pyramid(p.east_m, "min"), Pyramid(p.east_m, "max"))
        self.north = Channel(Pyramid(p.north_m, "min"), Pyramid(p.north_m, "max"))
        self.cursor = 0
        self.i0 = 0
        self.span = self.n
        self.pending_mark_m: float | None = None
        self.sections_version = 0
        self.limits = limits
        self._auto: list[Section] = list(auto_sections) if auto_sections is not None else detect_sections(p, limits)
        self._rebuild_sections()

    # -- sizes ---------------------------------------------------------------------------------

    def nbytes(self) -> int:
        """Memory the model adds on top of the profile arrays, bytes."""
        chans = (self.kappa, self.tau, self.height, self.grade, self.east, self.north)
        cover = sum(c.nbytes for c in self.coverage.values())
        return int(sum(c.nbytes for c in chans) + cover)

    # -- chainage helpers ----------------------------------------------------------------------

    def chainage(self, index: int | None = None) -> float:
        return float(self.profile.chainage_m[self.cursor if index is None else index])

    def index_at(self, chainage_m: float) -> int:
        """Station nearest to a chainage (m), clamped to the profile."""
        c = self.profile.chainage_m
        k = int(np.searchsorted(c, chainage_m))
        if k <= 0:
            return 0
        if k >= self.n:
            return self.n - 1
        return k if abs(c[k] - chainage_m) < abs(chainage_m - c[k - 1]) else k - 1

    # -- cursor and window ---------------------------------------------------------------------

    def _follow(self) -> None:
        """Keep the cursor inside the window, paging by most of a window when it leaves."""
        margin = self.span // 8
        if self.cursor < self.i0:
            self.i0 = self.cursor - self.span + 1 + margin
        elif self.cursor >= self.i0 + self.span:
            self.i0 = self.cursor - margin
        self.i0 = int(min(max(self.i0, 0), self.n - self.span))

    def goto(self, index: int) -> None:
        """Put the cursor on a station (clamped)."""
        self.cursor = int(min(max(index, 0), self.n - 1))
        self._follow()

    def goto_centred(self, index: int) -> None:
        """Put the cursor on a station and centre the window on it if it was off screen."""
        index = int(min(max(index, 0), self.n - 1))
        if not (self.i0 <= index < self.i0 + self.span):
            self.i0 = int(min(max(index - self.span // 2, 0), self.n - self.span))
        self.cursor = index

    def step(self, stations: int) -> None:
        self.goto(self.cursor + stations)

    def page(self, direction: int) -> None:
        """Move by one window width (the window moves with the cursor)."""
        d = direction * self.span
        self.i0 = int(min(max(self.i0 + d, 0), self.n - self.span))
        self.goto(self.cursor + d)

    def home(self) -> None:
        self.goto(0)

    def end(self) -> None:
        self.goto(self.n - 1)

    def zoom(self, factor: float) -> None:
        """Scale the window span by ``factor`` (< 1 zooms in) keeping the cursor's place on screen."""
        new_span = int(round(self.span * factor))
        new_span = int(min(max(new_span, min(MIN_SPAN, self.n)), self.n))
        if new_span == self.span:
            return
        frac = (self.cursor - self.i0) / self.span
        self.span = new_span
        self.i0 = int(min(max(round(self.cursor - frac * new_span), 0), self.n - new_span))
        self._follow()

    @property
    def window_chainage(self) -> tuple[float, float]:
        c = self.profile.chainage_m
        return float(c[self.i0]), float(c[self.i0 + self.span - 1])

    # -- sections ------------------------------------------------------------------------------

    @property
    def sections(self) -> list[Section]:
        return self._sections

    @property
    def auto_sections(self) -> list[Section]:
        return self._auto

    def set_limits(self, limits: Limits, auto_sections: Sequence[Section] | None = None) -> None:
        """Apply new limits: automatic sections are recomputed (or taken as given)."""
        self.limits = limits
        self._auto = list(auto_sections) if auto_sections is not None else detect_sections(self.profile, limits)
        self._rebuild_sections()

    def _marks(self) -> tuple:
        return self.store.marks if self.store is not None else ()

    def _rebuild_sections(self) -> None:
        self._marked = marked_sections(self.profile, self._marks())
        self._sections = sort_sections(self._auto + self._marked)
        c = self.profile.chainage_m
        self._auto_starts = np.array([s.start_chainage_m for s in self._auto], dtype=float)
        order = np.argsort(self._auto_starts, kind="stable")
        self._auto_sorted = [self._auto[k] for k in order]
        self._auto_starts = self._auto_starts[order]
        self._by_kind = []
        for kind in AUTO_KINDS:
            secs = sorted((s for s in self._auto if s.kind == kind), key=lambda s: s.start_chainage_m)
            if secs:
                starts = np.array([s.start_chainage_m for s in secs])
                ends = np.array([s.end_chainage_m for s in secs])
                self._by_kind.append((starts, ends, secs))
        self.coverage: dict[str, PrefixCount] = {}
        for kind in (*AUTO_KINDS, KIND_MARKED):
            secs = [s for s in self._sections if s.kind == kind]
            if not secs:
                continue
            a = np.searchsorted(c, [s.start_chainage_m for s in secs], side="left")
            b = np.searchsorted(c, [s.end_chainage_m for s in secs], side="right")
            depth = np.zeros(self.n + 1, dtype=np.int32)
            np.add.at(depth, np.minimum(a, self.n), 1)
            np.add.at(depth, np.minimum(b, self.n), -1)
            self.coverage[kind] = PrefixCount(np.cumsum(depth[:-1]) > 0)
        self.sections_version += 1

    def section_index(self, section: Section) -> int:
        """Station where a section starts."""
        return self.index_at(section.start_chainage_m)

    def next_section(self) -> Section | None:
        """Move to the start of the next automatic section after the cursor; None if none."""
        here = self.chainage()
        tol = 0.5 * self.profile.step_m
        k = int(np.searchsorted(self._auto_starts, here + tol, side="right"))
        if k >= len(self._auto_sorted):
            return None
        sec = self._auto_sorted[k]
        self.goto_centred(self.section_index(sec))
        return sec

    def previous_section(self) -> Section | None:
        """Move to the start of the previous automatic section before the cursor; None if none."""
        here = self.chainage()
        tol = 0.5 * self.profile.step_m
        k = int(np.searchsorted(self._auto_starts, here - tol, side="left")) - 1
        if k < 0:
            return None
        sec = self._auto_sorted[k]
        self.goto_centred(self.section_index(sec))
        return sec

    def jump_to(self, section: Section) -> None:
        self.goto_centred(self.section_index(section))

    def sections_at_cursor(self) -> list[Section]:
        """Sections holding the cursor station. Automatic sections of one kind never overlap, so
        a binary search per kind finds them (cost independent of the number of sections); hand
        marks may overlap and are few, so they are scanned."""
        here = self.chainage()
        tol = 0.5 * self.profile.step_m
        out = []
        for starts, ends, secs in self._by_kind:
            k = int(np.searchsorted(starts, here + tol, side="right")) - 1
            if k >= 0 and ends[k] >= here - tol:
                out.append(secs[k])
        out += [s for s in self._marked if s.start_chainage_m - tol <= here <= s.end_chainage_m + tol]
        return sort_sections(out)

    # -- marks ---------------------------------------------------------------------------------

    def mark_here(self) -> tuple[str, object | None]:
        """Open a mark at the cursor, or close the open one there and save it.

        Returns ``("opened", None)`` or ``("saved", Mark)``. Saving writes the sidecar before
        returning (``MarkStore.add``); an ``InputError`` from the save leaves the mark open.
        """
        if self.store is None:
            raise RuntimeError("marks are not available for this log")
        here = self.chainage()
        if self.pending_mark_m is None:
            self.pending_mark_m = here
            return "opened", None
        a, b = sorted((self.pending_mark_m, here))
        mark = self.store.add(a, b, "")
        self.pending_mark_m = None
        self._rebuild_sections()
        return "saved", mark

    def cancel_mark(self) -> bool:
        was = self.pending_mark_m is not None
        self.pending_mark_m = None
        return was

    def mark_at_cursor(self):
        """The hand mark under the cursor (the shortest when several overlap), or None."""
        if self.store is None:
            return None
        here = self.chainage()
        tol = 0.5 * self.profile.step_m
        hits = [m for m in self.store.marks if m.start_m - tol <= here <= m.end_m + tol]
        return min(hits, key=lambda m: (m.end_m - m.start_m, -m.id)) if hits else None

    def set_note(self, mark_id: int, note: str):
        mark = self.store.edit(mark_id, note=note)
        self._rebuild_sections()
        return mark

    def delete_mark(self, mark_id: int):
        mark = self.store.delete(mark_id)
        self._rebuild_sections()
        return mark

    # -- readout -------------------------------------------------------------------------------

    def readout(self, index: int | None = None) -> dict:
        """Values at a station (default: the cursor), SI units, NaN where not defined."""
        i = self.cursor if index is None else index
        p = self.profile
        reason = TORSION_REASONS.get(int(p.torsion_reason[i]), "") if not np.isfinite(p.torsion_per_m[i]) else ""
        return {
            "index": i,
            "chainage_m": float(p.chainage_m[i]),
            "lat_deg": float(p.lat_deg[i]),
            "lon_deg": float(p.lon_deg[i]),
            "height_m": float(p.height_m[i]),
            "grade_pct": float(p.grade_pct[i]),
            "speed_mps": float(p.speed_mps[i]),
            "radius_m": float(p.radius_m[i]),
            "plan_radius_m": float(p.plan_radius_m[i]),
            "curvature_per_m": float(p.curvature_per_m[i]),
            "curvature_sd_per_m": float(p.curvature_sd_per_m[i]),
            "torsion_per_m": float(p.torsion_per_m[i]),
            "torsion_sd_per_m": float(p.torsion_sd_per_m[i]),
            "torsion_note": reason,
            "torsion_reason": int(p.torsion_reason[i]),
            "lateral_accel_mps2": float(p.lateral_accel_mps2[i]),
            "time_s": float(p.time_s[i]),
            "segment": int(p.segment[i]),
            # IMU-fused logs only (None otherwise)
            "bank_deg": None if p.bank_deg is None else float(p.bank_deg[i]),
            "bank_sd_deg": None if p.bank_sd_deg is None else float(p.bank_sd_deg[i]),
            "twist_deg_per_m": None if p.twist_deg_per_m is None else float(p.twist_deg_per_m[i]),
            "imu_outage": None if p.imu_outage is None else bool(p.imu_outage[i]),
        }

    # -- header facts --------------------------------------------------------------------------

    def length_m(self) -> float:
        c = self.profile.chainage_m
        return float(c[-1] - c[0])

    def duration_s(self) -> float:
        t = self.profile.time_s
        ok = np.isfinite(t)
        return float(t[ok][-1] - t[ok][0]) if ok.any() else math.nan

