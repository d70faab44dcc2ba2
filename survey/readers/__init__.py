"""Log readers: one module per format, all returning a ``survey.track.Track``.

``read_log`` is the single entry point used by the CLI and the TUI: it checks the path, reads the
bytes once, picks the format (from ``fmt``, else the extension, else the first bytes) and calls the
format's reader. Every problem with the input is raised as ``InputError``.
"""

from __future__ import annotations

import os
from pathlib import Path

from ..errors import InputError
from ..track import Track

FORMATS = ("gpx", "nmea", "csv")
_EXTENSIONS = {
    ".gpx": "gpx",
    ".nmea": "nmea",
    ".nma": "nmea",
    ".ubx.txt": "nmea",
    ".csv": "csv",
    ".tsv": "csv",
}


def sniff_format(path: str, head: bytes) -> str:
    """Guess the format from the file name, then from its first non-blank bytes.

    Raises ``InputError`` when neither tells.
    """
    suffix = Path(path).suffix.lower()
    if suffix in _EXTENSIONS:
        return _EXTENSIONS[suffix]
    text = head.lstrip(b"\xef\xbb\xbf \t\r\n")
    if text.startswith(b"<"):
        return "gpx"
    if text.startswith((b"$", b"!")):
        return "nmea"
    if b"," in text.split(b"\n", 1)[0] and b"\x00" not in text:
        return "csv"
    raise InputError(path, "cannot tell the log format (expected GPX, NMEA 0183 or CSV); use --format")


def read_bytes(path: str | os.PathLike[str]) -> bytes:
    """Read a whole input file, turning every OS-level problem into one ``InputError`` line."""
    p = str(path)
    try:
        if os.path.isdir(p):
            raise InputError(p, "is a directory, not a log file")
        with open(p, "rb") as fh:
            data = fh.read()
    except FileNotFoundError:
        raise InputError(p, "no such file") from None
    except PermissionError:
        raise InputError(p, "permission denied") from None
    except IsADirectoryError:
        raise InputError(p, "is a directory, not a log file") from None
    except OSError as exc:
        raise InputError(p, f"cannot read: {exc.strerror or exc}") from None
    if not data.strip():
        raise InputError(p, "file is empty")
    return data


def read_log(
    path: str | os.PathLike[str],
    fmt: str | None = None,
    csv_columns: dict[str, str] | None = None,
    height_ref: str | None = None,
) -> Track:
    """Read one GNSS log into a Track (raw: not yet cleaned).

    Parameters
    ----------
    path
        Log file (GPX 1.0/1.1, NMEA 0183 text, or CSV).
    fmt
        ``"gpx"``, ``"nmea"`` or ``"csv"`` to override detection.
    csv_columns
        CSV only: explicit mapping of role -> column name (roles: ``time``, ``lat``, ``lon``,
        ``height``, ``speed``, ``accuracy``, ``hdop``, ``satellites``, ``date`` for a separate date column).
    height_ref
        CSV only: what the height column is measured from (``"ellipsoid"`` or ``"msl"``).
    """
    p = str(path)
    data = read_bytes(p)
    kind = fmt or sniff_format(p, data[:4096])
    if kind not in FORMATS:
        raise InputError(p, f"unknown format {kind!r} (choose from {', '.join(FORMATS)})")
    if kind == "gpx":
        from .gpx import read_gpx

        track = read_gpx(p, data)
    elif kind == "nmea":
        from .nmea import read_nmea

        track = read_nmea(p, data)
    else:
        from .csvlog import read_csv

        track = read_csv(p, data, columns=csv_columns, height_ref=height_ref)
    if len(track) == 0:
        raise InputError(p, "no position fixes found")
    return track
