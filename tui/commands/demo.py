"""``trackframe demo``: run the main job on a bundled demo log.

On a terminal it opens the viewer on the log; when standard output is not a terminal (a pipe,
a test, CI) or with ``--text`` it prints the text summary instead, so it never waits for keys.
"""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

from survey.errors import InputError
from survey.pipeline import load_log
from survey.summary import format_summary, summarize

#: Demo log opened when no name is given.
DEFAULT_DEMO = "ridge_trail_phone.gpx"

#: Starting limits preset per demo scene (survey.design.PRESETS); others use the viewer default.
DEMO_PRESETS = {
    "ridge_trail_phone.gpx": "ride-trail",
    "van_route_tunnel.nmea": "road-80",
    "drone_mast_orbit.csv": "drone-orbit",
}


def demo_dir() -> Path:
    """Folder of the bundled demo logs: $TRACKFRAME_DEMO_DIR, the source checkout, or ./demo_tracks."""
    candidates = [
        os.environ.get("TRACKFRAME_DEMO_DIR"),
        Path(__file__).resolve().parents[2] / "demo_tracks",
        Path.cwd() / "demo_tracks",
    ]
    for c in candidates:
        if c and Path(c).is_dir() and any(Path(c).glob("*.*")):
            return Path(c)
    raise InputError("demo_tracks", "demo logs not found; run from the source checkout or set TRACKFRAME_DEMO_DIR")


def demo_logs() -> list[Path]:
    """The bundled demo logs (GPX, NMEA, CSV), sorted by name."""
    folder = demo_dir()
    return sorted(p for p in folder.iterdir() if p.suffix.lower() in (".gpx", ".nmea", ".csv") and "imu" not in p.stem)


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "demo",
        help="run trackframe on a bundled demo log",
        description="Open one of the bundled demo logs in the viewer (default: "
        f"{DEFAULT_DEMO}). --list shows them. Without a terminal, or with --text, print its "
        "summary instead.",
    )
    p.add_argument("name", nargs="?", default=DEFAULT_DEMO, help="demo log file name")
    p.add_argument("--list", action="store_true", help="list the demo logs and exit")
    p.add_argument("--text", action="store_true", help="print the text summary instead of opening the viewer")
    from .view import add_view_arguments

    add_view_arguments(p)
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    logs = demo_logs()
    if args.list:
        for p in logs:
            print(p.name)
        return 0
    chosen = next((p for p in logs if p.name == args.name or p.stem == args.name), None)
    if chosen is None:
        names = ", ".join(p.name for p in logs)
        raise InputError(args.name, f"no such demo log (choose from {names})")
    if args.text or not (sys.stdin.isatty() and sys.stdout.isatty()):
        print(format_summary(summarize(load_log(str(chosen)))))
        return 0
    from ..app import DEFAULT_LIMITS

    from survey.design import preset_limits
    from .view import open_viewer, view_limits

    preset = DEMO_PRESETS.get(chosen.name)
    limits = view_limits(args, preset_limits(preset) if preset else DEFAULT_LIMITS)
    return open_viewer(str(chosen), {}, args.step, limits)
