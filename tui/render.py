"""Pure drawing: per-column envelopes -> character grids (no Textual here).

A ``Grid`` is a (rows, columns) array of single characters plus a parallel array of style
codes; the widgets turn rows into styled terminal lines. Every fact is carried by a character
(block heights, shading, letters), so the screen reads the same without colour: styles only
add emphasis.

Glyphs
------
``█ ▀ ▄``  the value's min..max envelope in a column (two half-cells per row)
``░``      the 1-sigma band where it lies outside the value envelope
``·``      no value in this column (e.g. torsion undefined on a straight): a gap, never a spike
``─``      zero line;  ``┄`` the active limit
``S T D M`` flag lane: sharp, twisting, below design radius, hand mark;  ``m`` an open mark
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

# Style codes (see tui.widgets.STYLES for what they look like).
PLAIN, VALUE, BAND, GAP, AXIS, LIMIT, LABEL, CURSOR, FLAG, PENDING, TRACK, START = range(12)

VALUE_FULL, VALUE_TOP, VALUE_BOTTOM = "█", "▀", "▄"
BAND_CHAR = "░"
GAP_CHAR = "·"
ZERO_CHAR = "─"
LIMIT_CHAR = "┄"
CURSOR_CHAR = "│"

_BRAILLE = np.array([" "] + [chr(0x2800 + i) for i in range(1, 256)])
_BRAILLE_WEIGHTS = np.array([[0x01, 0x08], [0x02, 0x10], [0x04, 0x20], [0x40, 0x80]], dtype=np.uint16)


@dataclass
class Grid:
    """Characters and style codes, both shaped (rows, columns)."""

    chars: np.ndarray
    styles: np.ndarray

    @classmethod
    def blank(cls, rows: int, columns: int) -> "Grid":
        return cls(np.full((rows, columns), " ", dtype="<U1"), np.zeros((rows, columns), dtype=np.uint8))

    @property
    def rows(self) -> int:
        return self.chars.shape[0]

    @property
    def columns(self) -> int:
        return self.chars.shape[1]

    def text(self) -> list[str]:
        """Plain text rows (for tests and logs)."""
        return ["".join(r) for r in self.chars.tolist()]

    def put(self, row: int, col: int, text: str, style: int = LABEL) -> None:
        """Write ``text`` at (row, col), clipped to the grid."""
        if not (0 <= row < self.rows):
            return
        for k, ch in enumerate(text):
            c = col + k
            if 0 <= c < self.columns:
                self.chars[row, c] = ch
                self.styles[row, c] = style


# ----------------------------------------------------------------------------------------------
# Strip charts


def y_range(lo: np.ndarray, hi: np.ndarray, include_zero: bool = False, extra=()) -> tuple[float, float]:
    """Vertical range for a chart from the value envelope (NaN ignored), padded by 5 %.

    The 1-sigma band is deliberately not used: a few stations with a huge sigma would otherwise
    squash the curve flat; the band is clipped at the chart edge instead.
    """
    vals = [v for v in (np.nanmin(lo) if np.isfinite(lo).any() else math.nan,
                        np.nanmax(hi) if np.isfinite(hi).any() else math.nan) if math.isfinite(v)]
    vals += [float(v) for v in extra if v is not None and math.isfinite(v)]
    if include_zero:
        vals.append(0.0)
    if not vals:
        return -1.0, 1.0
    a, b = min(vals), max(vals)
    if b - a <= 1e-12 * max(1.0, abs(a), abs(b)):
        # flat: +-10 % around the value, or +-0.001 around zero (a scale typical of curvature
        # and torsion in 1/m; the labels show the numbers either way)
        pad = abs(a) * 0.1 if a != 0 else 1e-3
        return a - pad, b + pad
    pad = 0.05 * (b - a)
    return (a if (include_zero and a == 0.0) else a - pad), b + pad


def _cover(vlo: np.ndarray, vhi: np.ndarray, y0: float, y1: float, sub: int) -> np.ndarray:
    """(sub, C) bool: which half-cells (top first) the interval [vlo, vhi] of each column touches."""
    ok = np.isfinite(vlo) & np.isfinite(vhi) & (vhi >= y0) & (vlo <= y1)
    dy = (y1 - y0) / sub
    with np.errstate(invalid="ignore", over="ignore"):
        top = np.clip(np.floor((y1 - np.nan_to_num(vhi, nan=y1)) / dy), 0, sub - 1)
        bot = np.clip(np.floor((y1 - np.nan_to_num(vlo, nan=y0)) / dy), 0, sub - 1)
    r = np.arange(sub)[:, None]
    return ok[None, :] & (r >= top[None, :]) & (r <= bot[None, :])


def chart_grid(
    lo: np.ndarray,
    hi: np.ndarray,
    rows: int,
    y0: float,
    y1: float,
    band_lo: np.ndarray | None = None,
    band_hi: np.ndarray | None = None,
    gap: np.ndarray | None = None,
    refs: tuple[tuple[float, str, int], ...] = (),
) -> Grid:
    """Draw a strip chart of per-column envelopes.

    Parameters
    ----------
    lo, hi
        Value envelope per column (NaN: no value).
    rows
        Chart height in terminal rows (each row holds two half-cells).
    y0, y1
        Value at the bottom and top edges.
    band_lo, band_hi
        Envelope of value -/+ 1 sigma (optional).
    gap
        Columns to draw as "no value" (dotted); default: where ``lo`` is NaN.
    refs
        Reference lines ``(value, char, style)`` drawn in empty cells (zero line, limits).
    """
    columns = len(lo)
    g = Grid.blank(rows, columns)
    if rows <= 0 or columns <= 0:
        return g
    sub = 2 * rows
    v = _cover(lo, hi, y0, y1, sub)
    upper, lower = v[0::2], v[1::2]
    chars, styles = g.chars, g.styles
    for value, ch, st in refs:
        if value is None or not math.isfinite(value) or not (y0 <= value <= y1):
            continue
        r = min(int((y1 - value) / (y1 - y0) * rows), rows - 1)
        chars[r, :] = ch
        styles[r, :] = st
    if band_lo is not None and band_hi is not None:
        b = _cover(band_lo, band_hi, y0, y1, sub)
        bcell = b[0::2] | b[1::2]
        chars[bcell] = BAND_CHAR
        styles[bcell] = BAND
    full, top, bottom = upper & lower, upper & ~lower, ~upper & lower
    chars[full] = VALUE_FULL
    chars[top] = VALUE_TOP
    chars[bottom] = VALUE_BOTTOM
    styles[upper | lower] = VALUE
    if gap is None:
        gap = ~np.isfinite(lo)
    if gap.any():
        chars[:, gap] = GAP_CHAR
        styles[:, gap] = GAP
    return g


# ----------------------------------------------------------------------------------------------
# Lane and axis


def lane_row(flags: dict[str, np.ndarray], letters: dict[str, str], priority, pending: np.ndarray | None) -> Grid:
    """One row of section letters per column.

    ``flags`` maps kind -> bool per column; the first kind of ``priority`` that covers a column
    gives its letter. ``pending`` (bool per column) shows an open mark as ``m``.
    """
    columns = len(next(iter(flags.values()))) if flags else (len(pending) if pending is not None else 0)
    g = Grid.blank(1, columns)
    for kind in reversed(tuple(priority)):
        cov = flags.get(kind)
        if cov is not None and cov.any():
            g.chars[0, cov] = letters[kind]
            g.styles[0, cov] = FLAG
    if pending is not None and pending.any():
        g.chars[0, pending] = "m"
        g.styles[0, pending] = PENDING
    return g


def nice_step(span: float, target_ticks: int) -> float:
    """1, 2 or 5 x 10^k just above span / target_ticks (common practice for axis ticks)."""
    if not (span > 0) or target_ticks <= 0:
        return 1.0
    raw = span / target_ticks
    p = 10 ** math.floor(math.log10(raw))
    for m in (1, 2, 5, 10):
        if m * p >= raw:
            return m * p
    return 10 * p


def axis_row(column_chainage: np.ndarray, label) -> Grid:
    """Chainage ticks: ``╵label`` at the first column at or past each round chainage."""
    columns = len(column_chainage)
    g = Grid.blank(1, columns)
    if columns == 0:
        return g
    c0, c1 = float(column_chainage[0]), float(column_chainage[-1])
    step = nice_step(c1 - c0, max(1, columns // 12))
    t = math.ceil(c0 / step) * step if step > 0 else c0
    next_free = 0
    while t <= c1 + 1e-9:
        col = int(np.searchsorted(column_chainage, t - 1e-9))
        text = "╵" + label(t)
        if col >= next_free and col + len(text) <= columns:
            g.put(0, col, text, AXIS)
            next_free = col + len(text) + 1
        t += step
    return g


# ----------------------------------------------------------------------------------------------
# Plan view


def plan_scale(extent: tuple[float, float, float, float], columns: int, rows: int) -> float:
    """Metres per braille dot so the extent (east0, east1, north0, north1) fits, same on both axes.

    A braille cell is 2 dots wide and 4 tall, and a terminal cell is about twice as tall as it
    is wide, so dots are close to square.
    """
    e0, e1, n0, n1 = extent
    w = max(e1 - e0, 1e-6)
    h = max(n1 - n0, 1e-6)
    return max(w / max(2 * columns - 1, 1), h / max(4 * rows - 1, 1)) * 1.02


def plan_grid(
    east: np.ndarray,
    north: np.ndarray,
    extent: tuple[float, float, float, float],
    columns: int,
    rows: int,
    flagged: np.ndarray | None = None,
) -> tuple[Grid, tuple[float, float, float]]:
    """Braille raster of a path (points already thinned to about half a dot apart).

    Returns the grid and the transform ``(east_left, north_top, metres_per_dot)`` to place
    further markers (cursor, labels) with :func:`plan_cell`.
    """
    g = Grid.blank(rows, columns)
    scale = plan_scale(extent, columns, rows)
    e0, e1, n0, n1 = extent
    # centre the extent in the raster
    left = 0.5 * (e0 + e1) - scale * columns  # 2*columns dots wide, half of it
    top = 0.5 * (n0 + n1) + scale * 2 * rows  # 4*rows dots tall, half of it
    if rows <= 0 or columns <= 0:
        return g, (left, top, scale)
    ok = np.isfinite(east) & np.isfinite(north)
    x = np.floor((east[ok] - left) / scale).astype(np.int64)
    y = np.floor((top - north[ok]) / scale).astype(np.int64)
    inside = (x >= 0) & (x < 2 * columns) & (y >= 0) & (y < 4 * rows)
    x, y = x[inside], y[inside]
    dots = np.zeros((4 * rows, 2 * columns), dtype=np.uint16)
    dots[y, x] = 1
    bits = (dots.reshape(rows, 4, columns, 2) * _BRAILLE_WEIGHTS[None, :, None, :]).sum(axis=(1, 3))
    g.chars[:] = _BRAILLE[bits]
    g.styles[bits > 0] = TRACK
    if flagged is not None:
        f = flagged[ok][inside]
        if f.any():
            g.styles[y[f] // 4, x[f] // 2] = FLAG
    return g, (left, top, scale)


def plan_cell(transform: tuple[float, float, float], east: float, north: float) -> tuple[int, int]:
    """(row, column) of the cell holding a point, for a transform from :func:`plan_grid`."""
    left, top, scale = transform
    if not (math.isfinite(east) and math.isfinite(north)):
        return -1, -1
    return int((top - north) / scale) // 4, int((east - left) / scale) // 2


def thin_stride(path_m: float, metres_per_dot: float, step_m: float) -> int:
    """Station stride that keeps drawn points at most half a dot apart along the path."""
    if not (metres_per_dot > 0 and step_m > 0):
        return 1
    return max(1, int(0.5 * metres_per_dot / step_m))
