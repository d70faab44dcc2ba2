"""Atomic file output: write to a temporary file beside the target, fsync, then rename.

A crash or error at any moment leaves either the old file or the complete new one, never a
half-written file, and no temporary file behind.
"""

from __future__ import annotations

import contextlib
import glob
import os
import tempfile
import time
from pathlib import Path
from typing import IO, Iterator

from .errors import InputError

#: Age after which a temporary ``.part`` file is taken as left by a killed writer, s.
STALE_PART_S = 60.0


def check_output_path(path: str | os.PathLike[str], force: bool = False) -> Path:
    """Refuse to clobber an existing file unless ``force``; refuse a missing parent folder."""
    p = Path(path)
    if p.is_dir():
        raise InputError(str(p), "is a directory; give an output file name")
    if p.exists() and not force:
        raise InputError(str(p), "already exists; use --force to overwrite")
    parent = p.parent if str(p.parent) else Path(".")
    if not parent.is_dir():
        raise InputError(str(p), f"folder {str(parent)!r} does not exist")
    return p


@contextlib.contextmanager
def atomic_open(path: str | os.PathLike[str], mode: str = "w", **kwargs) -> Iterator[IO]:
    """Open a temporary file next to ``path``; on clean exit fsync and rename it over ``path``.

    On any exception the temporary file is removed and the exception propagates; ``path`` is
    untouched.
    """
    target = Path(path)
    remove_stale_parts(target)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent or ".")
    try:
        # mkstemp creates 0600; give the file the mode a plain open() would (0666 less umask).
        os.chmod(tmp, 0o666 & ~_current_umask())
        with os.fdopen(fd, mode, **kwargs) as fh:
            yield fh
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, target)
        _fsync_dir(target.parent)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise


def remove_stale_parts(target: Path, older_than_s: float = STALE_PART_S) -> list[Path]:
    """Delete temporary files a killed writer left beside ``target`` (``.NAME.*.part`` older than
    ``older_than_s`` seconds; a live writer's file is younger). Returns what was removed."""
    removed = []
    now = time.time()
    for part in (target.parent or Path(".")).glob(f".{glob.escape(target.name)}.*.part"):
        with contextlib.suppress(OSError):
            if now - part.stat().st_mtime > older_than_s:
                part.unlink()
                removed.append(part)
    return removed


def atomic_write_bytes(path: str | os.PathLike[str], data: bytes) -> None:
    """Write ``data`` to ``path`` atomically."""
    with atomic_open(path, "wb") as fh:
        fh.write(data)


def _current_umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def _fsync_dir(folder: Path) -> None:
    """Make the rename itself durable (best effort: not every filesystem allows it)."""
    with contextlib.suppress(OSError):
        dfd = os.open(str(folder or "."), os.O_RDONLY)
        try:
            os.fsync(dfd)
        finally:
            os.close(dfd)
