"""Sub-commands that open the terminal viewer (``view``, ``demo``); same shape as
``survey.commands``: ``add_parser(subparsers)`` and ``run(args) -> int``."""
