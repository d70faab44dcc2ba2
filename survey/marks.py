"""Hand-marked sections, kept in a JSON sidecar file beside the log.

Sidecar
-------
``<log file name>.marks.json`` in the log's folder, e.g. ``ridge-run.gpx.marks.json``::

    {
      "format": "trackframe-marks",
      "version": 1,
      "log": {"name": "ridge-run.gpx", "sha256": "<hex>", "bytes": 12345},
      "next_id": 4,
      "marks": [{"id": 1, "start_m": 120.0, "end_m": 180.5, "note": "washout"}, ...]
    }

* Chainages are metres along the profile chainage of that log; floats are written with Python's
  shortest round-trip repr, so reloading restores them exactly.
* ``log.sha256`` is the checksum of the log's bytes when the marks were made. If the log has
  changed since, :class:`MarkStore` keeps the marks, sets ``log_changed`` and adds a warning;
  the recorded checksum stays until :meth:`MarkStore.accept_log` is called, so the warning is
  not silently lost by the next save.
* Every change is saved before the method returns, atomically (temporary file, fsync, rename,
  via ``survey.atomic``): a crash or ``kill -9`` at any moment leaves either the previous or the
  new sidecar, so at most the edit in flight is lost.
* A sidecar that cannot be read is never overwritten: :meth:`MarkStore.load` raises
  ``InputError`` and leaves it alone, or with ``recover=True`` moves it aside to
  ``<sidecar>.bad-<UTC time>`` and says so in ``warnings``.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import math
import os
import time
from dataclasses import dataclass, replace
from datetime import datetime, timezone
from pathlib import Path

from .atomic import atomic_write_bytes
from .errors import InputError

SIDECAR_SUFFIX = ".marks.json"
FORMAT_NAME = "trackframe-marks"
FORMAT_VERSION = 1
#: Temporary files of an interrupted save older than this are removed on load, seconds.
STALE_TEMP_AGE_S = 60.0


@dataclass(frozen=True)
class Mark:
    """A hand-marked section: chainage ends in metres (start <= end) and a free-text note."""

    id: int
    start_m: float
    end_m: float
    note: str = ""


def sidecar_path(log_path: str | os.PathLike[str]) -> Path:
    """The sidecar file for a log: same folder, log file name + ``.marks.json``."""
    p = Path(log_path)
    return p.with_name(p.name + SIDECAR_SUFFIX)


def file_sha256(path: str | os.PathLike[str]) -> tuple[str, int]:
    """(sha256 hex digest, size in bytes) of a file, read in chunks; OS errors -> InputError."""
    h = hashlib.sha256()
    size = 0
    try:
        with open(path, "rb") as fh:
            for chunk in iter(lambda: fh.read(1 << 20), b""):
                h.update(chunk)
                size += len(chunk)
    except FileNotFoundError:
        raise InputError(str(path), "no such file") from None
    except IsADirectoryError:
        raise InputError(str(path), "is a directory, not a log file") from None
    except PermissionError:
        raise InputError(str(path), "permission denied") from None
    except OSError as exc:
        raise InputError(str(path), f"cannot read: {exc.strerror or exc}") from None
    return h.hexdigest(), size


def _check_ends(where_path: Path, start_m: float, end_m: float, where: str | None) -> tuple[float, float]:
    try:
        a, b = float(start_m), float(end_m)
    except (TypeError, ValueError):
        raise InputError(str(where_path), "mark ends must be numbers (metres of chainage)", where) from None
    if not (math.isfinite(a) and math.isfinite(b)):
        raise InputError(str(where_path), "mark ends must be finite numbers (metres of chainage)", where)
    if a > b:
        raise InputError(str(where_path), f"mark start {a:g} m is after its end {b:g} m", where)
    return a, b


def _check_note(where_path: Path, note, where: str | None) -> str:
    if not isinstance(note, str):
        raise InputError(str(where_path), "mark note must be text", where)
    return note


class MarkStore:
    """The hand marks of one log, saved to its sidecar on every change.

    Use :meth:`load`; then :meth:`add`, :meth:`edit`, :meth:`delete` (each saves before
    returning and raises ``InputError`` without changing anything if the save fails).

    Attributes
    ----------
    log_path, path
        The log and its sidecar.
    log_sha256
        Checksum of the log as it is now.
    recorded_sha256
        Checksum stored in the sidecar (the log the marks were made on).
    warnings
        Messages for the user gathered while loading (changed log, moved-aside sidecar).
    """

    def __init__(
        self,
        log_path: Path,
        path: Path,
        log_sha256: str,
        log_bytes: int,
        recorded_sha256: str,
        marks: dict[int, Mark],
        next_id: int,
        warnings: list[str],
    ):
        self.log_path = log_path
        self.path = path
        self.log_sha256 = log_sha256
        self.log_bytes = log_bytes
        self.recorded_sha256 = recorded_sha256
        self._marks = marks
        self._next_id = next_id
        self.warnings = warnings

    # -- loading -------------------------------------------------------------------------------

    @classmethod
    def load(cls, log_path: str | os.PathLike[str], recover: bool = False) -> "MarkStore":
        """Open the marks of ``log_path`` (none yet if it has no sidecar; nothing is written).

        Raises ``InputError`` if the log cannot be read, or if the sidecar is unreadable and
        ``recover`` is false (the sidecar is then left untouched). With ``recover`` true a bad
        sidecar is renamed to ``<sidecar>.bad-<UTC time>``, the store starts empty and a warning
        says where the old file went.
        """
        log = Path(log_path)
        sha, size = file_sha256(log)
        side = sidecar_path(log)
        _remove_stale_temps(side)
        warnings: list[str] = []
        if not side.exists():
            return cls(log, side, sha, size, sha, {}, 1, warnings)
        try:
            recorded, marks, next_id = _parse_sidecar(side)
        except InputError as exc:
            if not recover:
                raise InputError(
                    str(side), f"{exc.message}; the file was left as it is (move it aside to start afresh)",
                    exc.where,
                ) from None
            stamp = datetime.now(timezone.utc).strftime("%Y%m%dT%H%M%SZ")
            bad = side.with_name(f"{side.name}.bad-{stamp}")
            n = 1
            while bad.exists():
                n += 1
                bad = side.with_name(f"{side.name}.bad-{stamp}-{n}")
            os.replace(side, bad)
            warnings.append(f"{side}: {exc.message}; moved it aside to {bad.name} and started with no marks")
            return cls(log, side, sha, size, sha, {}, 1, warnings)
        if recorded != sha:
            warnings.append(
                f"{log}: the log has changed since its marks were made (checksum differs); "
                f"{len(marks)} mark(s) kept: check their chainages"
            )
        return cls(log, side, sha, size, recorded, marks, next_id, warnings)

    # -- reading -------------------------------------------------------------------------------

    @property
    def marks(self) -> tuple[Mark, ...]:
        """All marks sorted by start chainage (then id)."""
        return tuple(sorted(self._marks.values(), key=lambda m: (m.start_m, m.end_m, m.id)))

    def __len__(self) -> int:
        return len(self._marks)

    def get(self, mark_id: int) -> Mark:
        try:
            return self._marks[int(mark_id)]
        except (KeyError, ValueError, TypeError):
            raise InputError(str(self.path), f"no mark with id {mark_id}") from None

    @property
    def log_changed(self) -> bool:
        """True when the log's checksum differs from the one the marks were made on."""
        return self.recorded_sha256 != self.log_sha256

    # -- changing (each saves before returning) ------------------------------------------------

    def add(self, start_m: float, end_m: float, note: str = "") -> Mark:
        """Create a mark and save; returns it (with its new id)."""
        a, b = _check_ends(self.path, start_m, end_m, "new mark")
        mark = Mark(self._next_id, a, b, _check_note(self.path, note, "new mark"))
        self._commit({**self._marks, mark.id: mark}, self._next_id + 1)
        return mark

    def edit(
        self, mark_id: int, start_m: float | None = None, end_m: float | None = None, note: str | None = None
    ) -> Mark:
        """Change a mark's ends and/or note (``None`` keeps a value) and save; returns it."""
        old = self.get(mark_id)
        where = f"mark {old.id}"
        a, b = _check_ends(
            self.path,
            old.start_m if start_m is None else start_m,
            old.end_m if end_m is None else end_m,
            where,
        )
        new = replace(old, start_m=a, end_m=b, note=old.note if note is None else _check_note(self.path, note, where))
        self._commit({**self._marks, new.id: new}, self._next_id)
        return new

    def delete(self, mark_id: int) -> Mark:
        """Remove a mark and save; returns the removed mark."""
        old = self.get(mark_id)
        marks = dict(self._marks)
        del marks[old.id]
        self._commit(marks, self._next_id)
        return old

    def accept_log(self) -> None:
        """Record the log's current checksum (the user has checked the marks) and save."""
        prev = self.recorded_sha256
        self.recorded_sha256 = self.log_sha256
        try:
            self._commit(self._marks, self._next_id)
        except BaseException:
            self.recorded_sha256 = prev
            raise

    # -- saving --------------------------------------------------------------------------------

    def to_json(self, marks: dict[int, Mark] | None = None, next_id: int | None = None) -> str:
        """The sidecar text for the given (default: current) marks."""
        marks = self._marks if marks is None else marks
        doc = {
            "format": FORMAT_NAME,
            "version": FORMAT_VERSION,
            "log": {"name": self.log_path.name, "sha256": self.recorded_sha256, "bytes": self.log_bytes},
            "next_id": self._next_id if next_id is None else next_id,
            "marks": [
                {"id": m.id, "start_m": m.start_m, "end_m": m.end_m, "note": m.note}
                for m in sorted(marks.values(), key=lambda m: m.id)
            ],
        }
        return json.dumps(doc, indent=1, ensure_ascii=False, allow_nan=False) + "\n"

    def _commit(self, marks: dict[int, Mark], next_id: int) -> None:
        """Write the new state atomically, then adopt it (memory never runs ahead of disk)."""
        data = self.to_json(marks, next_id).encode("utf-8")
        try:
            atomic_write_bytes(self.path, data)
        except OSError as exc:
            raise InputError(str(self.path), f"cannot save marks: {exc.strerror or exc}") from None
        self._marks = marks
        self._next_id = next_id


def _parse_sidecar(side: Path) -> tuple[str, dict[int, Mark], int]:
    """Read and validate a sidecar: (recorded sha256, marks by id, next id). InputError if bad."""
    try:
        raw = side.read_bytes()
    except OSError as exc:
        raise InputError(str(side), f"cannot read marks file: {exc.strerror or exc}") from None
    try:
        doc = json.loads(raw.decode("utf-8"), parse_constant=_refuse_constant)
    except (UnicodeDecodeError, ValueError) as exc:
        raise InputError(str(side), f"marks file is not valid JSON ({exc})") from None
    if not isinstance(doc, dict) or doc.get("format") != FORMAT_NAME:
        raise InputError(str(side), f"not a trackframe marks file (no \"format\": \"{FORMAT_NAME}\")")
    version = doc.get("version")
    if version != FORMAT_VERSION:
        raise InputError(
            str(side), f"marks file format version {version!r} is not supported (this trackframe reads {FORMAT_VERSION})"
        )
    log = doc.get("log")
    if not isinstance(log, dict) or not isinstance(log.get("sha256"), str):
        raise InputError(str(side), "marks file has no log checksum (\"log\": {\"sha256\": ...})")
    items = doc.get("marks")
    if not isinstance(items, list):
        raise InputError(str(side), "marks file has no \"marks\" list")
    marks: dict[int, Mark] = {}
    for k, item in enumerate(items):
        where = f"marks[{k}]"
        if not isinstance(item, dict):
            raise InputError(str(side), "mark is not an object", where)
        mid = item.get("id")
        if not isinstance(mid, int) or isinstance(mid, bool) or mid < 1:
            raise InputError(str(side), "mark id must be a positive whole number", where)
        if mid in marks:
            raise InputError(str(side), f"mark id {mid} appears twice", where)
        for key in ("start_m", "end_m"):
            if not isinstance(item.get(key), (int, float)) or isinstance(item.get(key), bool):
                raise InputError(str(side), f"mark {key} must be a number", where)
        a, b = _check_ends(side, item["start_m"], item["end_m"], where)
        marks[mid] = Mark(mid, a, b, _check_note(side, item.get("note", ""), where))
    next_id = doc.get("next_id")
    top = max(marks, default=0) + 1
    if not isinstance(next_id, int) or isinstance(next_id, bool) or next_id < top:
        next_id = top
    return log["sha256"], marks, next_id


def _refuse_constant(name: str):
    raise ValueError(f"{name} is not allowed")


def _remove_stale_temps(side: Path) -> None:
    """Remove temporary files an interrupted save left behind (only old ones: a save by another
    process may be in flight)."""
    now = time.time()
    with contextlib.suppress(OSError):
        prefix = f".{side.name}."
        for entry in os.scandir(side.parent):
            if entry.name.startswith(prefix) and entry.name.endswith(".part"):
                with contextlib.suppress(OSError):
                    if now - entry.stat().st_mtime > STALE_TEMP_AGE_S:
                        os.unlink(entry.path)
