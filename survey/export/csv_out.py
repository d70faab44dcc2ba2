"""Sections as CSV (RFC 4180: comma separated, CRLF line ends, quotes doubled inside quoted
fields), written with the standard csv module. Text cells are neutralised against formula
injection; numbers are written with Python's shortest round-trip repr; empty = not defined."""

from __future__ import annotations

import csv
from typing import IO, Sequence

from ..sections import Section
from .table import section_rows


def write_sections_csv(fh: IO[str], sections: Sequence[Section]) -> None:
    """Write the section table to a text stream opened with ``newline=""``."""
    header, rows = section_rows(sections, guard=True)
    writer = csv.writer(fh, dialect="excel", lineterminator="\r\n")
    writer.writerow(header)
    writer.writerows(["" if v is None else v for v in row] for row in rows)
