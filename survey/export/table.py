"""Sections, profile and run settings as plain rows shared by the CSV, XLSX, GeoJSON and GPX
writers (one place decides column order, units and empty values)."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from datetime import datetime, timezone
from typing import Iterator, Sequence

import numpy as np

from .. import __version__
from ..design import CAUTION
from ..sections import KIND_DESIGN, SECTION_COLUMNS, Section
from ..stations import Profile
from .cells import iso_utc, neutralise, plain

#: Section table columns: the Section fields, ISO times after the epoch seconds, and the caution.
SECTION_TABLE_COLUMNS: tuple[tuple[str, str], ...] = (
    *SECTION_COLUMNS[:18],
    ("start_time_utc", "ISO 8601 UTC"),
    ("end_time_utc", "ISO 8601 UTC"),
    *SECTION_COLUMNS[18:],
    ("caution", "advisory note for design sections"),
)


@dataclass(frozen=True)
class RunInfo:
    """Provenance written beside the findings.

    Attributes
    ----------
    input_path
        The log as the user named it.
    input_sha256
        SHA-256 of the log bytes (hex).
    frame
        Description of the local frame.
    limits
        Thresholds used (``Limits.as_dict()``).
    settings
        Any other run settings worth recording (step, smoothing, ...), name -> value.
    tool_version
        ``survey.__version__``.
    created_utc
        When the export was made, ISO 8601 UTC.
    """

    input_path: str
    input_sha256: str
    frame: str = ""
    limits: dict = field(default_factory=dict)
    settings: dict = field(default_factory=dict)
    tool_version: str = __version__
    created_utc: str = field(
        default_factory=lambda: datetime.now(timezone.utc).isoformat(timespec="seconds").replace("+00:00", "Z")
    )

    @property
    def design_on(self) -> bool:
        return self.limits.get("design_speed_kmh") is not None

    @classmethod
    def for_log(cls, log_path, profile: Profile, limits, settings: dict | None = None) -> "RunInfo":
        """Provenance for a log: its SHA-256 (read now), the profile's frame and ``limits``
        (a ``survey.design.Limits`` or a plain dict)."""
        from ..marks import file_sha256

        lim = limits.as_dict() if hasattr(limits, "as_dict") else dict(limits)
        return cls(str(log_path), file_sha256(log_path)[0], profile.frame, lim, dict(settings or {}))


def section_record(sec: Section) -> dict:
    """One section as an ordered dict of plain values (None for not defined), not neutralised."""
    d = sec.as_dict()
    d["start_time_utc"] = iso_utc(sec.start_time_s)
    d["end_time_utc"] = iso_utc(sec.end_time_s)
    d["caution"] = sec.caution
    return {name: plain(d[name]) for name, _ in SECTION_TABLE_COLUMNS}


def section_rows(sections: Sequence[Section], guard: bool = True) -> tuple[list[str], list[list]]:
    """(header, rows) of the section table; ``guard`` neutralises formula-like text."""
    header = [name for name, _ in SECTION_TABLE_COLUMNS]
    rows = []
    for sec in sections:
        rec = section_record(sec)
        rows.append([neutralise(v) if guard else v for v in rec.values()])
    return header, rows


def profile_rows(profile: Profile, guard: bool = True, stride: int = 1) -> tuple[list[str], Iterator[list]]:
    """(header, row iterator) of the profile table (``Profile.columns()``), non-finite -> None;
    every ``stride``-th station."""
    header = [name for name, _ in profile.columns()]
    cols = []
    for name in header:
        arr = profile.column(name)[::stride]
        if arr.dtype.kind == "f":
            lst = arr.tolist()
            ok = np.isfinite(arr).tolist()
            cols.append([v if k else None for v, k in zip(lst, ok)])
        elif arr.dtype.kind in "iub":
            cols.append(arr.tolist())
        else:
            cols.append([neutralise(str(v)) if guard else str(v) for v in arr])

    def rows() -> Iterator[list]:
        for row in zip(*cols):
            yield list(row)

    return header, rows()


def run_settings_rows(
    run: RunInfo, profile: Profile | None, sections: Sequence[Section], guard: bool = True, extra: Sequence = ()
) -> list[list]:
    """(name, value) rows describing the run: tool, input and checksum, frame, thresholds, then
    ``extra`` (name, value) pairs from the writer."""
    counts: dict[str, int] = {}
    for s in sections:
        counts[s.kind] = counts.get(s.kind, 0) + 1
    rows: list[list] = [
        ["tool", "trackframe"],
        ["tool_version", run.tool_version],
        ["created_utc", run.created_utc],
        ["input_file", run.input_path],
        ["input_sha256", run.input_sha256],
        ["frame", run.frame or (profile.frame if profile is not None else "")],
    ]
    if profile is not None:
        rows += [
            ["height_ref", profile.height_ref],
            ["station_step_m", float(profile.step_m)],
            ["stations", len(profile)],
        ]
    for key, value in run.limits.items():
        rows.append([f"limit.{key}", _setting_value(value)])
    for key, value in run.settings.items():
        rows.append([f"setting.{key}", _setting_value(value)])
    for kind, n in sorted(counts.items()):
        rows.append([f"sections.{kind}", n])
    rows += [[k, v] for k, v in extra]
    if run.design_on or any(s.kind == KIND_DESIGN for s in sections):
        rows.append(["caution", CAUTION])
    if guard:
        rows = [[neutralise(k), neutralise(v)] for k, v in rows]
    return rows


def _setting_value(value):
    if value is None:
        return None
    if isinstance(value, (bool, int, float, str)):
        if isinstance(value, float) and not math.isfinite(value):
            return str(value)
        return value
    return str(value)
