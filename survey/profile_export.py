"""Write a ``Profile`` as CSV (file or stdout) or as an .xlsx workbook, atomically.

CSV: a header comment block (lines starting with ``#``: tool version, units, frame, height
reference, smoothing settings, messages), then one header row of ``Profile.columns()`` names and
one row per station (RFC 4180). Numbers are written in fixed point with ``CSV_DECIMALS``
decimals, formatted for a block of stations at a time as one ASCII byte matrix (no per-row
Python: two million stations take seconds, not minutes); a block with a value too large for
that falls back to the ``csv`` module. Empty cells mean "undefined"
(e.g. torsion where curvature is too small, radius on a straight). Text cells are guarded
against spreadsheet formula injection (OWASP "CSV Injection": a leading = + - @ tab or CR gets a
single quote; numbers stay numeric).

XLSX: sheet "profile" with the same columns, sheet "settings" with the header information.
A file is written to a temporary name and renamed only when complete (``survey.atomic``); an
existing file is refused unless ``force``.
"""

from __future__ import annotations

import csv
import io
import sys
from typing import NamedTuple

import numpy as np

from . import __version__
from .atomic import atomic_open, check_output_path
from .errors import InputError
from .stations import Profile

_DANGEROUS = ("=", "+", "-", "@", "\t", "\r")


def header_lines(profile: Profile) -> list[str]:
    """The comment block: tool, frame, heights, settings, messages and column units."""
    lines = [
        f"trackframe {__version__} station profile",
        f"frame: {profile.frame}",
        f"height reference: {profile.height_ref}",
        f"station step: {profile.step_m:g} m",
        "settings: " + "; ".join(f"{k}={v}" for k, v in profile.settings.items()),
    ]
    lines += [f"message: {m}" for m in profile.messages]
    lines += [f"column {name}: {unit}" for name, unit in profile.columns()]
    return lines


def _cell(value):
    if isinstance(value, str):
        return "'" + value if value.startswith(_DANGEROUS) else value
    if isinstance(value, (float, np.floating)):
        return "" if not np.isfinite(value) else repr(float(value))
    return value


def _rows(profile: Profile, start: int = 0, stop: int | None = None):
    cols = [profile.column(name) for name, _ in profile.columns()]
    for i in range(start, len(profile) if stop is None else stop):
        yield [_cell(c[i].item() if hasattr(c[i], "item") else c[i]) for c in cols]


def write_csv(profile: Profile, out, force: bool = False) -> None:
    """Write CSV to path ``out`` (or stdout when ``out == "-"``)."""
    if str(out) == "-":
        _write_csv_stream(profile, sys.stdout)
        return
    path = check_output_path(out, force)
    with atomic_open(path, "w", newline="", encoding="utf-8") as fh:
        _write_csv_stream(profile, fh)


#: Decimals written per numeric column (fixed-point): 1e-4 m for positions and chainage, 1e-9 deg
#: (~0.1 mm) for latitude/longitude, 1e-10 /m for curvature-like columns, ms for time.
CSV_DECIMALS = {
    "chainage_m": 4, "time_s": 3, "lat": 9, "lon": 9, "alt_m": 4, "east_m": 4, "north_m": 4, "up_m": 4,
    "speed_mps": 4, "grade_pct": 4, "curvature_per_m": 10, "radius_m": 3, "torsion_per_m": 10,
    "curvature_sd_per_m": 10, "torsion_sd_per_m": 10, "plan_curvature_per_m": 10, "plan_radius_m": 3,
    "vertical_curvature_per_m": 10, "lateral_accel_mps2": 5, "segment": 0,
}
_CHUNK_ROWS = 16_384
#: 10^0 .. 10^18 as int64 and as float64 (all exact in both).
_POW10I = 10 ** np.arange(19, dtype=np.int64)
_POW10F = _POW10I.astype(float)
_MAX_SCALED = 9.0e17  # below 2^63 with margin


def _fixed_bytes(values: np.ndarray, decimals: int) -> np.ndarray | None:
    """(n, width) uint8 ASCII of ``values`` in fixed-point with ``decimals`` decimals, padded
    with zero bytes; a non-finite value gives an empty cell (all zeros). None when a value is
    too large for exact integer formatting (the caller then uses the slow path)."""
    cells = _fixed_layout(values, decimals)
    if cells is None:
        return None
    out = np.zeros((len(cells.q), cells.slots), "<u2")
    _fixed_fill(out, cells)
    return out.view(np.uint8)


class _Cells(NamedTuple):
    """A column ready for ``_fixed_fill``: scaled magnitudes ``q`` (integers, float64 below 2^52
    or int64), sign and finiteness masks, integer digits of the widest cell and the cell's
    width in two-byte slots."""

    q: np.ndarray
    neg: np.ndarray
    fin: np.ndarray
    decimals: int
    wi: int
    slots: int


def _fixed_layout(values: np.ndarray, decimals: int) -> _Cells | None:
    """Scale and round ``values`` to integers of the last decimal and size their cells (None: a
    value too large for exact integer formatting)."""
    v = np.asarray(values, dtype=float)
    fin = np.isfinite(v)
    a = np.abs(v)
    a *= 10.0**decimals
    a[~fin] = 0.0
    if np.any(a >= _MAX_SCALED):
        return None
    q = np.rint(a, out=a)
    top = float(q.max(initial=0.0))
    if top >= 2.0**52:
        q = q.astype(np.int64)
    neg = fin & (v < 0) & (q > 0)
    wi = len(str(int(top) // 10**decimals))  # integer digits of the widest cell
    return _Cells(q, neg, fin, decimals, wi, 1 + (wi + 1) // 2 + (1 + (decimals + 1) // 2 if decimals else 0))


def _pair_tables() -> np.ndarray:
    """(400,) two-byte cells (first character in the low byte, stored first): 0-99
    as two digits; 100-199 the same without a leading zero (a zero byte instead; 100 itself is
    empty); 200-299 likewise but 200 is "0"; 300-309 one digit."""
    def cell(text: str) -> int:
        b = text.encode("ascii").rjust(2, b"\0")
        return b[0] | (b[1] << 8)

    full = [cell(f"{v:02d}") for v in range(100)]
    lead = [cell(f"{v}" if v else "") for v in range(100)]
    units = [cell(f"{v}") for v in range(100)]
    single = [cell(f"{v}") for v in range(10)] + [0] * 90
    return np.array(full + lead + units + single, "<u2")  # little-endian: the low byte comes first


_PAIRS = _pair_tables()
_SIGN = ord("-") << 8  # sign slot: "-" in the second byte, just left of the digits
_POINT, _COMMA, _NEWLINE = ord("."), ord(","), ord("\n")


def _fixed_fill(out: np.ndarray, c: _Cells) -> None:
    """Write the cells of ``c`` into the zeroed (n, c.slots) little-endian uint16 block ``out`` (a view of a
    wider row matrix is fine), two characters per slot: a sign slot, the integer digits in
    pairs (leading zeros as zero bytes), the point and the decimals in pairs. The writer drops
    every zero byte, so each cell reads as usual.

    A pair of digits starting at digit j of the integer q is floor(q / 10^j) - 100 floor(q /
    10^(j+2)), looked up in ``_PAIRS``. In float64 below 2^52 every floor is exact (q / 10^j is
    correctly rounded and its fraction stays at least 10^-j away from the next integer); larger
    q use int64. Two digits per pass and a two-byte store: about five times faster than one
    digit at a time (benchmarks/bench_profile.py)."""
    dec, wi = c.decimals, c.wi
    q = c.q
    is_int = q.dtype == np.int64
    floors = {0: q}

    def F(j):  # floor(q / 10^j), once per j
        if j not in floors:
            if j >= len(_POW10I):  # q < 10^18: nothing up there
                floors[j] = np.zeros_like(q)
            else:
                floors[j] = q // _POW10I[j] if is_int else np.floor(q / _POW10F[j])
        return floors[j]

    def put(slot, j, width, table_offset, lead=None):
        v = F(j) - (10 if width == 1 else 100) * F(j + width)
        if lead is not None:  # leading pair: no leading zero where nothing is above it
            v += lead * (F(j + 2) == 0)
        v += table_offset
        out[:, slot] = _PAIRS[v.astype(np.intp)]

    slot = c.slots - 1
    for j in range(0, dec - 1, 2):  # decimal pairs, from the last decimal
        put(slot, j, 2, 0)
        slot -= 1
    if dec % 2:
        put(slot, dec - 1, 1, 300)
        slot -= 1
    if dec:
        out[:, slot] = _POINT
        slot -= 1
    for k in range((wi + 1) // 2):  # integer pairs, from the units
        put(slot, dec + 2 * k, 2, 0, 200 if k == 0 else 100)
        slot -= 1
    out[c.neg, 0] = _SIGN
    if not c.fin.all():
        out[~c.fin] = 0


def _text_table(strings: list[str]) -> np.ndarray:
    """(k, width) uint8 rows of guarded text cells, zero-padded on the right."""
    enc = [str(_cell(s)).encode("ascii", "replace") for s in strings]
    width = max([len(e) for e in enc] + [1])
    out = np.zeros((len(enc), width), np.uint8)
    for i, e in enumerate(enc):  # one row per reason code, not per station
        out[i, : len(e)] = np.frombuffer(e, np.uint8)
    return out


def _fast_chunk(profile: Profile, names: list[str], a: int, b: int) -> bytes | None:
    """CSV bytes (ASCII) of stations a..b, assembled as one byte matrix (no per-row Python): every
    column written into its own two-byte slots of one zeroed row matrix, then the zero bytes
    dropped."""
    from .stations import TORSION_REASONS

    cells = []
    for name in names:
        if name == "torsion_note":
            codes = sorted(TORSION_REASONS)
            table = _text_table([TORSION_REASONS[c] for c in codes])
            table = np.pad(table, ((0, 0), (0, table.shape[1] % 2))).view("<u2")
            cells.append(table[np.searchsorted(codes, profile.torsion_reason[a:b])])
        else:
            c = _fixed_layout(profile.column(name)[a:b], CSV_DECIMALS[name])
            if c is None:
                return None
            cells.append(c)
    widths = [c.shape[1] if isinstance(c, np.ndarray) else c.slots for c in cells]
    rows = np.zeros((b - a, sum(widths) + len(cells)), "<u2")
    at = 0
    for c, w in zip(cells, widths):
        if isinstance(c, np.ndarray):
            rows[:, at : at + w] = c
        else:
            _fixed_fill(rows[:, at : at + w], c)
        rows[:, at + w] = _COMMA
        at += w + 1
    rows[:, -1] = _NEWLINE  # the last separator ends the row
    flat = rows.view(np.uint8).ravel()
    return flat[flat != 0].tobytes()


def _write_csv_stream(profile: Profile, fh) -> None:
    for line in header_lines(profile):
        fh.write("# " + " ".join(line.split()) + "\n")
    names = [name for name, _ in profile.columns()]
    w = csv.writer(fh, lineterminator="\n")
    w.writerow(names)
    fast = all(n in CSV_DECIMALS or n == "torsion_note" for n in names)
    raw = getattr(fh, "buffer", None)  # a text file's byte stream: ASCII needs no encoding pass
    for a in range(0, len(profile), _CHUNK_ROWS):
        b = min(len(profile), a + _CHUNK_ROWS)
        data = _fast_chunk(profile, names, a, b) if fast else None
        if data is None:  # a column this writer cannot format exactly: the general path
            w.writerows(_rows(profile, a, b))
        elif raw is not None:
            fh.flush()  # what went through the text layer first
            raw.write(data)
        else:
            fh.write(data.decode("ascii"))


def write_xlsx(profile: Profile, out, force: bool = False) -> None:
    """Write an .xlsx workbook: sheet "profile" (one row per station), sheet "settings"."""
    from openpyxl import Workbook

    path = check_output_path(out, force)
    wb = Workbook(write_only=True)
    ws = wb.create_sheet("profile")
    ws.append([name for name, _ in profile.columns()])
    for row in _rows(profile):
        ws.append([None if c == "" else (float(c) if isinstance(c, str) and _is_number(c) else c) for c in row])
    info = wb.create_sheet("settings")
    for line in header_lines(profile):
        key, _, val = line.partition(": ")
        info.append([_cell(key), _cell(val)])
    buf = io.BytesIO()
    wb.save(buf)
    with atomic_open(path, "wb") as fh:
        fh.write(buf.getvalue())


def _is_number(s: str) -> bool:
    try:
        float(s)
    except ValueError:
        return False
    return True


def write_profile(profile: Profile, out: str, force: bool = False) -> None:
    """Write by extension: ``.xlsx`` workbook, otherwise CSV (``-`` = stdout)."""
    if str(out).lower().endswith(".xlsx"):
        write_xlsx(profile, out, force)
    elif str(out) == "-" or str(out).lower().endswith((".csv", ".txt")):
        write_csv(profile, out, force)
    else:
        raise InputError(str(out), "unknown output type; use a .csv or .xlsx file name, or - for stdout")
