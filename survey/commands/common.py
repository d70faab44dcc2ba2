"""Options shared by every command that reads a log, and their conversion to pipeline kwargs."""

from __future__ import annotations

import argparse

from ..clean import DEFAULT_GAP_S
from ..readers import FORMATS


def add_log_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the LOG positional and the reading/frame options."""
    parser.add_argument("log", metavar="LOG", help="GNSS log: GPX 1.0/1.1, NMEA 0183 text or CSV")
    add_reading_arguments(parser)


def add_reading_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the options for reading a log and placing it in a frame (``log_kwargs`` reads them)."""
    group = parser.add_argument_group("reading the log")
    group.add_argument("--format", choices=FORMATS, help="log format (default: from the extension or content)")
    group.add_argument(
        "--columns",
        metavar="ROLE=NAME,...",
        type=parse_columns,
        help="CSV column mapping, e.g. time=GPS Time,lat=Y,lon=X,height=Z (roles: time lat lon "
        "height speed course accuracy hdop satellites date)",
    )
    group.add_argument(
        "--height-ref",
        choices=("ellipsoid", "msl"),
        help="CSV only: what the height column is measured from (default: unknown)",
    )
    group.add_argument(
        "--gap",
        type=positive_float,
        default=DEFAULT_GAP_S,
        metavar="S",
        help=f"start a new segment after a time gap longer than S seconds (default {DEFAULT_GAP_S:g})",
    )
    frame = parser.add_argument_group("local frame")
    frame.add_argument(
        "--crs",
        metavar="EPSG:NNNN|utm",
        help="use a projected CRS (or 'utm' for the track's UTM zone) instead of local ENU",
    )
    frame.add_argument(
        "--origin",
        metavar="LAT,LON[,H]",
        type=parse_origin,
        help="ENU origin in degrees and metres (default: centre of the track's extent)",
    )


def add_imu_arguments(parser: argparse.ArgumentParser) -> None:
    """Add ``--imu`` and its reading options (fusion with an IMU log beside the GNSS log)."""
    group = parser.add_argument_group("IMU log (optional)")
    group.add_argument("--imu", metavar="IMU.csv", help="fuse an IMU CSV log (accelerometer and gyro) with the GNSS log")
    group.add_argument(
        "--imu-time-offset",
        type=float,
        metavar="S",
        help="seconds added to the IMU times (needed when its time column is relative, time_s)",
    )
    group.add_argument(
        "--imu-axes",
        choices=("flu", "frd"),
        default="flu",
        help="IMU body axes: x forward, y left, z up (flu, default) or forward-right-down (frd)",
    )
    group.add_argument("--imu-accel-unit", choices=("mps2", "g"), help="unit of accelerometer columns without a suffix")
    group.add_argument("--imu-gyro-unit", choices=("radps", "dps"), help="unit of gyro columns without a suffix")
    speed = parser.add_argument_group("speed and course over ground")
    speed.add_argument(
        "--positions-only",
        action="store_true",
        help="ignore the log's speed and course over ground (by default they are measured beside "
        "the positions when the log has them)",
    )


def imu_kwargs(args: argparse.Namespace) -> dict:
    """``run_profile`` keyword arguments for the IMU options (none without ``--imu``) and
    ``--positions-only``."""
    extra = {"use_velocity": False} if getattr(args, "positions_only", False) else {}
    if not getattr(args, "imu", None):
        return extra
    return {
        **extra,
        "imu": args.imu,
        "imu_time_offset_s": args.imu_time_offset,
        "imu_axes": args.imu_axes,
        "imu_accel_unit": args.imu_accel_unit,
        "imu_gyro_unit": args.imu_gyro_unit,
    }


def log_kwargs(args: argparse.Namespace) -> dict:
    """Pipeline keyword arguments from parsed options (see ``survey.pipeline.load_log``)."""
    return {
        "fmt": args.format,
        "csv_columns": args.columns,
        "height_ref": args.height_ref,
        "gap_s": args.gap,
        "crs": args.crs,
        "origin": args.origin,
    }


def positive_float(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a number: {text!r}") from None
    if not value > 0 or value == float("inf"):
        raise argparse.ArgumentTypeError(f"must be a positive number: {text!r}")
    return value


def parse_columns(text: str) -> dict[str, str]:
    mapping: dict[str, str] = {}
    for item in text.split(","):
        role, sep, name = item.partition("=")
        if not sep or not role.strip() or not name.strip():
            raise argparse.ArgumentTypeError(f"expected ROLE=NAME, got {item!r}")
        mapping[role.strip().lower()] = name.strip()
    return mapping


def parse_origin(text: str) -> tuple[float, ...]:
    try:
        values = tuple(float(v) for v in text.split(","))
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected LAT,LON[,H] in degrees/metres, got {text!r}") from None
    if len(values) not in (2, 3) or not (-90 <= values[0] <= 90 and -180 <= values[1] <= 180):
        raise argparse.ArgumentTypeError(f"expected LAT,LON[,H] within range, got {text!r}")
    return values
