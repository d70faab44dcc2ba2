"""Textual widgets of the main screen: strip charts, plan view, readout, section list.

The chart and plan widgets use Textual's line API: their picture without the cursor is built
once per (size, window, sections, mode) and cached as one ``Strip`` per row; a cursor step only
re-composes the cursor column of each row (and the one-row flag lane), so its cost does not grow
with the track length or even with the window.
"""

from __future__ import annotations

import math

import numpy as np
from rich.segment import Segment
from rich.style import Style
from rich.text import Text
from textual import events
from textual.geometry import Region
from textual.strip import Strip
from textual.widget import Widget
from textual.widgets import OptionList
from textual.widgets.option_list import Option

from survey.sections import KIND_DESIGN, KIND_SHARP, KIND_TWISTING, Section
from survey.stations import TORSION_LOW_CURVATURE, TORSION_NO_DATA
from survey.track import HEIGHT_ELLIPSOID, HEIGHT_MSL, HEIGHT_NONE

from . import fmt
from .envelope import column_bounds
from .model import KIND_LETTER, KIND_PRIORITY, ViewModel
from .render import (
    AXIS,
    BAND,
    CURSOR,
    CURSOR_CHAR,
    FLAG,
    GAP,
    LABEL,
    LIMIT,
    LIMIT_CHAR,
    PENDING,
    PLAIN,
    START,
    TRACK,
    VALUE,
    ZERO_CHAR,
    Grid,
    axis_row,
    chart_grid,
    lane_row,
    plan_cell,
    plan_grid,
    thin_stride,
    y_range,
)

#: Short form of the design caution, in our own words; the full text is in survey.design.CAUTION.
SHORT_CAUTION = "advisory only: local design codes and a licensed engineer decide"

#: Emphasis per style code. Every fact is also in the glyphs, so a monochrome terminal loses
#: nothing: colour here is a second cue only.
STYLES = {
    PLAIN: Style(),
    VALUE: Style(bold=True),
    BAND: Style(dim=True),
    GAP: Style(dim=True),
    AXIS: Style(dim=True),
    LIMIT: Style(color="yellow"),
    LABEL: Style(),
    CURSOR: Style(reverse=True, bold=True),
    FLAG: Style(bold=True, color="red"),
    PENDING: Style(reverse=True),
    TRACK: Style(color="cyan"),
    START: Style(bold=True),
}

#: Why torsion is undefined, short enough for the readout.
TORSION_SHORT = {TORSION_LOW_CURVATURE: "κ not above its σ", TORSION_NO_DATA: "no data (gap)"}

HEIGHT_SHORT = {HEIGHT_ELLIPSOID: "ellipsoidal", HEIGHT_MSL: "above MSL", HEIGHT_NONE: "none", "unknown": "ref. unknown"}


def grid_strips(grid: Grid, base: Style) -> list[Strip]:
    """One Strip per grid row, with runs of equal style merged into one segment."""
    out = []
    styles = {k: base + v for k, v in STYLES.items()}
    for chars, codes in zip(grid.chars, grid.styles):
        text = "".join(chars.tolist())
        if len(codes) == 0:
            out.append(Strip([], 0))
            continue
        cut = np.flatnonzero(np.diff(codes)) + 1
        starts = np.concatenate(([0], cut))
        ends = np.concatenate((cut, [len(codes)]))
        segs = [Segment(text[a:b], styles[int(codes[a])]) for a, b in zip(starts.tolist(), ends.tolist())]
        out.append(Strip(segs, len(codes)))
    return out


def with_cursor(strip: Strip, x: int, char: str, style: Style) -> Strip:
    """The strip with the cell at column ``x`` replaced by ``char`` in ``style``.

    Splits the one segment that holds the cell (our glyphs are all one cell wide), so a cursor
    costs one new Strip per row.
    """
    length = strip.cell_length
    if x < 0 or x >= length:
        return strip
    segs = strip._segments
    pos = 0
    for i, seg in enumerate(segs):
        n = len(seg.text)
        if pos + n > x:
            off = x - pos
            mid = [Segment(char, style)]
            if off:
                mid.insert(0, Segment(seg.text[:off], seg.style))
            if off + 1 < n:
                mid.append(Segment(seg.text[off + 1 :], seg.style))
            return Strip(segs[:i] + mid + segs[i + 1 :], length)
        pos += n
    return strip


# ----------------------------------------------------------------------------------------------
# Strip charts


class ChartPanel(Widget):
    """Strip charts against chainage (curvature or radius, torsion, elevation, grade when tall),
    a flag lane and a chainage axis, with the cursor line.

    Layout (top to bottom): for each chart a title row and its plot rows; then the lane, then
    the axis. The left margin holds the value at the top and bottom edge of each chart.
    """

    DEFAULT_CSS = """
    ChartPanel { height: 1fr; }
    """
    MARGIN = 8
    can_focus = True

    def __init__(self, **kw):
        super().__init__(**kw)
        self.radius_mode = False
        self._key = None
        self._rows: list[Strip] = []
        self._grids: dict[int, tuple[Grid, int]] = {}  # screen row -> (chart grid, row in grid)
        self._lane_row = -1
        self._axis_row = -1
        self._bounds = (np.zeros(0, np.int64), np.zeros(0, np.int64))
        self._ready = False
        self._width = 0
        self._base_style = Style()
        self._x = -1
        self._cstyle = Style()

    @property
    def model(self) -> ViewModel | None:
        return getattr(self.app, "model", None)

    def plot_columns(self) -> int:
        return max(self.size.width - self.MARGIN, 1)

    # -- layout --------------------------------------------------------------------------------

    def _charts(self, height: int) -> list[tuple[str, int]]:
        """(kind, plot rows) for the charts that fit in ``height`` rows."""
        kinds = ["curv", "tors", "elev"]
        if height >= 26:
            kinds.append("grade")
        avail = height - 2  # lane + axis
        while kinds and avail - len(kinds) < 2 * len(kinds):
            kinds.pop()
        if not kinds:
            return []
        plot = avail - len(kinds)
        per, extra = divmod(plot, len(kinds))
        return [(k, per + (1 if i < extra else 0)) for i, k in enumerate(kinds)]

    # -- building the cached picture -----------------------------------------------------------

    def _ensure(self) -> None:
        m = self.model
        w, h = self.size.width, self.size.height
        key = (w, h, m.i0, m.span, m.sections_version, self.radius_mode, id(m.limits), id(m))
        if key == self._key:
            return
        self._key = key
        C = self.plot_columns()
        a, b = column_bounds(m.i0, m.span, C)
        self._bounds = (a, b)
        base = self.rich_style
        rows: list[Strip] = []
        self._grids = {}
        blank_margin = Strip([Segment(" " * (self.MARGIN - 1) + "│", base + STYLES[AXIS])], self.MARGIN)
        for kind, nrows in self._charts(h):
            title, grid, top_label, bottom_label = self._chart(kind, nrows, a, b)
            rows.append(Strip([Segment(title[:w].ljust(w), base + Style(bold=True))], w))
            plot = grid_strips(grid, base)
            for r, strip in enumerate(plot):
                label = top_label if r == 0 else bottom_label if r == nrows - 1 else ""
                if label:
                    margin = Strip([Segment(label[: self.MARGIN - 1].rjust(self.MARGIN - 1) + "┤", base + STYLES[LABEL])], self.MARGIN)
                else:
                    margin = blank_margin
                self._grids[len(rows)] = (grid, r)
                rows.append(Strip.join([margin, strip]))
        self._lane_row = len(rows)
        rows.append(Strip.blank(w, base))  # lane: drawn per render (it shows an open mark)
        self._axis_row = len(rows)
        p = m.profile
        axis = axis_row(p.chainage_m[a], fmt.chainage)
        lo, hi = m.window_chainage
        rows.append(Strip.join([Strip([Segment("chain.".ljust(self.MARGIN), base + STYLES[AXIS])], self.MARGIN), grid_strips(axis, base)[0]]))
        self._rows = rows

    def _chart(self, kind: str, nrows: int, a: np.ndarray, b: np.ndarray):
        """(title, grid, top label, bottom label) of one chart for columns [a, b)."""
        m = self.model
        lim = m.limits
        if kind == "curv":
            lo, hi = m.kappa.vmin.query(a, b), m.kappa.vmax.query(a, b)
            blo, bhi = m.kappa.bmin.query(a, b), m.kappa.bmax.query(a, b)
            sharp = 1.0 / lim.sharp_radius_m if lim.sharp_radius_m else None
            design = 1.0 / lim.design_radius_m if lim.design_on else None
            if self.radius_mode:
                with np.errstate(divide="ignore", invalid="ignore"):
                    r_lo = np.log10(1.0 / hi)
                    r_hi = np.log10(1.0 / lo)
                    b_lo = np.log10(1.0 / bhi)
                    b_hi = np.where(blo > 0, np.log10(1.0 / blo), np.inf)
                finite = r_lo[np.isfinite(r_lo)]
                limits_r = [math.log10(r) for r in (lim.sharp_radius_m, lim.design_radius_m) if r]
                y0 = min([float(np.min(finite))] if finite.size else [0.0] + limits_r) - 0.1
                y0 = min([y0] + [v - 0.1 for v in limits_r])
                tops = np.concatenate((r_hi[np.isfinite(r_hi)], r_lo[np.isfinite(r_lo)]))
                # 0.3 decade of headroom keeps the largest finite radius apart from the straights
                # (infinite radius), which are drawn on the top edge
                # and radii beyond 10 km (or 100x the smallest) are all but straight: top edge
                y1 = min(max(float(np.max(tops)) + 0.3 if tops.size else y0 + 1, y0 + 1.0), max(y0 + 2.0, 4.0))
                refs = tuple((math.log10(r), LIMIT_CHAR, LIMIT) for r in (lim.sharp_radius_m, lim.design_radius_m) if r)
                # a straight (curvature 0) has an infinite radius: drawn at the top edge, not as
                # a gap (it is a value, just off the scale)
                r_hi = np.where(np.isfinite(lo) & ~np.isfinite(r_hi), y1, r_hi)
                r_lo = np.where(np.isfinite(hi) & ~np.isfinite(r_lo), y1, r_lo)
                b_hi = np.where(np.isfinite(blo) & ~np.isfinite(b_hi), y1, b_hi)
                grid = chart_grid(r_lo, r_hi, nrows, y0, y1, b_lo, b_hi, refs=refs)
                title = "radius R m, log, ∞ at top  ░±1σ"
                if lim.design_on:
                    title += f"  ┄advisory design R {lim.design_radius_m:.0f} m"
                if lim.sharp_radius_m:
                    title += f"  ┄limit {fmt.length(lim.sharp_radius_m)}"
                return title, grid, fmt.short_length(10**y1), fmt.short_length(10**y0)
            y0, y1 = y_range(lo, hi, include_zero=True, extra=[v for v in (sharp, design) if v])
            refs = ((0.0, ZERO_CHAR, AXIS),) + tuple((v, LIMIT_CHAR, LIMIT) for v in (sharp, design) if v)
            grid = chart_grid(lo, hi, nrows, y0, y1, blo, bhi, refs=refs)
            title = "curvature κ 1/m  ░±1σ"
            if design:
                title += f"  ┄advisory design R {lim.design_radius_m:.0f} m"
            if sharp:
                title += f"  ┄limit R {fmt.length(lim.sharp_radius_m)}"
            return title, grid, fmt.axis(y1), fmt.axis(y0)
        if kind == "tors":
            lo, hi = m.tau.vmin.query(a, b), m.tau.vmax.query(a, b)
            blo, bhi = m.tau.bmin.query(a, b), m.tau.bmax.query(a, b)
            gap = m.tau.defined.count(a, b) == 0
            tw = lim.twist_per_m
            y0, y1 = y_range(lo, hi, include_zero=True, extra=(tw, -tw) if tw else ())
            refs = ((0.0, ZERO_CHAR, AXIS),)
            if tw:
                refs += ((tw, LIMIT_CHAR, LIMIT), (-tw, LIMIT_CHAR, LIMIT))
            grid = chart_grid(lo, hi, nrows, y0, y1, blo, bhi, gap=gap, refs=refs)
            title = "torsion τ 1/m  ░±1σ  ·undefined"
            if tw:
                title += f"  ┄limit ±{fmt.short(tw)}"
            return title, grid, fmt.axis(y1), fmt.axis(y0)
        if kind == "elev":
            lo, hi = m.height.vmin.query(a, b), m.height.vmax.query(a, b)
            glo, ghi = m.grade.vmin.query(a, b), m.grade.vmax.query(a, b)
            y0, y1 = y_range(lo, hi)
            grid = chart_grid(lo, hi, nrows, y0, y1)
            ref = HEIGHT_SHORT.get(m.profile.height_ref, m.profile.height_ref)
            if np.isfinite(glo).any():
                g = f"  grade {fmt.signed(float(np.nanmin(glo)), '.1f')}…{fmt.signed(float(np.nanmax(ghi)), '.1f')} %"
            else:
                g = ""
            if not np.isfinite(lo).any():
                return "elevation: no heights in this stretch (· = none)", grid, "", ""
            return f"elevation m ({ref}){g}", grid, fmt.axis(y1, digits=4), fmt.axis(y0, digits=4)
        # grade
        lo, hi = m.grade.vmin.query(a, b), m.grade.vmax.query(a, b)
        y0, y1 = y_range(lo, hi, include_zero=True)
        grid = chart_grid(lo, hi, nrows, y0, y1, refs=((0.0, ZERO_CHAR, AXIS),))
        return "grade % (+ uphill)", grid, fmt.axis(y1), fmt.axis(y0)

    # -- per render ----------------------------------------------------------------------------

    def note_move(self) -> None:
        """After a cursor move: repaint only if the picture or the cursor column changed."""
        m = self.model
        if m is None:
            return
        if self._key is None or self._key[2:4] != (m.i0, m.span) or m.pending_mark_m is not None:
            self.refresh()
            return
        if self.cursor_column() != self._x:
            self.refresh()

    def cursor_column(self) -> int:
        """Column of the cursor (from the cached column bounds)."""
        m = self.model
        a, _ = self._bounds
        if not (m.i0 <= m.cursor < m.i0 + m.span) or len(a) == 0:
            return -1
        c = int(np.searchsorted(a, m.cursor, side="right")) - 1
        return int(np.searchsorted(a, a[c], side="left"))

    def _lane(self) -> Strip:
        m = self.model
        a, b = self._bounds
        flags = {kind: cov.count(a, b) > 0 for kind, cov in m.coverage.items()}
        pending = None
        if m.pending_mark_m is not None:
            c = m.profile.chainage_m
            lo, hi = sorted((m.pending_mark_m, m.chainage()))
            pending = (c[np.minimum(b - 1, m.n - 1)] >= lo) & (c[a] <= hi)
        if not flags and pending is None:
            grid = Grid.blank(1, len(a))
        else:
            grid = lane_row(flags, KIND_LETTER, KIND_PRIORITY, pending)
        base = self.rich_style
        head = Strip([Segment("flags".ljust(self.MARGIN - 1) + "│", base + STYLES[AXIS])], self.MARGIN)
        return Strip.join([head, grid_strips(grid, base)[0]])

    def render_lines(self, crop):
        self._prepare()
        return super().render_lines(crop)

    def _prepare(self) -> None:
        """Once per repaint: the cached picture and where the cursor goes."""
        self._ready = self.model is not None
        self._width = self.size.width
        self._base_style = self.rich_style
        if not self._ready:
            return
        self._ensure()
        self._x = self.cursor_column()
        self._cstyle = self._base_style + STYLES[CURSOR]

    def render_line(self, y: int) -> Strip:
        if not self._ready:
            return Strip.blank(self._width, self._base_style)
        if y >= len(self._rows):
            return Strip.blank(self._width, self._base_style)
        x = self._x
        cstyle = self._cstyle
        if y == self._lane_row:
            strip = self._lane()
            ch = strip.crop(self.MARGIN + x, self.MARGIN + x + 1).text or " "
            return with_cursor(strip, self.MARGIN + x, CURSOR_CHAR if ch == " " else ch, cstyle)
        strip = self._rows[y]
        hit = self._grids.get(y)
        if hit is None or x < 0:
            return strip
        grid, r = hit
        ch = grid.chars[r, x]
        return with_cursor(strip, self.MARGIN + x, CURSOR_CHAR if ch == " " else ch, cstyle)

    def on_click(self, event: events.Click) -> None:
        m = self.model
        if m is None or event.x < self.MARGIN:
            return
        self._ensure()
        a, _ = self._bounds
        c = min(event.x - self.MARGIN, len(a) - 1)
        self.app.goto_station(int(a[c]))

    def on_mouse_scroll_down(self, event: events.MouseScrollDown) -> None:
        self.app.action_zoom_out()

    def on_mouse_scroll_up(self, event: events.MouseScrollUp) -> None:
        self.app.action_zoom_in()

    def text_lines(self) -> list[str]:
        """The picture as plain text (tests)."""
        self._prepare()
        return [self.render_line(y).text for y in range(self.size.height)]


# ----------------------------------------------------------------------------------------------
# Plan view


class PlanView(Widget):
    """Plan (top-down) view of the track in braille dots, with the cursor and section labels.

    Whole-track mode shows everything; follow mode shows the stations of the chainage window and
    moves with it. Section stretches are bold and labelled with their id where room allows.
    """

    DEFAULT_CSS = """
    PlanView { height: 1fr; }
    """

    def __init__(self, **kw):
        super().__init__(**kw)
        self.follow = False
        self._key = None
        self._rows: list[Strip] = []
        self._grid: Grid | None = None
        self._transform = (0.0, 0.0, 1.0)
        self._ready = False
        self._width = 0
        self._base_style = Style()
        self._cursor_cell = (-1, -1)
        self._cstyle = Style()

    @property
    def model(self) -> ViewModel | None:
        return getattr(self.app, "model", None)

    def _ensure(self) -> None:
        m = self.model
        w, h = self.size.width, self.size.height
        window = (m.i0, m.span) if self.follow else None
        key = (w, h, window, m.sections_version, id(m))
        if key == self._key:
            return
        self._key = key
        rows = max(h - 1, 1)
        i0, i1 = (m.i0, m.i0 + m.span) if self.follow else (0, m.n)
        a, b = np.array([i0]), np.array([i1])
        e0, e1 = m.east.vmin.query(a, b)[0], m.east.vmax.query(a, b)[0]
        n0, n1 = m.north.vmin.query(a, b)[0], m.north.vmax.query(a, b)[0]
        if not all(np.isfinite([e0, e1, n0, n1])):
            e0, e1, n0, n1 = -1.0, 1.0, -1.0, 1.0
        pad = 0.04 * max(e1 - e0, n1 - n0, 1.0)
        extent = (e0 - pad, e1 + pad, n0 - pad, n1 + pad)
        from .render import plan_scale

        scale = plan_scale(extent, w, rows)
        p = m.profile
        stride = thin_stride(0.0, scale, p.step_m)
        idx = np.arange(i0, i1, stride)
        flagged = np.zeros(len(idx), bool)
        for cov in m.coverage.values():
            flagged |= cov.count(idx, idx + 1) > 0
        grid, transform = plan_grid(p.east_m[idx], p.north_m[idx], extent, w, rows, flagged)
        # section labels at mid-section, where the cells are free of other labels
        taken = np.zeros((rows, w), bool)
        lo_c, hi_c = float(p.chainage_m[i0]), float(p.chainage_m[i1 - 1])
        placed = 0
        for s in m.sections:
            if placed >= 60:
                break
            mid = 0.5 * (s.start_chainage_m + s.end_chainage_m)
            if not (lo_c <= mid <= hi_c):
                continue
            k = m.index_at(mid)
            r, c = plan_cell(transform, float(p.east_m[k]), float(p.north_m[k]))
            label = s.id
            c = c + 1  # beside the track, not on it
            if 0 <= r < rows and 0 <= c and c + len(label) <= w and not taken[r, max(c - 1, 0) : c + len(label) + 1].any():
                grid.put(r, c, label, FLAG)
                taken[r, max(c - 1, 0) : c + len(label) + 1] = True
                placed += 1
        r, c = plan_cell(transform, float(p.east_m[i0]), float(p.north_m[i0]))
        if 0 <= r < rows and 0 <= c < w:
            grid.put(r, c, "○", START)
        self._grid, self._transform = grid, transform
        cell_m = 2 * transform[2]
        mode = "window" if self.follow else "whole track"
        title = f"plan ({mode}) N↑ 1 col≈{fmt.length(cell_m)}"
        if len(title) + 16 <= w:
            title += "  ○start ●cursor"
        base = self.rich_style
        self._rows = [Strip([Segment(title[:w].ljust(w), base + Style(bold=True))], w)] + grid_strips(grid, base)

    def render_lines(self, crop):
        self._prepare()
        return super().render_lines(crop)

    def note_move(self) -> None:
        """After a cursor move: repaint the rows of the old and new cursor cell only, unless
        the picture itself changed (follow mode and the window moved)."""
        m = self.model
        if m is None or self._key is None:
            self.refresh()
            return
        if self.follow and self._key[2] != (m.i0, m.span):
            self.refresh()
            return
        p = m.profile
        new = plan_cell(self._transform, float(p.east_m[m.cursor]), float(p.north_m[m.cursor]))
        old = self._cursor_cell
        if new == old:
            return
        w = self.size.width
        self.refresh(Region(0, old[0] + 1, w, 1), Region(0, new[0] + 1, w, 1))

    def _prepare(self) -> None:
        m = self.model
        self._width = self.size.width
        self._base_style = self.rich_style
        self._ready = m is not None
        if not self._ready:
            return
        self._ensure()
        p = m.profile
        self._cursor_cell = plan_cell(self._transform, float(p.east_m[m.cursor]), float(p.north_m[m.cursor]))
        self._cstyle = self._base_style + STYLES[CURSOR]

    def render_line(self, y: int) -> Strip:
        if not self._ready or y >= len(self._rows):
            return Strip.blank(self._width, self._base_style)
        strip = self._rows[y]
        r, c = self._cursor_cell
        if y >= 1 and r == y - 1 and 0 <= c < self._width:
            return with_cursor(strip, c, "●", self._cstyle)
        return strip

    def text_lines(self) -> list[str]:
        self._prepare()
        return [self.render_line(y).text for y in range(self.size.height)]


# ----------------------------------------------------------------------------------------------
# Readout


class Readout(Widget):
    """Values at the cursor, one per line, each with its unit; "n/a" with a reason when undefined."""

    DEFAULT_CSS = """
    Readout { height: auto; }
    """

    @property
    def model(self) -> ViewModel | None:
        return getattr(self.app, "model", None)

    def lines(self) -> list[str]:
        m = self.model
        if m is None:
            return ["loading…"]
        v = m.readout()
        p = m.profile
        kmh = v["speed_mps"] * 3.6 if math.isfinite(v["speed_mps"]) else math.nan
        speed = f"{v['speed_mps']:.2f} m/s ({kmh:.1f} km/h)" if math.isfinite(kmh) else fmt.NA
        k, ks = v["curvature_per_m"], v["curvature_sd_per_m"]
        t, ts = v["torsion_per_m"], v["torsion_sd_per_m"]
        kappa = f"{fmt.sig(k)} ± {fmt.sig(ks, 2)} 1/m" if math.isfinite(k) else fmt.NA
        if math.isfinite(t):
            tau = f"{fmt.sig(t)} ± {fmt.sig(ts, 2)} 1/m"
        else:
            tau = f"n/a: {TORSION_SHORT.get(v['torsion_reason'], 'undefined')}"
        lat_acc = f"{v['lateral_accel_mps2']:.2f} m/s²" if math.isfinite(v["lateral_accel_mps2"]) else "n/a (no time)"
        h = f"{v['height_m']:.1f} m {HEIGHT_SHORT.get(p.height_ref, p.height_ref)}" if math.isfinite(v["height_m"]) else "n/a (no height)"
        t0 = p.time_s[0]
        elapsed = v["time_s"] - t0 if math.isfinite(t0) else math.nan
        tail = f" +{fmt.duration(elapsed)}" if math.isfinite(elapsed) else ""
        here = m.sections_at_cursor()
        lines = [
            f"at     {fmt.chainage_exact(v['chainage_m'])}  #{v['index']}",
            f"pos    {fmt.latlon(v['lat_deg'], v['lon_deg'])}",
            f"height {h}",
            f"grade  {fmt.signed(v['grade_pct'], '.2f')} %",
            f"speed  {speed}",
            f"radius {fmt.length(v['radius_m'])}",
            f"κ      {kappa}",
            f"τ      {tau}",
            f"a_lat  {lat_acc}",
            f"time   {fmt.clock(v['time_s'], date=self.size.width >= 40)}{tail}",
            f"in     {' '.join(s.id for s in here) if here else '—'}  seg {v['segment']}",
        ]
        if v["bank_deg"] is not None:  # an IMU log was fused
            b, bs, tw = v["bank_deg"], v["bank_sd_deg"], v["twist_deg_per_m"]
            bank = f"{fmt.signed(b, '.1f')}° ± {bs:.1f}" if math.isfinite(b) else fmt.NA
            twist = f"{fmt.signed(tw, '.2f')}°/m" if math.isfinite(tw) else fmt.NA
            where = "  IMU only" if v["imu_outage"] else ""  # inside a GNSS outage
            lines += [f"bank   {bank}", f"twist  {twist}{where}"]
        lim = m.limits
        if lim.design_on:
            from survey.design import balance_speed_kmh

            pr = abs(v["plan_radius_m"])
            vb = balance_speed_kmh(pr, lim.design_superelevation, lim.design_friction) if math.isfinite(pr) else math.inf
            vb_text = f"{vb:.0f} km/h" if math.isfinite(vb) else "no limit (straight)"
            lines.append(f"design e+f used up at {vb_text}; {SHORT_CAUTION}")
        return lines

    def render(self) -> Text:
        return Text("\n".join(self.lines()), no_wrap=False, overflow="fold")


# ----------------------------------------------------------------------------------------------
# Section list


KIND_SHORT = {KIND_SHARP: "sharp", KIND_TWISTING: "twist", KIND_DESIGN: "design", "marked": "mark"}


def section_label(s: Section) -> str:
    """One line per section: id, kind, chainage range, confidence and its key figure (design
    figures carry "advisory" in the same line)."""
    span = f"{fmt.chainage(s.start_chainage_m)}–{fmt.chainage(s.end_chainage_m)}"
    if s.kind == KIND_SHARP:
        fig = f"R {fmt.length(s.min_radius_m)}"
    elif s.kind == KIND_TWISTING:
        fig = f"|τ| {fmt.sig(s.max_abs_torsion_per_m)}/m"
    elif s.kind == KIND_DESIGN:
        fig = f"advisory: e+f used at {s.balance_speed_kmh:.0f} km/h"
    else:
        fig = repr(s.note) if s.note else "(no note)"
    conf = f"{s.confidence * 100:3.0f}%" if math.isfinite(s.confidence) else "    "
    return f"{s.id:<4} {KIND_SHORT.get(s.kind, s.kind):<6} {span} {conf} {fig}"


class SectionList(OptionList):
    """Automatic and marked sections along the chainage; Enter (or a click) jumps to one."""

    DEFAULT_CSS = """
    SectionList { text-wrap: nowrap; text-overflow: ellipsis; }
    """

    def __init__(self, **kw):
        super().__init__(markup=False, compact=True, **kw)
        self.sections: list[Section] = []

    def show(self, sections: list[Section]) -> None:
        self.sections = list(sections)
        self.set_options(
            [Option(Text(section_label(s), no_wrap=True, overflow="ellipsis")) for s in self.sections]
            or [Option("no sections with the current limits", disabled=True)]
        )
