"""Who a list is shown to: the viewer, as a token may name it.

A reader token names a viewer only through a signed, short-lived viewer assertion in the
``X-Rankrec-Viewer`` header (:func:`rankrec.tokens.viewer_assertion`), made with the viewer key of
that very token (``rankrec token add NAME --role reader --viewer-key``), which the front end holds
beside the token. The service checks the MAC in constant time and the expiry (at most
``viewer_max_ttl`` seconds ahead) before it uses the viewer. A token alone, without its key,
cannot name anyone: its lists are the public ones (OWASP API Security Top 10 2023, API1 "Broken
Object Level Authorization": the reading history and groups of a user are that user's objects,
and a client's word is not an authorisation to them).

The plain ``viewer=`` query parameter is for admin tokens only (operators debugging what a
reader sees); a reader token sending it is refused with 403 ``viewer_unsigned``, not silently
ignored, so a front end that has not moved to assertions fails loudly instead of showing every
reader the public lists. A refused assertion answers 403 ``viewer_refused``; neither message
quotes the assertion or the user.
"""

from __future__ import annotations

from typing import Annotated

from fastapi import Depends, Header, Request

from rankrec.tokens import ASSERTION_MAX_CHARS, check_viewer_assertion

from .auth import Caller, require_reader
from .errors import ApiError
from .ids import ViewerQuery

VIEWER_HEADER = "X-Rankrec-Viewer"


async def named_viewer(
    request: Request,
    caller: Annotated[Caller, Depends(require_reader)],
    viewer: ViewerQuery = None,
    assertion: Annotated[
        str | None,
        Header(
            alias=VIEWER_HEADER,
            max_length=ASSERTION_MAX_CHARS,
            description="signed viewer assertion USER.EXPIRY.MAC (`rankrec.tokens.viewer_assertion`)",
        ),
    ] = None,
) -> str | None:
    """The viewer this request may name (None: no viewer, public pages only); see the module docstring.

    Async: the checks are an HMAC and a comparison, cheaper than a thread hand-off.
    """
    if viewer is not None:
        if caller.role != "admin":
            raise ApiError(
                403,
                "viewer_unsigned",
                f"a reader token names its viewer only in a signed {VIEWER_HEADER} header "
                "(rankrec token add NAME --role reader --viewer-key); viewer= is for admin tokens",
            )
        if assertion is not None:
            raise ApiError(422, "invalid_request", f"name the viewer once: viewer= or {VIEWER_HEADER}")
        return viewer
    if assertion is None:
        return None
    if caller.viewer_key is None:
        raise ApiError(
            403,
            "viewer_refused",
            f"this token has no viewer key, so it cannot send {VIEWER_HEADER} "
            "(rankrec token add NAME --viewer-key)",
        )
    max_ttl = request.app.state.settings.viewer_max_ttl
    try:
        return check_viewer_assertion(caller.viewer_key, caller.name, assertion, max_ttl=max_ttl)
    except ValueError as error:
        raise ApiError(403, "viewer_refused", f"{VIEWER_HEADER} refused: {error}") from None


#: route parameter type: ``viewer: Viewer``
Viewer = Annotated[str | None, Depends(named_viewer)]
