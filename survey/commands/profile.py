"""``trackframe profile LOG -o OUT``: geometry at fixed chainage stations, as CSV or .xlsx."""

from __future__ import annotations

import argparse
import sys

from ..errors import InputError, UsageError
from .. import pipeline
from ..profile_export import write_profile
from .common import add_imu_arguments, add_log_arguments, imu_kwargs, log_kwargs, positive_float


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "profile",
        help="curvature, radius, torsion, grade and their uncertainty at every station",
        description="Smooth the path and write one row per chainage station: position, speed, "
        "grade, curvature and radius, torsion, their 1-sigma, plan and vertical curvature and "
        "lateral acceleration. OUT may be .csv, .xlsx or - (CSV on standard output).",
    )
    add_log_arguments(p)
    add_imu_arguments(p)
    p.add_argument("--step", type=positive_float, default=1.0, metavar="M", help="station spacing in metres (default 1)")
    p.add_argument("-o", "--output", required=True, metavar="OUT", help="output file (.csv or .xlsx), or - for stdout")
    p.add_argument("--force", action="store_true", help="overwrite OUT if it exists")
    p.add_argument("--samples", type=int, default=None, metavar="N",
                   help="repeated-noise draws for the 1-sigma columns (default 8, pooled along the path)")
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    out = args.output
    if out != "-" and not out.lower().endswith((".csv", ".txt", ".xlsx")):
        raise InputError(out, "unknown output type; use a .csv or .xlsx file name, or - for stdout")
    if args.samples is not None and args.samples < 2:
        raise UsageError(None, "--samples must be at least 2")
    result = pipeline.run_profile(args.log, step_m=args.step, n_samples=args.samples, **log_kwargs(args), **imu_kwargs(args))
    profile = result.profile
    if len(profile) == 0:
        raise InputError(args.log, "no stations: " + "; ".join(profile.messages))
    write_profile(profile, out, force=args.force)
    for m in profile.messages:
        print(f"note: {m}", file=sys.stderr)
    if out != "-":
        print(f"{out}: {len(profile)} stations every {profile.step_m:g} m", file=sys.stderr)
    return 0
