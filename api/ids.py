"""Page, user and team ids in paths and queries, bounded by the project's one id check
(:func:`rankrec._validation.check_id`, through :func:`rankrec.sources.check_id`): at most 256
characters, no control characters or line separators. A bad id answers 422 ``invalid_request``
quoting at most a short prefix of it, before any lookup, so the answer says nothing about what
the wiki holds.
"""

from __future__ import annotations

from functools import partial
from typing import Annotated

from fastapi import Path, Query
from pydantic import AfterValidator

from rankrec.sources import check_id


def _bounded(what: str) -> AfterValidator:
    return AfterValidator(partial(check_id, what))


PageId = Annotated[
    str, Path(description="page id, percent-encoded (a '/' travels as %2F)"), _bounded("page id")
]
UserId = Annotated[str, Path(description="user id"), _bounded("user id")]
TeamId = Annotated[str, Path(description="team name"), _bounded("team name")]
ViewerQuery = Annotated[
    str | None,
    Query(
        description="the reader the list is shown to: admin tokens only (reader tokens sign it, see "
        "X-Rankrec-Viewer)"
    ),
    _bounded("viewer"),
]
