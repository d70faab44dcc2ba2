"""The ``trackframe`` console script: the headless commands of ``survey.cli`` plus the two that
open the terminal viewer (``demo`` and ``view``)."""

from __future__ import annotations

import sys

from survey.cli import main as survey_main

from .commands import demo, view


def main(argv: list[str] | None = None) -> int:
    """Run ``trackframe``; returns the exit status (0 ok, 1 bad input, 2 usage)."""
    return survey_main(argv, extra=(demo, view))


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
