"""``trackframe view LOG``: open a log in the terminal viewer (charts, plan, sections, marks).

The Textual app is imported only when the command runs, so ``trackframe info`` and friends start
without loading it.
"""

from __future__ import annotations

import argparse
import sys

from survey.design import PRESETS, Limits, preset_limits
from survey.errors import InputError
from survey.commands.common import add_imu_arguments, add_log_arguments, imu_kwargs, log_kwargs, positive_float


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "view",
        help="open a log in the terminal viewer: charts along the chainage, plan, sections, marks",
        description="Open a GNSS log in the terminal viewer. Step along the chainage, see curvature "
        "or radius, torsion, elevation and grade with their uncertainty, the plan of the track, "
        "the flagged sections; mark your own sections (saved beside the log) and export. Press ? "
        "in the viewer for every key.",
    )
    add_log_arguments(p)
    add_imu_arguments(p)
    add_view_arguments(p)
    p.set_defaults(run=run)


def add_view_arguments(p: argparse.ArgumentParser) -> None:
    """Options shared by ``view`` and ``demo``: station step, starting limits."""
    g = p.add_argument_group("viewer")
    g.add_argument("--step", type=positive_float, default=1.0, metavar="M", help="station spacing (default 1 m)")
    g.add_argument("--preset", choices=list(PRESETS), metavar="NAME", help=f"starting limits ({', '.join(PRESETS)})")
    g.add_argument("--sharp-radius", type=positive_float, metavar="M", help="flag radius below M metres")
    g.add_argument("--twist", type=positive_float, metavar="PER_M", help="flag |torsion| above PER_M 1/m")
    g.add_argument("--design-speed", type=positive_float, metavar="KMH", help="design-speed check, km/h (advisory)")


def view_limits(args: argparse.Namespace, default: Limits) -> Limits:
    """Starting limits: a preset, else the default, with the direct options laid over."""
    base = preset_limits(args.preset) if getattr(args, "preset", None) else default
    try:
        return base.updated(
            sharp_radius_m=getattr(args, "sharp_radius", None),
            twist_per_m=getattr(args, "twist", None),
            design_speed_kmh=getattr(args, "design_speed", None),
        )
    except ValueError as exc:
        raise InputError(None, str(exc)) from None


def require_terminal() -> None:
    if not (sys.stdin.isatty() and sys.stdout.isatty()):
        raise InputError(None, "the viewer needs an interactive terminal; use 'trackframe info' or 'trackframe flag' for text output")


def open_viewer(log: str, load_kwargs: dict, step_m: float, limits: Limits) -> int:
    """Run the viewer until the user quits; a log that cannot be opened becomes an InputError
    after the screen is restored (so the shell also gets the one-line reason and status 1)."""
    from ..app import TrackApp

    app = TrackApp(log_path=log, load_kwargs=load_kwargs, step_m=step_m, limits=limits)
    app.run()
    if app.error:
        raise InputError(None, app.error)
    return 0


def run(args: argparse.Namespace) -> int:
    from ..app import DEFAULT_LIMITS

    limits = view_limits(args, DEFAULT_LIMITS)
    require_terminal()
    return open_viewer(args.log, {**log_kwargs(args), **imu_kwargs(args)}, args.step, limits)
