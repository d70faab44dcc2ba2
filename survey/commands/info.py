"""``trackframe info LOG``: what is in a log, after cleaning, in its local frame."""

from __future__ import annotations

import argparse
import json

from ..pipeline import load_log
from ..summary import format_summary, summarize
from .common import add_log_arguments, log_kwargs


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "info",
        help="summarise a log: format, fixes, segments, duration, length, extent, cleaning, frame",
        description="Read a GNSS log, clean it and print a summary: format, fixes, segments, "
        "duration, path length, bounding box, cleaning counts, local frame and origin.",
    )
    add_log_arguments(p)
    p.add_argument("--json", action="store_true", help="print the summary as JSON for scripts")
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    info = summarize(load_log(args.log, **log_kwargs(args)))
    print(json.dumps(info, indent=2) if args.json else format_summary(info))
    return 0
