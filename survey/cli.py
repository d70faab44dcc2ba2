"""Command-line front of the headless commands: argument parsing and the one place errors become
exit codes.

Exit status: 0 success, 1 bad input (one line on stderr naming the file and record), 2 usage
(argparse's own errors, and ``UsageError`` for options that cannot go together).
The ``trackframe`` console script is ``tui.cli.main``, which adds the commands that open the
viewer (``demo``, ``view``); this module never imports ``tui``.
"""

from __future__ import annotations

import argparse
import importlib
import sys
from types import ModuleType
from typing import Sequence

from . import __version__
from .errors import InputError, UsageError

#: Sub-command modules under ``survey.commands``, in the order ``--help`` lists them.
COMMANDS = ("info", "profile", "flag", "batch")


def build_parser(extra: Sequence[ModuleType] = ()) -> argparse.ArgumentParser:
    """The argument parser; ``extra`` command modules (``add_parser``/``run``) are listed first."""
    parser = argparse.ArgumentParser(
        prog="trackframe",
        description="Curvature, radius and torsion along the chainage of GNSS/IMU survey logs, "
        "with flagged sharp and twisting sections.",
    )
    parser.add_argument("--version", action="version", version=f"trackframe {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    for module in extra:
        module.add_parser(sub)
    for name in COMMANDS:
        try:
            module = importlib.import_module(f"survey.commands.{name}")
        except ModuleNotFoundError as exc:
            if exc.name != f"survey.commands.{name}":
                raise
            continue  # command not built yet
        module.add_parser(sub)
    return parser


def main(argv: list[str] | None = None, extra: Sequence[ModuleType] = ()) -> int:
    """Run the command line; returns the exit status (see module doc)."""
    parser = build_parser(extra)
    args = parser.parse_args(argv)
    try:
        return int(args.run(args) or 0)
    except UsageError as exc:
        _error(str(exc))
        return 2
    except InputError as exc:
        _error(str(exc))
        return 1
    except KeyboardInterrupt:
        _error("interrupted")
        return 130
    except BrokenPipeError:
        # stdout closed early (e.g. piped into head): nothing more to say.
        sys.stderr.close()
        return 0
    except MemoryError:
        _error(f"{getattr(args, 'log', '')}: not enough memory for this log")
        return 1


def _error(message: str) -> None:
    print(f"trackframe: error: {message}", file=sys.stderr)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
