"""Cell values for spreadsheets and text tables: formula-injection guard and plain scalars.

Formula injection (OWASP "CSV Injection"): a text cell that begins with ``=``, ``+``, ``-``,
``@``, a tab or a carriage return may be run as a formula when the file is opened in a
spreadsheet. Such *text* is prefixed with a single quote; numbers are left as numbers, so a
negative grade stays the number -3.5 and is never touched.
"""

from __future__ import annotations

import math
import re
from datetime import datetime, timezone

import numpy as np

#: Leading characters that make a spreadsheet read a text cell as a formula (OWASP CSV Injection).
FORMULA_PREFIXES = ("=", "+", "-", "@", "\t", "\r")

#: Characters XML 1.0 does not allow (C0 controls other than tab, LF, CR; surrogates; FFFE/FFFF).
_XML_ILLEGAL = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ud800-\udfff\ufffe\uffff]")


def neutralise(value):
    """Return ``value`` with a leading single quote if it is text that starts like a formula.

    Non-text values (numbers, None, booleans) are returned unchanged.
    """
    if isinstance(value, str) and value.startswith(FORMULA_PREFIXES):
        return "'" + value
    return value


def xml_safe(text: str) -> str:
    """Replace characters XML 1.0 cannot carry with U+FFFD (for GPX and XLSX text)."""
    return _XML_ILLEGAL.sub("\ufffd", text)


def plain(value):
    """A Python scalar for writers: numpy scalars unwrapped; NaN and +-inf become None.

    Non-finite numbers are written as empty cells / JSON null: NaN means "not defined" and an
    infinite radius means "straight" (the column descriptions say so).
    """
    if isinstance(value, (np.generic,)):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def iso_utc(time_s: float) -> str | None:
    """ISO 8601 UTC text for seconds since 1970-01-01T00:00:00Z (None when not finite)."""
    if time_s is None or not math.isfinite(time_s):
        return None
    return datetime.fromtimestamp(float(time_s), timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z")
