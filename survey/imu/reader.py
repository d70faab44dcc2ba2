"""IMU CSV logs -> ``ImuLog`` (body axes x forward, y left, z up; SI units; GNSS clock).

Columns (header first; names case-insensitive, punctuation ignored)
-------------------------------------------------------------------
==============  =================================================================================
role            header names recognised
==============  =================================================================================
time            ``time``, ``timestamp``, ``utc``, ``time_utc``, ``datetime``: UNIX epoch seconds
                or ISO 8601 text on the GNSS log's clock (naive ISO times are taken as UTC)
relative time   ``time_s``, ``t_s``, ``elapsed_s``, ``rel_time_s``: seconds from an arbitrary
                start; needs ``time_offset_s`` (``--imu-time-offset``), the UNIX time of 0
accelerometer   ``ax ay az`` with unit suffix ``_mps2`` / ``_ms2`` (m/s^2) or ``_g``
                (standard gravity 9.80665 m/s^2, CGPM 1901 conventional value); a bare ``ax``
                needs ``accel_unit``
gyro            ``gx gy gz`` with ``_radps`` / ``_rads`` (rad/s) or ``_dps`` / ``_degps``
                (deg/s); a bare ``gx`` needs ``gyro_unit``
magnetometer    ``mx my mz`` (optional, any unit: kept as read, rotated with the body axes)
attitude        ``roll pitch yaw`` with ``_deg`` or ``_rad`` (optional; logger's own estimate,
                kept for comparison only)
==============  =================================================================================

``time_offset_s`` is added to every time (absolute or relative): IMU time on the GNSS clock =
file time + offset. ``axes="frd"`` reads forward-right-down logs; they are turned to
forward-left-up by negating y and z (a 180 deg rotation about x, so both vectors and rates follow
the same rule).

Documented handling of bad rows
-------------------------------
* A cell that is not a number (or a time that is neither a number nor ISO 8601) is an
  ``InputError`` naming the line.
* Rows with an empty or NaN sensor/time cell, and rows cut short, are dropped and counted
  (``ImuLog.dropped``); the filter then bridges them like a gap.
* Repeated timestamps: the later rows are dropped and counted.
* Time going backwards is an ``InputError`` naming the line (a logger clock reset: split the
  file).

Rate, jitter, gaps, saturation and overlap with the GNSS log are measured by ``check_imu``.
"""

from __future__ import annotations

import csv
import io
import re
from dataclasses import dataclass, field, replace
from datetime import datetime, timezone

import numpy as np
from numpy.typing import NDArray

from ..errors import InputError

FloatArray = NDArray[np.float64]

#: Standard gravity, m/s^2 (conventional value, 3rd CGPM 1901).
STANDARD_GRAVITY_MPS2 = 9.80665

_EPOCH = datetime(1970, 1, 1, tzinfo=timezone.utc)
_ABS_TIME = ("time", "timestamp", "utc", "time_utc", "utc_time", "datetime", "date_time", "epoch", "unix_time")
_REL_TIME = ("time_s", "t_s", "elapsed_s", "rel_time_s", "time_rel_s")
_ACCEL_UNITS = {"mps2": 1.0, "ms2": 1.0, "m_s2": 1.0, "g": STANDARD_GRAVITY_MPS2}
_GYRO_UNITS = {"radps": 1.0, "rads": 1.0, "rad_s": 1.0, "dps": np.pi / 180.0, "degps": np.pi / 180.0,
               "deg_s": np.pi / 180.0}
_ANGLE_UNITS = {"deg": np.pi / 180.0, "rad": 1.0}


@dataclass(frozen=True, eq=False)
class ImuLog:
    """One IMU log as parallel arrays (body frame x forward, y left, z up).

    Attributes
    ----------
    time_s
        (n,) seconds since 1970-01-01T00:00:00 UTC on the GNSS clock (offset applied), strictly
        increasing. Synthetic logs may use any time origin shared with their GNSS fixes.
    accel_mps2
        (n, 3) specific force, m/s^2 (reads +9.81 on z when level and at rest).
    gyro_radps
        (n, 3) angular rate, rad/s.
    mag
        (n, 3) magnetometer as read (unit of the log) or ``None``.
    attitude_rad
        (n, 3) logger's own roll, pitch, yaw in radians, or ``None``.
    path
        The file as the user named it (or a label).
    dropped
        Reason -> number of rows dropped (see module docstring).
    notes
        Remarks for the user (column mapping, units).
    time_offset_s
        The offset that was added to the file's times, s.
    """

    time_s: FloatArray
    accel_mps2: FloatArray
    gyro_radps: FloatArray
    mag: FloatArray | None = None
    attitude_rad: FloatArray | None = None
    path: str = "imu"
    dropped: dict[str, int] = field(default_factory=dict)
    notes: tuple[str, ...] = ()
    time_offset_s: float = 0.0

    def __len__(self) -> int:
        return len(self.time_s)

    def shifted(self, offset_s: float) -> "ImuLog":
        """The same log with ``offset_s`` seconds added to every time."""
        return replace(self, time_s=self.time_s + offset_s, time_offset_s=self.time_offset_s + offset_s)

    def take(self, index) -> "ImuLog":
        """Rows selected by a mask or index array."""
        opt = {k: (None if getattr(self, k) is None else getattr(self, k)[index]) for k in ("mag", "attitude_rad")}
        return replace(self, time_s=self.time_s[index], accel_mps2=self.accel_mps2[index],
                       gyro_radps=self.gyro_radps[index], **opt)


def _norm(name: str) -> str:
    return "_".join(t for t in re.sub(r"[^a-z0-9]+", "_", name.lower()).split("_") if t)


def _find_vector(path: str, header: list[str], letter: str, units: dict[str, float], option: str | None,
                 option_name: str, what: str) -> tuple[list[int], float, str] | None:
    """Columns ``<letter>x, <letter>y, <letter>z`` and their unit factor to SI, or None."""
    names = [_norm(h) for h in header]
    cols, factor, unit = [], None, None
    for axis in "xyz":
        found = None
        for i, nm in enumerate(names):
            base, _, suffix = nm.partition("_")
            if base == f"{letter}{axis}":
                found = (i, suffix)
                break
        if found is None:
            if cols:
                raise InputError(path, f"{what} column {letter}{axis} is missing (found {letter}x)")
            return None
        i, suffix = found
        if suffix:
            if suffix not in units:
                raise InputError(path, f"column {header[i]!r}: unknown {what} unit {suffix!r} "
                                 f"(use {' or '.join('_' + u for u in units)})")
            f, u = units[suffix], suffix
        elif option is not None:
            key = _norm(option)
            if key not in units:
                raise InputError(None, f"{option_name} {option!r}: use one of {', '.join(units)}")
            f, u = units[key], key
        else:
            raise InputError(path, f"column {header[i]!r} has no unit suffix; name it "
                             f"{letter}{axis}_{next(iter(units))} (or similar) or give {option_name}")
        if factor is not None and f != factor:
            raise InputError(path, f"{what} columns use different units")
        factor, unit = f, u
        cols.append(i)
    return cols, float(factor), str(unit)


def _find_attitude(path: str, header: list[str]) -> tuple[list[int], float] | None:
    names = [_norm(h) for h in header]
    cols, factor = [], None
    for angle in ("roll", "pitch", "yaw"):
        hit = [(i, nm.partition("_")[2]) for i, nm in enumerate(names) if nm.partition("_")[0] == angle]
        if not hit:
            return None
        i, suffix = hit[0]
        if suffix not in _ANGLE_UNITS:
            raise InputError(path, f"column {header[i]!r}: name the angle unit (_deg or _rad)")
        cols.append(i)
        factor = _ANGLE_UNITS[suffix]
    return cols, float(factor)


def _find_time(path: str, header: list[str]) -> tuple[int, bool]:
    """(column, is_relative)."""
    names = [_norm(h) for h in header]
    for i, nm in enumerate(names):
        if nm in _REL_TIME:
            return i, True
    for i, nm in enumerate(names):
        if nm in _ABS_TIME:
            return i, False
    raise InputError(path, f"no time column (expected one of {', '.join(_ABS_TIME[:3])} or "
                     f"{', '.join(_REL_TIME[:2])}); header is {','.join(header)}")


def _parse_times(path: str, cells: NDArray, lines: NDArray, column: str) -> tuple[FloatArray, list[str]]:
    empty = (cells == "") | (np.char.lower(cells.astype(str)) == "nan")
    try:
        return np.where(empty, "nan", cells).astype(np.float64), []
    except ValueError:
        pass
    out = np.full(len(cells), np.nan)
    naive = 0
    for i, c in enumerate(cells):
        if empty[i]:
            continue
        try:
            out[i] = float(c)
            continue
        except ValueError:
            pass
        try:
            stamp = datetime.fromisoformat(c.replace("Z", "+00:00") if c.endswith("Z") else c)
        except ValueError:
            raise InputError(path, f"time {c!r} in column {column!r} is neither a number nor ISO 8601",
                             f"line {lines[i]}") from None
        if stamp.tzinfo is None:
            naive += 1
            stamp = stamp.replace(tzinfo=timezone.utc)
        out[i] = (stamp - _EPOCH).total_seconds()
    return out, ([f"{naive} IMU times have no time zone: taken as UTC"] if naive else [])


def read_imu_csv(
    path: str,
    time_offset_s: float | None = None,
    axes: str = "flu",
    accel_unit: str | None = None,
    gyro_unit: str | None = None,
    data: bytes | None = None,
) -> ImuLog:
    """Read an IMU CSV log (see the module docstring for columns and handling).

    Parameters
    ----------
    path
        The CSV file.
    time_offset_s
        Seconds added to every time; required for relative ``time_s`` columns (UNIX time of 0).
    axes
        ``"flu"`` (x forward, y left, z up; default) or ``"frd"`` (forward, right, down).
    accel_unit, gyro_unit
        Units for columns without a suffix: ``"mps2"`` or ``"g"``; ``"radps"`` or ``"dps"``.
    data
        The file's bytes if already read (tests); otherwise the file is read.

    Raises
    ------
    InputError
        For every problem with the file or the options, as one line naming file and line.
    """
    from ..readers import read_bytes

    path = str(path)
    axes_key = str(axes).lower()
    if axes_key not in ("flu", "frd"):
        raise InputError(None, f"IMU axes {axes!r}: use flu (forward-left-up) or frd (forward-right-down)")
    raw = read_bytes(path) if data is None else data
    if b"\x00" in raw[:65536]:
        raise InputError(path, "binary data, not an IMU CSV text file")
    text = raw.decode("utf-8-sig", errors="replace").replace("\r\n", "\n").replace("\r", "\n")
    lines_all = text.split("\n")
    first = next((i for i, ln in enumerate(lines_all) if ln.strip() and not ln.lstrip().startswith("#")), None)
    if first is None:
        raise InputError(path, "no header line found")
    head = lines_all[first]
    delim = max((",", ";", "\t"), key=lambda d: (head.count(d), d == ","))
    reader = csv.reader(io.StringIO("\n".join(lines_all[first:])), delimiter=delim)
    header = [h.strip() for h in next(reader)]
    t_col, relative = _find_time(path, header)
    acc = _find_vector(path, header, "a", _ACCEL_UNITS, accel_unit, "--imu-accel-unit", "accelerometer")
    gyr = _find_vector(path, header, "g", _GYRO_UNITS, gyro_unit, "--imu-gyro-unit", "gyro")
    if acc is None or gyr is None:
        missing = "accelerometer (ax ay az)" if acc is None else "gyro (gx gy gz)"
        raise InputError(path, f"no {missing} columns; header is {','.join(header)}")
    mag_cols = None
    names = [_norm(h) for h in header]
    if all(any(nm.partition("_")[0] == f"m{a}" for nm in names) for a in "xyz"):
        mag_cols = [next(i for i, nm in enumerate(names) if nm.partition("_")[0] == f"m{a}") for a in "xyz"]
    att = _find_attitude(path, header)
    if relative and time_offset_s is None:
        raise InputError(path, f"column {header[t_col]!r} holds relative seconds: give the IMU time "
                         "offset (UNIX time of its 0) with --imu-time-offset")
    wanted = [t_col] + acc[0] + gyr[0] + (mag_cols or []) + (att[0] if att else [])
    need = max(wanted) + 1
    rows, line_no = [], []
    dropped: dict[str, int] = {}
    for cells in reader:
        ln = first + reader.line_num
        if not cells or not any(c.strip() for c in cells) or cells[0].lstrip().startswith("#"):
            continue
        if len(cells) < need:
            dropped["short row"] = dropped.get("short row", 0) + 1
            continue
        rows.append([cells[i].strip() for i in wanted])
        line_no.append(ln)
    if not rows:
        raise InputError(path, "no data rows after the header")
    table = np.array(rows, dtype=object).astype(str)
    lines = np.asarray(line_no)
    t, notes = _parse_times(path, table[:, 0], lines, header[t_col])
    values = np.empty((len(rows), len(wanted) - 1))
    for k in range(1, len(wanted)):
        col = table[:, k]
        col = np.where(col == "", "nan", col)
        try:
            values[:, k - 1] = col.astype(np.float64)
        except ValueError:
            bad = next(i for i, c in enumerate(col) if not _is_float(c))
            raise InputError(path, f"{header[wanted[k]]} {str(col[bad])!r} is not a number", f"line {lines[bad]}") from None
    core = np.column_stack((t, values[:, :6]))
    ok = np.isfinite(core).all(axis=1)
    if (~ok).any():
        dropped["missing value"] = dropped.get("missing value", 0) + int((~ok).sum())
    t, values, lines = t[ok], values[ok], lines[ok]
    if len(t) < 2:
        raise InputError(path, f"only {len(t)} complete IMU rows; need at least 2")
    dt = np.diff(t)
    back = np.flatnonzero(dt < 0)
    if len(back):
        i = back[0] + 1
        raise InputError(path, f"time goes backwards ({t[i - 1]!r} -> {t[i]!r}); split the log at the clock reset",
                         f"line {lines[i]}")
    rep = np.concatenate(([True], dt > 0))
    if (~rep).any():
        dropped["repeated time"] = int((~rep).sum())
        t, values = t[rep], values[rep]
    offset = float(time_offset_s or 0.0)
    sign = np.array([1.0, -1.0, -1.0]) if axes_key == "frd" else np.ones(3)
    accel = values[:, 0:3] * acc[1] * sign
    gyro = values[:, 3:6] * gyr[1] * sign
    k = 6
    mag = None
    if mag_cols:
        mag = values[:, k : k + 3] * sign
        k += 3
    attitude = values[:, k : k + 3] * att[1] if att else None
    notes = notes + [f"accelerometer in {acc[2]}, gyro in {gyr[2]}, axes {axes_key}"]
    if relative:
        notes.append(f"relative times: {offset!r} s added")
    elif np.median(t) < 1e8:
        notes.append("IMU time values are small: they look like relative seconds, not UNIX time")
    return ImuLog(t + offset, accel, gyro, mag, attitude, path, dropped, tuple(notes), offset)


def _is_float(s: str) -> bool:
    try:
        float(s)
        return True
    except ValueError:
        return False


# --------------------------------------------------------------------------------------------
# Checks
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ImuCheck:
    """What ``check_imu`` found.

    Attributes
    ----------
    rate_hz
        Median sample rate, Hz.
    jitter_s
        Robust spread of the sample interval (1.4826 x MAD), s.
    gaps
        ``(start_s, end_s)`` of intervals longer than ``gap_factor`` x the median interval.
    saturated
        Sensor ("accel"/"gyro") -> samples at full scale.
    overlap_s
        Seconds of the GNSS log covered by the IMU (NaN without GNSS times).
    gnss_span_s
        Length of the GNSS log, s.
    messages
        One line per problem worth telling the user.
    """

    rate_hz: float
    jitter_s: float
    gaps: tuple[tuple[float, float], ...]
    saturated: dict[str, int]
    overlap_s: float
    gnss_span_s: float
    messages: tuple[str, ...]


#: Smallest full-scale ranges of the MPU-9250 (PS-MPU-9250A-01): +-2 g and +-250 deg/s. A value
#: pinned below these is a constant signal, not a clipped one.
MIN_FULL_SCALE_ACCEL_MPS2 = 2.0 * STANDARD_GRAVITY_MPS2
MIN_FULL_SCALE_GYRO_RADPS = 250.0 * np.pi / 180.0


def saturation_mask(values: FloatArray, full_scale: float | None = None, run: int = 3,
                    min_full_scale: float = 0.0) -> NDArray[np.bool_]:
    """Samples (any axis) at full scale.

    With ``full_scale`` (SI) a sample counts when |value| >= 0.999 full scale. Without it, a value
    pinned at its axis extreme for at least ``run`` consecutive samples counts (a clipped sensor
    repeats its limit; real motion does not hold an extreme value exactly), provided the extreme
    reaches 0.99 ``min_full_scale`` (the smallest range such a sensor offers).
    """
    a = np.abs(values)
    if full_scale is not None:
        return (a >= 0.999 * full_scale).any(axis=1)
    out = np.zeros(len(values), bool)
    for k in range(values.shape[1]):
        col = a[:, k]
        top = col == col.max()
        if top.sum() < run or col.max() < 0.99 * min_full_scale or col.max() == 0:
            continue
        # runs of consecutive pinned samples
        edges = np.diff(np.concatenate(([0], top.astype(np.int8), [0])))
        starts, ends = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)
        for s, e in zip(starts, ends):
            if e - s >= run:
                out[s:e] = True
    return out


def check_imu(
    imu: ImuLog,
    gnss_time_s: FloatArray | None = None,
    gap_factor: float = 5.0,
    accel_full_scale_mps2: float | None = None,
    gyro_full_scale_radps: float | None = None,
) -> ImuCheck:
    """Rate, jitter, gaps, saturation and GNSS overlap of an IMU log.

    Raises ``InputError`` when the IMU log and the GNSS log do not overlap in time at all (wrong
    clock or offset). Everything else becomes a message; see ``fuse`` for how each is handled
    (gaps are bridged by interpolating the IMU signal, the uncertainty growing with time; saturated
    samples get inflated process noise).
    """
    t = imu.time_s
    dt = np.diff(t)
    med = float(np.median(dt))
    rate = 1.0 / med
    jitter = float(1.4826 * np.median(np.abs(dt - med)))
    big = np.flatnonzero(dt > gap_factor * med)
    gaps = tuple((float(t[i]), float(t[i + 1])) for i in big)
    sat = {
        "accel": int(saturation_mask(imu.accel_mps2, accel_full_scale_mps2,
                                     min_full_scale=MIN_FULL_SCALE_ACCEL_MPS2).sum()),
        "gyro": int(saturation_mask(imu.gyro_radps, gyro_full_scale_radps,
                                    min_full_scale=MIN_FULL_SCALE_GYRO_RADPS).sum()),
    }
    msgs = [f"IMU: {len(t)} samples at {rate:.4g} Hz, jitter {jitter * 1e3:.3g} ms"]
    for reason, count in imu.dropped.items():
        msgs.append(f"IMU: {count} rows dropped ({reason})")
    if jitter > 0.1 * med:
        msgs.append(f"IMU: timing jitter {jitter * 1e3:.3g} ms is over 10 % of the sample interval")
    if gaps:
        longest = max(b - a for a, b in gaps)
        msgs.append(f"IMU: {len(gaps)} gaps longer than {gap_factor:g} samples (longest {longest:.3g} s); "
                    "bridged by interpolating across them")
    for sensor, count in sat.items():
        if count:
            msgs.append(f"IMU: {count} {sensor} samples at full scale (saturated); their noise is inflated")
    overlap = span = float("nan")
    if gnss_time_s is not None:
        g = np.asarray(gnss_time_s, float)
        g = g[np.isfinite(g)]
        if len(g) == 0:
            raise InputError(imu.path, "the GNSS log has no times, so the IMU cannot be matched to it")
        g0, g1 = float(g.min()), float(g.max())
        span = g1 - g0
        overlap = max(0.0, min(g1, t[-1]) - max(g0, t[0]))
        if overlap <= 0:
            raise InputError(imu.path, f"IMU times {_stamp(t[0])} .. {_stamp(t[-1])} do not overlap the GNSS log "
                             f"{_stamp(g0)} .. {_stamp(g1)}; check the clock or --imu-time-offset")
        if overlap < span - 1.0:
            msgs.append(f"IMU covers {overlap:.1f} s of the {span:.1f} s GNSS log; fusion runs over the overlap only")
    return ImuCheck(rate, jitter, gaps, sat, overlap, span, tuple(msgs))


def _stamp(t: float) -> str:
    if t > 1e8:
        return datetime.fromtimestamp(t, timezone.utc).isoformat(timespec="seconds").replace("+00:00", "Z")
    return f"{t:.3f} s"
