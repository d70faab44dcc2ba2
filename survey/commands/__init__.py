"""CLI sub-commands: each module exposes ``add_parser(subparsers)`` and ``run(args) -> int``."""
