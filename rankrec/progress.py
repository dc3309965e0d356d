"""The one progress signature every long library call takes: ``progress(step, done, total)``.

``step`` names the stage ("related lists", "importing", ...), ``done`` counts what is finished so far in
it, ``total`` is what the stage will count (0 when not known in advance). The library never prints; the
CLI draws one bar per step.
"""

from __future__ import annotations

from collections.abc import Callable

Progress = Callable[[str, int, int], object]


def report(progress: Progress | None, step: str, done: int, total: int) -> None:
    """Call ``progress`` when there is one."""
    if progress is not None:
        progress(step, done, total)
