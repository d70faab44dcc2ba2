"""Findings as an XLSX workbook (openpyxl, write-only mode): sheets "sections", "profile" and
"run settings". Text cells are neutralised against formula injection and stored as text;
numbers stay numbers; non-finite values are empty cells."""

from __future__ import annotations

from typing import IO, Sequence

from openpyxl import Workbook
from openpyxl.cell import WriteOnlyCell
from openpyxl.styles import Font

from ..sections import Section
from ..stations import Profile
from .cells import xml_safe
from .table import RunInfo, profile_rows, run_settings_rows, section_rows

SHEET_SECTIONS = "sections"
SHEET_PROFILE = "profile"
SHEET_RUN = "run settings"
#: Rows a worksheet can hold (Excel specification limit, 2^20).
MAX_SHEET_ROWS = 1_048_576


def _text_safe(row: list) -> list:
    out = []
    for v in row:
        if isinstance(v, str):
            v = xml_safe(v)
        out.append(v)
    return out


def write_findings_xlsx(
    fh: IO[bytes], sections: Sequence[Section], profile: Profile | None, run: RunInfo
) -> None:
    """Write the workbook to a binary stream."""
    wb = Workbook(write_only=True)
    bold = Font(bold=True)

    def header_cells(ws, names):
        cells = []
        for name in names:
            c = WriteOnlyCell(ws, value=name)
            c.font = bold
            cells.append(c)
        return cells

    ws = wb.create_sheet(SHEET_SECTIONS)
    ws.freeze_panes = "A2"
    header, rows = section_rows(sections, guard=True)
    ws.append(header_cells(ws, header))
    for row in rows:
        ws.append(_safe_cells(ws, row))

    extra = []
    if profile is not None:
        # A sheet holds MAX_SHEET_ROWS rows including the header; a longer profile is thinned
        # to every k-th station and the run settings say so.
        stride = max(1, -(-len(profile) // (MAX_SHEET_ROWS - 1)))
        extra.append(
            ["profile_sheet", "every station" if stride == 1 else f"every {stride}th station (sheet row limit {MAX_SHEET_ROWS})"]
        )
        ws = wb.create_sheet(SHEET_PROFILE)
        ws.freeze_panes = "A2"
        header, rows = profile_rows(profile, guard=True, stride=stride)
        ws.append(header_cells(ws, header))
        for row in rows:
            ws.append(_safe_cells(ws, row))

    ws = wb.create_sheet(SHEET_RUN)
    ws.append(header_cells(ws, ["setting", "value"]))
    for row in run_settings_rows(run, profile, sections, guard=True, extra=extra):
        ws.append(_safe_cells(ws, row))
    wb.save(fh)


def _safe_cells(ws, row: list) -> list:
    """Plain values, except text that must be forced to a string cell.

    openpyxl turns any text starting with "=" into a formula; neutralised text starts with a
    quote so it cannot, but we still force the string type for every text cell.
    """
    out = []
    for v in _text_safe(row):
        if isinstance(v, str):
            c = WriteOnlyCell(ws, value=v)
            c.data_type = "s"
            out.append(c)
        else:
            out.append(v)
    return out
