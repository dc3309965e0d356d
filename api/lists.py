"""The list routes: related pages, a reader's personal list, a team's landing ordering, page search.

Each route parses, asks the library (:mod:`rankrec.recommend`) and formats; the only thing added
here is *who may see what*: the viewer is the one the token may name (:mod:`api.viewers`: a signed
assertion, or ``viewer=`` for admins); every list is filtered by the viewer's access groups (no
viewer: pages visible to everyone only), a page the viewer may not see is answered exactly like an
unknown page (same status, body and search, :func:`unknown_to`), and a personal list is served only
for its own viewer or an admin. A viewer the store does not know is answered as a known viewer
without history or groups would be (:func:`_reader`), so no answer tells who reads the wiki.
Every route is a plain ``def``: FastAPI runs it in its thread pool, so no CPU work or store read
runs on the event loop; each holds a place in the rate and concurrency limits (:mod:`api.limits`).
Library errors are answered by the app's one handler (:func:`api.errors.from_library`).
"""

from __future__ import annotations

import dataclasses

import numpy as np
from fastapi import APIRouter, Query, Request

from rankrec.errors import UnknownPage, UnknownUser
from rankrec.index import Index
from rankrec.recommend import Reader, landing, reader_from_store, recommend, related, team_from_store

from .errors import ApiError
from .ids import PageId, TeamId, UserId
from .limits import LimitedCaller
from .live import Loaded
from .models import ListResponse, PageMatch, PageSearchResponse, error_responses
from .viewers import Viewer

SEARCH_SCAN = 5_000  # page ids looked at per search at most (restricted ones are skipped)

_lift = Query(None, ge=0, le=10, allow_inf_nan=False, description="lift exponent (default: the index's)")


def loaded_index(request: Request) -> Loaded:
    """The live index this request will use throughout (503 ``no_index`` when none is live)."""
    loaded = request.app.state.service.live.current
    if loaded is None:
        raise ApiError(503, "no_index", "no index is live yet")
    return loaded


def _newcomer(index: Index, user: str) -> Reader:
    """The reader a user the store does not know is taken for: what :func:`reader_from_store` gives
    a known user without views and groups (no history, public pages only)."""
    return Reader(user=user, groups=frozenset(), restart=np.zeros(index.size), recent=np.zeros(0, np.int64))


def _reader(request: Request, loaded: Loaded, viewer: str | None) -> Reader | None:
    """The viewer as a library Reader (None: no viewer). A viewer the store does not know gets the
    reader a known one without history or groups is (:func:`_newcomer`): the same list and body,
    so an answer does not tell whether someone reads the wiki (OWASP API Security Top 10 2023, API3)."""
    if viewer is None:
        return None
    service = request.app.state.service
    store = service.read_store(loaded.wiki)
    user = service.user_id(viewer)
    if store.user_row(user) is None:  # one lookup; no close-name search over every user
        return _newcomer(loaded.index, viewer)
    try:
        return dataclasses.replace(reader_from_store(store, loaded.index, user), user=viewer)
    except UnknownUser:  # erased meanwhile
        return _newcomer(loaded.index, viewer)


def unknown_to(index: Index, page: str, groups: frozenset[str] | None) -> UnknownPage:
    """The one answer to a page that is absent or that a reader in ``groups`` may not see: its close
    ids among the pages they may see, from the same bounded search whichever it is
    (:meth:`rankrec.index.Index.close_ids` leaves ``page`` itself out before counting), so neither
    the body nor the time tells a restricted page from a missing one (OWASP API Security Top 10
    2023, API1 and API3: no object, and no property of one, beyond what the caller may see)."""
    return UnknownPage(page, index.close_ids(page, allowed=lambda number: index.may_see(number, groups)))


def _seed(index: Index, page: str, groups: frozenset[str] | None) -> int:
    """The page's number; 404 for a page that is unknown or that the viewer may not see (one answer)."""
    number = index.find(page)
    if number is None or not index.may_see(number, groups):
        raise unknown_to(index, page, groups)
    return number


def _answer(result, loaded: Loaded, subject: str, viewer: str | None) -> ListResponse:
    return ListResponse(
        kind=result.kind,
        subject=subject,
        viewer=viewer,
        items=[
            {**row, "pagerank": item.pagerank} for row, item in zip(result.rows(), result.items, strict=True)
        ],
        error_bound=result.error_bound,
        index=loaded.folder.name,
    )


def make_router(max_k: int) -> APIRouter:
    """The list routes, with ``k`` bounded by ``max_k``."""
    router = APIRouter(prefix="/v1", tags=["lists"])
    bounded_k = {"ge": 1, "le": max_k, "description": f"how many pages (at most {max_k})"}

    @router.get(
        "/pages/{page:path}/related",
        response_model=ListResponse,
        responses=error_responses(401, 403, 404, 422, 429, 503),
        summary="Pages related to a page",
    )
    def related_pages(
        request: Request,
        caller: LimitedCaller,
        page: PageId,
        viewer: Viewer,
        k: int = Query(10, **bounded_k),
        exclude_linked: bool = Query(False, description="leave out pages the page links to"),
        lift: float | None = _lift,
        per_space: int | None = Query(None, ge=1, le=max_k, description="at most this many from one space"),
    ) -> ListResponse:
        # a plain def, so in the thread pool: the viewer's store reads may wait on a lock, a page not
        # precomputed costs a push, an unknown id a close-id search; none of it on the event loop
        loaded = loaded_index(request)
        reader = _reader(request, loaded, viewer)
        number = _seed(loaded.index, page, None if reader is None else reader.groups)
        result = related(
            loaded.index,
            number,
            reader=reader,
            k=k,
            exclude_linked=exclude_linked,
            lift=lift,
            per_space=per_space,
        )
        return _answer(result, loaded, page, viewer)

    @router.get(
        "/users/{user}/recommendations",
        response_model=ListResponse,
        responses=error_responses(401, 403, 422, 429, 503),
        summary="A reader's personal list",
        description="Served to its own viewer only (a signed X-Rankrec-Viewer naming the user) or to "
        "an admin token. A user the store does not know gets the list of a known user without "
        "history: the same status and body shape.",
    )
    def recommendations(
        request: Request,
        caller: LimitedCaller,
        user: UserId,
        viewer: Viewer,
        k: int = Query(10, **bounded_k),
        include_read: bool = Query(False, description="keep pages the user read in the last 30 days"),
        lift: float | None = _lift,
        per_space: int | None = Query(None, ge=1, le=max_k),
    ) -> ListResponse:
        if (viewer is None and caller.role != "admin") or (viewer is not None and viewer != user):
            raise ApiError(
                403,
                "forbidden",
                "a personal list is served only to its own viewer (a signed X-Rankrec-Viewer) or an admin",
            )
        loaded = loaded_index(request)
        reader = _reader(request, loaded, user)  # a user the store does not know: as one without history
        result = recommend(
            loaded.index, reader, k=k, exclude_read=not include_read, lift=lift, per_space=per_space
        )
        return _answer(result, loaded, user, user)

    @router.get(
        "/teams/{team}/landing",
        response_model=ListResponse,
        responses=error_responses(401, 403, 404, 409, 422, 429, 503),
        summary="A team's landing ordering",
    )
    def team_landing(
        request: Request,
        caller: LimitedCaller,
        team: TeamId,
        viewer: Viewer,
        k: int = Query(20, **bounded_k),
        lift: float | None = _lift,
        per_space: int | None = Query(None, ge=1, le=max_k),
    ) -> ListResponse:
        loaded = loaded_index(request)
        service = request.app.state.service
        reader = _reader(request, loaded, viewer)
        found = team_from_store(service.read_store(loaded.wiki), loaded.index, team)
        audience = loaded.index.visible(None if reader is None else reader.groups)
        found = dataclasses.replace(found, visible=found.visible & audience)
        result = landing(loaded.index, found, k=k, lift=lift, per_space=per_space)
        return _answer(result, loaded, team, viewer)

    @router.get(
        "/pages",
        response_model=PageSearchResponse,
        responses=error_responses(401, 403, 422, 429, 503),
        summary="Pages whose id starts with a prefix",
    )
    def search_pages(
        request: Request,
        caller: LimitedCaller,
        viewer: Viewer,
        prefix: str = Query("", max_length=256),
        limit: int = Query(20, ge=1, le=100),
    ) -> PageSearchResponse:
        loaded = loaded_index(request)
        reader = _reader(request, loaded, viewer)
        groups = None if reader is None else reader.groups
        index = loaded.index
        found = []
        for number in _prefixed(index, prefix):
            if index.may_see(number, groups) and not index.archived[number]:
                found.append(
                    PageMatch(
                        page=index.pages[number], title=index.titles[number], space=index.space_of(number)
                    )
                )
                if len(found) == limit:
                    break
        return PageSearchResponse(pages=found)

    return router


def _prefixed(index: Index, prefix: str):
    """Page numbers whose id starts with ``prefix``, in id order (binary search, then a bounded scan)."""
    low = index.first_position(prefix)
    for position in range(low, min(index.size, low + SEARCH_SCAN)):
        number = int(index.page_order[position])
        if not index.pages[number].startswith(prefix):
            return
        yield number
