"""trackframe computation package: logs in, chainage-tied geometry and findings out.

Nothing in this package imports the text interface (``tui``).
"""

__version__ = "0.1.0"
