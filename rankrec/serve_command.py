"""The ``rankrec serve`` and ``rankrec token`` commands.

``rankrec`` never imports the ``api`` package: ``serve`` hands uvicorn the dotted name of the
app factory, so the service is loaded only in the server process.
"""

from __future__ import annotations


def register(commands) -> None:
    """Add the ``serve`` and ``token`` sub-commands to an ``argparse`` sub-parsers object."""
