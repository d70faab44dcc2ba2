"""Export findings: sections (and the profile and run settings) to CSV, XLSX, GeoJSON or GPX.

``write_findings(path, sections, profile, run, force=False)`` picks the format from the
extension (``.csv``, ``.xlsx``, ``.geojson``/``.json``, ``.gpx``; ``-`` is CSV on stdout). It
refuses to overwrite an existing file unless ``force``, and writes atomically (temporary file,
fsync, rename): on any error the target is untouched and no partial file is left.

What each format holds:

* CSV (RFC 4180): the section table.
* XLSX: sheets "sections", "profile" (every station) and "run settings" (tool version, input
  file and its SHA-256, frame, thresholds).
* GeoJSON (RFC 7946): one LineString feature per section; run settings as a foreign member.
* GPX 1.1: one track per section.

Text cells of CSV and XLSX are neutralised against formula injection (see ``cells``).
"""

from __future__ import annotations

import io
import os
import sys
from pathlib import Path
from typing import IO, Sequence

from ..atomic import atomic_open, check_output_path
from ..errors import InputError
from ..sections import Section
from ..stations import Profile
from .cells import FORMULA_PREFIXES, neutralise
from .csv_out import write_sections_csv
from .geojson_out import feature_collection, write_sections_geojson
from .gpx_out import write_sections_gpx
from .table import SECTION_TABLE_COLUMNS, RunInfo, profile_rows, run_settings_rows, section_rows
from .xlsx_out import SHEET_PROFILE, SHEET_RUN, SHEET_SECTIONS, write_findings_xlsx

__all__ = [
    "EXTENSIONS",
    "FORMULA_PREFIXES",
    "RunInfo",
    "SECTION_TABLE_COLUMNS",
    "SHEET_PROFILE",
    "SHEET_RUN",
    "SHEET_SECTIONS",
    "STDOUT",
    "export_format",
    "feature_collection",
    "neutralise",
    "profile_rows",
    "run_settings_rows",
    "section_rows",
    "write_findings",
    "write_sections_csv",
    "write_sections_geojson",
    "write_sections_gpx",
    "write_findings_xlsx",
]

#: Output name meaning "CSV on standard output".
STDOUT = "-"
#: Extension -> format.
EXTENSIONS = {".csv": "csv", ".xlsx": "xlsx", ".geojson": "geojson", ".json": "geojson", ".gpx": "gpx"}


def export_format(path: str | os.PathLike[str]) -> str:
    """Format name for an output path (``InputError`` for an unknown extension)."""
    if str(path) == STDOUT:
        return "csv"
    suffix = Path(path).suffix.lower()
    try:
        return EXTENSIONS[suffix]
    except KeyError:
        raise InputError(
            str(path), f"unknown output format {suffix or '(no extension)'!r}: use .csv, .xlsx, .geojson or .gpx, or - for CSV on stdout"
        ) from None


def write_findings(
    path: str | os.PathLike[str],
    sections: Sequence[Section],
    profile: Profile,
    run: RunInfo,
    force: bool = False,
    stdout: IO[str] | None = None,
) -> str:
    """Write ``sections`` (plus profile and run settings where the format has room) to ``path``.

    Returns the format written. Raises ``InputError`` for an unknown extension, an existing file
    without ``force``, a missing folder, or an OS error while writing (nothing is left behind).
    """
    fmt = export_format(path)
    if str(path) == STDOUT:
        buf = io.StringIO(newline="")
        write_sections_csv(buf, sections)
        (stdout or sys.stdout).write(buf.getvalue())
        return fmt
    target = check_output_path(path, force)
    try:
        if fmt == "xlsx":
            with atomic_open(target, "wb") as fh:
                write_findings_xlsx(fh, sections, profile, run)
        elif fmt == "gpx":
            with atomic_open(target, "wb") as fh:
                write_sections_gpx(fh, sections, profile, run)
        else:
            with atomic_open(target, "w", encoding="utf-8", newline="") as fh:
                if fmt == "csv":
                    write_sections_csv(fh, sections)
                else:
                    write_sections_geojson(fh, sections, profile, run)
    except OSError as exc:
        raise InputError(str(path), f"cannot write: {exc.strerror or exc}") from None
    return fmt
