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
_CHUNK_ROWS = 50_000
#: 10^1 .. 10^18: a non-negative integer k has searchsorted(_POW10, k, "right") + 1 digits.
_POW10 = 10 ** np.arange(1, 19, dtype=np.int64)
_MAX_SCALED = 9.0e17  # below 2^63 with margin


def _fixed_bytes(values: np.ndarray, decimals: int) -> np.ndarray | None:
    """(n, width) uint8 ASCII of ``values`` in fixed-point with ``decimals`` decimals, padded
    with zero bytes on the left; a non-finite value gives an empty cell (all zeros). None when a
    value is too large for exact integer formatting (the caller then uses the slow path).

    Digits are peeled off the scaled integer q one at a time, q = 10 floor(q / 10) + digit. Below
    2^52 this is done in float64 (vectorised division and floor, exact there: q / 10 is correctly
    rounded and its fraction is at least 0.1 away from the next integer), about three times
    faster than int64 division; larger q use int64."""
    v = np.asarray(values, dtype=float)
    n = len(v)
    fin = np.isfinite(v)
    scale = 10.0**decimals
    a = np.where(fin, np.abs(v) * scale, 0.0)
    if np.any(a >= _MAX_SCALED):
        return None
    q = np.rint(a)
    exact_float = not np.any(q >= 2.0**52)
    if not exact_float:
        q = q.astype(np.int64)
    neg = fin & (v < 0) & (q > 0)
    ip = np.floor(q / scale) if exact_float else q // 10 ** np.int64(decimals)
    nd = np.searchsorted(_POW10, ip, side="right") + 1  # integer digits
    wi = int(nd.max(initial=1))
    width = 1 + wi + (1 + decimals if decimals else 0)
    out = np.zeros((n, width), np.uint8)
    col = width - 1
    digit = np.empty_like(q)
    for j in range(decimals + 1 + wi if decimals else wi):
        if decimals and j == decimals:
            out[:, col] = 46  # "."
            col -= 1
            continue
        if exact_float:
            rest = np.floor(q / 10.0)
            np.subtract(q, 10.0 * rest, out=digit)
        else:
            rest, digit = np.divmod(q, 10)
        digit += 48
        if j > decimals:  # integer digits beyond the first: blank where the number has fewer
            digit[j - decimals - (1 if decimals else 0) >= nd] = 0
        out[:, col] = digit
        q = rest
        col -= 1
    rows = np.flatnonzero(neg)
    out[rows, wi - nd[rows]] = 45  # "-" just left of the first digit
    out[~fin] = 0
    return out


def _text_table(strings: list[str]) -> np.ndarray:
    """(k, width) uint8 rows of guarded text cells, zero-padded on the right."""
    enc = [str(_cell(s)).encode("ascii", "replace") for s in strings]
    width = max([len(e) for e in enc] + [1])
    out = np.zeros((len(enc), width), np.uint8)
    for i, e in enumerate(enc):  # one row per reason code, not per station
        out[i, : len(e)] = np.frombuffer(e, np.uint8)
    return out


def _fast_chunk(profile: Profile, names: list[str], a: int, b: int) -> bytes | None:
    """CSV bytes (ASCII) of stations a..b, assembled as one byte matrix (no per-row Python)."""
    from .stations import TORSION_REASONS

    sep = np.full((b - a, 1), 44, np.uint8)
    parts = []
    for i, name in enumerate(names):
        if name == "torsion_note":
            codes = sorted(TORSION_REASONS)
            table = _text_table([TORSION_REASONS[c] for c in codes])
            lookup = np.searchsorted(codes, profile.torsion_reason[a:b])
            block = table[lookup]
        else:
            block = _fixed_bytes(profile.column(name)[a:b], CSV_DECIMALS[name])
            if block is None:
                return None
        parts.append(block)
        parts.append(sep if i < len(names) - 1 else np.full((b - a, 1), 10, np.uint8))
    flat = np.concatenate(parts, axis=1).ravel()
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
