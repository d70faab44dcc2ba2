"""``trackframe flag LOG -o FILE``: flag sharp, twisting and below-design-radius sections, add the
user's hand marks from the sidecar, and export the findings.

The output format follows the extension (.csv .xlsx .geojson .gpx; ``-`` is CSV on stdout). A
short summary goes to stdout (to stderr when the CSV itself goes to stdout).
"""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

from ..atomic import check_output_path
from ..design import CAUTION, PRESETS, Limits, preset_limits
from ..errors import InputError, UsageError
from ..sections import KIND_DESIGN, KINDS
from .common import add_imu_arguments, add_log_arguments, imu_kwargs, log_kwargs, positive_float


def _fraction(text: str) -> float:
    """A decimal in [0, 1): superelevation and friction are given as 0.08, not 8."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a number: {text!r}") from None
    if not 0.0 <= value < 1.0:
        raise argparse.ArgumentTypeError(f"give a decimal between 0 and 1 (0.08 for 8 %), not {text!r}")
    return value


def _non_negative(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a number: {text!r}") from None
    if not 0.0 <= value < float("inf"):
        raise argparse.ArgumentTypeError(f"must be a number >= 0: {text!r}")
    return value


def flag_epilog() -> str:
    lines = ["presets (direct options override their values):"]
    for p in PRESETS.values():
        lines.append(f"  {p.name:<12} {p.summary}")
    lines.append("")
    lines.append("Design-speed advice: " + CAUTION)
    return "\n".join(lines)


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "flag",
        help="flag sharp / twisting / below-design-radius sections and export them with your marks",
        description="Compute the profile of a log, flag sections whose radius is below a limit, whose "
        "|torsion| is above a limit, or whose plan radius is below the design-speed minimum "
        "R = V^2 / (127 (e + f)); add the hand-marked sections from the log's sidecar; export.",
        epilog=flag_epilog(),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    add_log_arguments(p)
    add_imu_arguments(p)
    groups = add_flag_options(p)
    groups["output"].add_argument(
        "-o", "--output", required=True, metavar="FILE", help="output file (.csv .xlsx .geojson .gpx) or - for CSV on stdout"
    )
    p.set_defaults(run=run)


def add_flag_options(p: argparse.ArgumentParser) -> dict[str, argparse._ArgumentGroup]:
    """Add the limits, detection and output options (all but LOG and ``-o``) that ``flag`` and
    ``batch`` share; returns the groups by title so a caller can add to them."""
    lim = p.add_argument_group("limits")
    lim.add_argument("--preset", choices=list(PRESETS), metavar="NAME", help="start from a preset (listed below)")
    lim.add_argument("--sharp-radius", type=positive_float, metavar="M", help="flag radius below M metres")
    lim.add_argument("--twist", type=positive_float, metavar="PER_M", help="flag |torsion| above PER_M 1/m")
    lim.add_argument("--design-speed", type=positive_float, metavar="KMH", help="design speed V, km/h")
    lim.add_argument(
        "--superelevation",
        type=_fraction,
        metavar="E",
        help="maximum superelevation e as a decimal (default 0.08, a common maximum; from memory)",
    )
    lim.add_argument(
        "--friction",
        type=_fraction,
        metavar="F",
        help="side-friction factor f as a decimal (default: by design speed from the AASHTO metric "
        "table, from memory; 0.12 at 100 km/h as in ERA 2002 Table 8-2)",
    )
    det = p.add_argument_group("detection")
    det.add_argument("--min-length", type=_non_negative, metavar="M", help="drop sections shorter than M metres")
    det.add_argument("--merge-gap", type=_non_negative, metavar="M", help="merge sections closer than M metres")
    det.add_argument(
        "--hysteresis", type=_fraction, metavar="FRAC", help="leave a section FRAC beyond the limit (default 0.1)"
    )
    det.add_argument(
        "--confidence",
        type=_non_negative,
        metavar="SIGMA",
        help="a section needs a station beyond the limit by SIGMA standard deviations (default 1.64)",
    )
    det.add_argument("--step", type=positive_float, default=1.0, metavar="M", help="station spacing (default 1 m)")
    out = p.add_argument_group("output")
    out.add_argument("--force", action="store_true", help="overwrite FILE if it exists")
    out.add_argument("--no-marks", action="store_true", help="ignore the hand-marked sections in the sidecar")
    return {"limits": lim, "detection": det, "output": out}


def limits_from_args(args: argparse.Namespace) -> Limits:
    """Preset (if any) with every direct option laid over it; InputError if nothing is checked."""
    base = preset_limits(args.preset) if args.preset else Limits()
    try:
        limits = base.updated(
            sharp_radius_m=args.sharp_radius,
            twist_per_m=args.twist,
            design_speed_kmh=args.design_speed,
            superelevation=args.superelevation,
            friction=args.friction,
            min_length_m=args.min_length,
            merge_gap_m=args.merge_gap,
            hysteresis=args.hysteresis,
            confidence_sigma=args.confidence,
        )
    except ValueError as exc:
        raise UsageError(None, str(exc)) from None
    if (args.superelevation is not None or args.friction is not None) and not limits.design_on:
        raise UsageError(None, "--superelevation and --friction need --design-speed (or a road preset)")
    if not limits.any_check:
        raise UsageError(None, "nothing to check: give --sharp-radius, --twist, --design-speed or --preset")
    return limits


def _same_file(a: str, b: Path) -> bool:
    try:
        return os.path.exists(a) and b.exists() and os.path.samefile(a, b)
    except OSError:
        return False


def run(args: argparse.Namespace) -> int:
    # Imported here so that building the parser (every command's start-up) stays light.
    from ..export import STDOUT, RunInfo, export_format, write_findings
    from ..findings import flag_log
    from ..marks import sidecar_path

    output = args.output
    export_format(output)  # unknown extension: fail before any work
    if output != STDOUT:
        if _same_file(output, Path(args.log)) or _same_file(output, sidecar_path(args.log)):
            raise InputError(output, "is the input log or its marks file; choose another output name")
        check_output_path(output, args.force)  # fail before the profile is computed
    limits = limits_from_args(args)
    say = sys.stderr if output == STDOUT else sys.stdout
    found = flag_log(args.log, limits, args.step, not args.no_marks, **log_kwargs(args), **imu_kwargs(args))
    for w in found.warnings:
        print(f"trackframe: warning: {w}", file=sys.stderr)
    profile, sections = found.profile, list(found.sections)
    for m in profile.messages:  # the profile's own notes, as `trackframe profile` prints them
        print(f"note: {m}", file=sys.stderr)
    run_info = RunInfo(
        input_path=str(args.log),
        input_sha256=found.input_sha256,
        frame=found.frame_text,
        limits=limits.as_dict(),
        settings={
            "preset": args.preset,
            "step_m": args.step,
            "gap_s": args.gap,
            "crs": args.crs,
            "marks": "ignored" if args.no_marks else str(sidecar_path(args.log)),
            **{k: v for k, v in profile.settings.items() if isinstance(v, (str, int, float, bool))},
        },
    )
    write_findings(output, sections, profile, run_info, force=args.force)
    _summary(say, sections, limits, output)
    return 0


def _summary(fh, sections, limits: Limits, output: str) -> None:
    from ..export import STDOUT

    counts = {k: sum(1 for s in sections if s.kind == k) for k in KINDS}
    parts = ", ".join(f"{n} {k}" for k, n in counts.items() if n)
    dest = "stdout" if output == STDOUT else output
    print(f"{len(sections)} section(s){' (' + parts + ')' if parts else ''} written to {dest}", file=fh)
    if limits.design_on:
        print(
            f"design check: {limits.design_speed_kmh:g} km/h, e {limits.design_superelevation:g}, "
            f"f {limits.design_friction:g} -> minimum radius {limits.design_radius_m:.1f} m",
            file=fh,
        )
        for s in sections:
            if s.kind == KIND_DESIGN:
                print(
                    f"  {s.id}: {s.start_chainage_m:.0f}-{s.end_chainage_m:.0f} m, "
                    f"e + f used up at {s.balance_speed_kmh:.0f} km/h",
                    file=fh,
                )
        print(CAUTION, file=fh)
