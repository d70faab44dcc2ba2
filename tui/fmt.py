"""Number formatting for the screen: units always shown, "n/a" for undefined, fixed widths."""

from __future__ import annotations

import math
from datetime import datetime, timezone

NA = "n/a"


def finite(x: float) -> bool:
    return x is not None and math.isfinite(x)


def chainage(m: float) -> str:
    """Chainage for labels: ``850 m``, ``12.35 km``."""
    if not finite(m):
        return NA
    if abs(m) < 10_000:
        return f"{m:,.0f} m".replace(",", " ")
    return f"{m / 1000:,.2f} km".replace(",", " ")


def chainage_exact(m: float) -> str:
    """Chainage for the readout, to a decimetre: ``12 345.6 m``."""
    return NA if not finite(m) else f"{m:,.1f} m".replace(",", " ")


def short(x: float) -> str:
    """Compact limit value: ``6``, ``0.05``, ``229``."""
    return NA if not finite(x) else f"{x:.3g}"


def sig(x: float, digits: int = 3) -> str:
    """Short number with ``digits`` significant figures (no unit)."""
    if not finite(x):
        return NA if x is None or math.isnan(x) else ("∞" if x > 0 else "-∞")
    if x == 0:
        return "0"
    ax = abs(x)
    if 1e-3 <= ax < 1e5:
        dec = max(0, digits - 1 - int(math.floor(math.log10(ax))))
        text = f"{x:.{dec}f}"
        return text
    return f"{x:.{max(digits - 1, 0)}e}".replace("e-0", "e-").replace("e+0", "e")


def axis(x: float, width: int = 7, digits: int = 3) -> str:
    """A number in at most ``width`` characters (fewer significant digits if needed)."""
    for d in range(digits, 0, -1):
        text = sig(x, d)
        if len(text) <= width:
            return text
    return text[:width]


def length(m: float) -> str:
    """A radius or distance: ``12.3 m``, ``1.25 km``, ``∞``."""
    if m is None or math.isnan(m):
        return NA
    if math.isinf(m):
        return "∞ (straight)"
    if abs(m) >= 10_000:
        return f"{m / 1000:.1f} km"
    if abs(m) >= 1000:
        return f"{m / 1000:.2f} km"
    return f"{m:.1f} m"


def short_length(m: float) -> str:
    """A length in at most 7 characters for axis labels: ``22.3 m``, ``397 m``, ``12.5 km``."""
    if not finite(m):
        return NA if m is None or math.isnan(m) else "∞"
    if abs(m) < 1000:
        return f"{m:.3g} m"
    return f"{m / 1000:.3g} km"


def latlon(lat: float, lon: float) -> str:
    if not (finite(lat) and finite(lon)):
        return NA
    return f"{abs(lat):.6f}{'N' if lat >= 0 else 'S'} {abs(lon):.6f}{'E' if lon >= 0 else 'W'}"


def duration(seconds: float) -> str:
    if not finite(seconds):
        return NA
    s = int(round(seconds))
    return f"{s // 3600}h{s % 3600 // 60:02d}m{s % 60:02d}s"


def clock(t: float, date: bool = True) -> str:
    """UNIX seconds -> ``2026-11-20 10:05:12.3Z`` (UTC; without the date: ``10:05:12.3Z``)."""
    if not finite(t):
        return NA
    dt = datetime.fromtimestamp(t, tz=timezone.utc)
    return dt.strftime("%Y-%m-%d %H:%M:%S." if date else "%H:%M:%S.") + f"{dt.microsecond // 100_000}Z"


def signed(x: float, fmt: str) -> str:
    return NA if not finite(x) else format(x, "+" + fmt)
