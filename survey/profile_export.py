"""Write a ``Profile`` as CSV (file or stdout) or as an .xlsx workbook, atomically.

CSV: a header comment block (lines starting with ``#``: tool version, units, frame, height
reference, smoothing settings, messages), then one header row of ``PROFILE_COLUMNS`` names and
one row per station (RFC 4180 quoting via the ``csv`` module). Empty cells mean "undefined"
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
from .stations import PROFILE_COLUMNS, Profile

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
    lines += [f"column {name}: {unit}" for name, unit in PROFILE_COLUMNS]
    return lines


def _cell(value):
    if isinstance(value, str):
        return "'" + value if value.startswith(_DANGEROUS) else value
    if isinstance(value, (float, np.floating)):
        return "" if not np.isfinite(value) else repr(float(value))
    return value


def _rows(profile: Profile):
    cols = [profile.column(name) for name, _ in PROFILE_COLUMNS]
    for i in range(len(profile)):
        yield [_cell(c[i].item() if hasattr(c[i], "item") else c[i]) for c in cols]


def write_csv(profile: Profile, out, force: bool = False) -> None:
    """Write CSV to path ``out`` (or stdout when ``out == "-"``)."""
    if str(out) == "-":
        _write_csv_stream(profile, sys.stdout)
        return
    path = check_output_path(out, force)
    with atomic_open(path, "w", newline="", encoding="utf-8") as fh:
        _write_csv_stream(profile, fh)


def _write_csv_stream(profile: Profile, fh) -> None:
    for line in header_lines(profile):
        fh.write("# " + " ".join(line.split()) + "\n")
    w = csv.writer(fh, lineterminator="\n")
    w.writerow([name for name, _ in PROFILE_COLUMNS])
    w.writerows(_rows(profile))


def write_xlsx(profile: Profile, out, force: bool = False) -> None:
    """Write an .xlsx workbook: sheet "profile" (one row per station), sheet "settings"."""
    from openpyxl import Workbook

    path = check_output_path(out, force)
    wb = Workbook(write_only=True)
    ws = wb.create_sheet("profile")
    ws.append([name for name, _ in PROFILE_COLUMNS])
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
