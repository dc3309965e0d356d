"""The ``rankrec evaluate`` command (parsing and formatting only; the work is in this package)."""

from __future__ import annotations


def register(commands) -> None:
    """Add the ``evaluate`` sub-command to an ``argparse`` sub-parsers object."""
