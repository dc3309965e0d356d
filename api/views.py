"""Taking in reading history, and the privacy calls on it: erase one reader, apply retention.

``POST /v1/views`` appends a batch of views to the store in one transaction and answers only
after the commit is on disk (SQLite WAL with ``synchronous=FULL``, :meth:`rankrec.store.Store.
append_views`). Each record is checked as the views reader checks it (:func:`rankrec.sources.
check_view`); one bad record, a page the wiki does not hold, or a page the record's user may not
see (answered as if the wiki did not hold it), refuses the whole batch with 422 ``invalid_view``
naming the record's index. Every write goes through one connection guarded
by a lock (SQLite allows one writer at a time). With a pseudonym key configured, user ids are
stored as their keyed pseudonyms (:func:`api.service.Service.user_id`).
"""

from __future__ import annotations

import asyncio
import dataclasses
import logging
import sqlite3
import threading
import time
from collections.abc import Callable
from contextlib import asynccontextmanager
from datetime import UTC, datetime
from pathlib import Path
from typing import Annotated

from fastapi import APIRouter, Depends, FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.routing import APIRoute
from prometheus_client import Counter
from pydantic import BaseModel, ConfigDict, Field, StrictFloat, StrictInt, StrictStr

from rankrec.errors import InputError, UnknownPage
from rankrec.privacy import retention_cutoff
from rankrec.sources import Origin, ViewRecord, check_view
from rankrec.store import Store

from .auth import Caller, require_admin, require_reader
from .errors import ApiError, from_storage
from .ids import UserId
from .models import error_responses

log = logging.getLogger("rankrec.api")

RETENTION_EVERY = 86_400.0
"""Seconds between two background retention runs (daily) when ``retention_days`` is set."""

_ORIGIN = "POST /v1/views"


# -- models ----------------------------------------------------------------------------------------
class ViewIn(BaseModel):
    """One page view as the wiki front end reports it."""

    model_config = ConfigDict(
        extra="forbid",
        json_schema_extra={
            "examples": [
                {
                    "user": "u00042",
                    "page": "ops/patching-quarterly-checklist",
                    "timestamp": "2026-04-01T09:15:00+02:00",
                }
            ]
        },
    )
    user: StrictStr | StrictInt = Field(description="the reader's id (stored pseudonymised if so configured)")
    page: StrictStr | StrictInt = Field(description="the page id, as the index and store know it")
    timestamp: StrictStr | StrictFloat | StrictInt = Field(
        description="ISO 8601 (with Z or an offset; without one it is UTC) or Unix seconds; "
        "at most 5 minutes in the future",
        examples=["2026-04-01T09:15:00Z", 1775034900],
    )
    dwell: StrictFloat | StrictInt | None = Field(default=None, description="seconds on the page, if known")


class ViewBatch(BaseModel):
    """A batch of views; stored together or not at all."""

    model_config = ConfigDict(extra="forbid")
    views: list[ViewIn] = Field(description="at most the service's batch limit (1,000 by default)")


class ViewsStored(BaseModel):
    """What a batch did once committed."""

    model_config = ConfigDict(json_schema_extra={"examples": [{"received": 3, "stored": 2, "duplicates": 1}]})
    received: int = Field(ge=0)
    stored: int = Field(ge=0, description="views new to the store")
    duplicates: int = Field(
        ge=0, description="views already stored (same user, page and timestamp), or repeated"
    )


class UserErased(BaseModel):
    """The answer to erasing one reader's views."""

    model_config = ConfigDict(json_schema_extra={"examples": [{"user": "u00042", "deleted": 17}]})
    user: str = Field(description="the user id as requested")
    deleted: int = Field(ge=0, description="views deleted (0 for a reader the store does not know)")


class RetentionDone(BaseModel):
    """The answer to a retention run."""

    model_config = ConfigDict(
        json_schema_extra={"examples": [{"days": 180, "cutoff": "2025-10-03T12:00:00Z", "deleted": 5120}]}
    )
    days: int = Field(ge=1)
    cutoff: str = Field(description="views before this moment (UTC) were deleted")
    deleted: int = Field(ge=0)


# -- the writer --------------------------------------------------------------------------------------
class ViewKeeper:
    """The one write connection to the store, its lock, and the views-stored counter."""

    def __init__(self, service, settings) -> None:
        self.service = service
        self.settings = settings
        self.stored = Counter(
            "rankrec_views_stored", "Views newly stored through POST /v1/views", registry=service.registry
        )
        self.deleted = Counter(
            "rankrec_views_deleted",
            "Views deleted by retention or erasure",
            ("why",),
            registry=service.registry,
        )
        self._lock = threading.Lock()
        self._store: Store | None = None

    def _wiki(self) -> Path:
        if self.settings.wiki is not None:
            return Path(self.settings.wiki)
        loaded = self.service.live.current
        if loaded is None:
            raise ApiError(503, "no_index", "no index is live, so the store to write to is not known")
        return Path(loaded.wiki)

    def write(self, action: Callable[[Store], int]) -> int:
        """Run ``action`` on the write connection, one caller at a time."""
        wiki = self._wiki()
        with self._lock:
            try:
                if self._store is None or Path(self._store.path) != wiki:
                    self._close()
                    self._store = Store(wiki, create=False)
                return action(self._store)
            except sqlite3.OperationalError as error:  # locked by an import, disk full, ...
                log.error("store write failed: %s", error)
                answer = from_storage(error) or ApiError(
                    503, "store_unavailable", "the store cannot take writes just now; retry"
                )
                raise answer from None

    def close_store(self) -> None:
        """Close the write connection once the write in progress (if any) is done."""
        with self._lock:
            self._close()

    def _close(self) -> None:
        if self._store is not None:
            self._store.close()
            self._store = None

    def apply_retention(self, now: float | None = None) -> RetentionDone:
        days = self.settings.retention_days
        if days is None:
            raise ApiError(409, "retention_off", "no retention is configured (serve with --retention-days N)")
        cutoff = retention_cutoff(days, now)
        deleted = self.write(lambda store: store.delete_views_before(cutoff))
        self.deleted.labels("retention").inc(deleted)
        log.info("retention: %d view(s) older than %d day(s) deleted", deleted, days)
        moment = datetime.fromtimestamp(cutoff, UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
        return RetentionDone(days=days, cutoff=moment, deleted=deleted)


def _keeper(request: Request) -> ViewKeeper:
    return request.app.state.views


# -- record checks -----------------------------------------------------------------------------------
def _invalid(index: int, reason: str) -> ApiError:
    return ApiError(
        422, "invalid_view", f"view {index}: {reason}; nothing was stored", {"index": index, "reason": reason}
    )


class _ViewsRoute(APIRoute):
    """Schema failures inside one record answer ``invalid_view`` with that record's index."""

    def get_route_handler(self):
        handler = super().get_route_handler()

        async def checked(request: Request):
            try:
                return await handler(request)
            except RequestValidationError as error:
                problem = _record_problem(error.errors())
                if problem is None:
                    raise
                raise _invalid(*problem) from None

        return checked


_EXPECTED = {
    "user": "a string",
    "page": "a string",
    "timestamp": "text or a number",
    "dwell": "a number or null",
}


def _record_problem(problems) -> tuple[int, str] | None:
    """(index, reason) of the first problem located in ``body.views[i]``, or None."""
    for problem in problems:
        where = tuple(problem.get("loc", ()))
        if len(where) < 3 or where[:2] != ("body", "views") or not isinstance(where[2], int):
            continue
        if len(where) == 3:
            return where[2], problem.get("msg", "invalid")
        field = str(where[3])
        if len(where) > 4 and field in _EXPECTED:  # a failure of every member of a union type
            shown = type(problem.get("input")).__name__
            return where[2], f"{field} must be {_EXPECTED[field]}, not {shown}"
        return where[2], f"{field}: {problem.get('msg', 'invalid')}"
    return None


def _records(views: list[ViewIn], user_id: Callable[[str], str]) -> list[ViewRecord]:
    now = time.time()
    records = []
    for number, view in enumerate(views):
        try:
            record = check_view(
                view.user, view.page, view.timestamp, view.dwell, origin=Origin(_ORIGIN, number), now=now
            )
        except InputError as error:  # answered with the record's index, not as a library error
            raise _invalid(number, error.reason) from None
        records.append(dataclasses.replace(record, user=user_id(record.user)))
    return records


def _first_hidden(request: Request, records: list[ViewRecord], keeper: ViewKeeper) -> int | None:
    """The record to refuse when the batch names a page that its user may not see, else None.

    A view of a restricted page by a non-member is refused with the answer a page the wiki does not
    hold gets (``invalid_view``, "unknown page"), so a reader token cannot find restricted ids by
    posting views (OWASP API Security Top 10 2023, API1: object level authorisation). The record
    named is the first one that is hidden from its user or absent from the live index, as the store
    names the first absent page of a batch. Page groups come from the live index: with none live, or
    for a page published after it was built, only the store's check applies.
    """
    loaded = request.app.state.service.live.current
    if loaded is None:
        return None
    index = loaded.index
    numbers = {page: index.find(page) for page in {record.page for record in records}}
    restricted = {page for page, number in numbers.items() if number is not None and not index.public[number]}
    if not restricted:
        return None
    store = request.app.state.service.read_store(keeper._wiki())  # the store the views go to
    with store.reading():
        rows = {record.user: store.user_row(record.user) for record in records if record.page in restricted}
        groups = store.groups_of_users([row for row in rows.values() if row is not None])
    first_absent = None
    for position, record in enumerate(records):
        number = numbers[record.page]
        if number is None:
            first_absent = position if first_absent is None else first_absent
        elif record.page in restricted:
            row = rows[record.user]
            if not index.may_see(number, None if row is None else groups[row]):
                return position if first_absent is None else first_absent
    return None


# -- routes --------------------------------------------------------------------------------------------
router = APIRouter(route_class=_ViewsRoute, tags=["views"])


@router.post(
    "/v1/views",
    response_model=ViewsStored,
    responses=error_responses(401, 403, 413, 422, 503),
    summary="Append a batch of page views (idempotent); answers after the commit",
)
def post_views(
    batch: ViewBatch, request: Request, caller: Annotated[Caller, Depends(require_reader)]
) -> ViewsStored:
    keeper = _keeper(request)
    limit = keeper.settings.max_batch
    if len(batch.views) > limit:
        raise ApiError(413, "too_large", f"at most {limit} views per request; got {len(batch.views)}")
    records = _records(batch.views, request.app.state.service.user_id)
    hidden = _first_hidden(request, records, keeper)
    if hidden is not None:
        raise _invalid(hidden, f"unknown page {records[hidden].page!r}")
    try:
        stored = keeper.write(lambda store: store.append_views(records, known_pages_only=True))
    except UnknownPage as error:
        number = next(record.origin.line for record in records if record.page == error.name)
        raise _invalid(number, f"unknown page {error.name!r}") from None
    keeper.stored.inc(stored)
    return ViewsStored(received=len(records), stored=stored, duplicates=len(records) - stored)


@router.delete(
    "/v1/users/{user:path}/views",
    response_model=UserErased,
    responses=error_responses(401, 403, 422, 503),
    summary="Erase every view of one reader (admin)",
)
def erase_user_views(
    user: UserId, request: Request, caller: Annotated[Caller, Depends(require_admin)]
) -> UserErased:
    # with a key, views are stored under the pseudonym; history imported before the key was set
    # may still carry the plain id, so both go
    forms = dict.fromkeys((request.app.state.service.user_id(user), user))
    keeper = _keeper(request)
    deleted = keeper.write(lambda store: sum(store.erase_user(form) for form in forms))
    keeper.deleted.labels("erasure").inc(deleted)
    log.info("erased %d view(s) of one reader at the request of %s", deleted, caller.name)
    return UserErased(user=user, deleted=deleted)


@router.post(
    "/v1/admin/retention",
    response_model=RetentionDone,
    responses=error_responses(401, 403, 409, 503),
    summary="Delete views older than the configured retention (admin)",
)
def apply_retention(request: Request, caller: Annotated[Caller, Depends(require_admin)]) -> RetentionDone:
    return _keeper(request).apply_retention()


# -- wiring --------------------------------------------------------------------------------------------
def attach(app: FastAPI, settings) -> None:
    """Give ``app`` its view writer, and (with ``retention_days``) retention at startup and daily.

    The app's own lifespan is kept: retention and the writer's closing wrap around it.
    """
    keeper = app.state.views = ViewKeeper(app.state.service, settings)
    inner = app.router.lifespan_context

    @asynccontextmanager
    async def lifespan(running: FastAPI):
        async with inner(running) as state:
            task = None
            if settings.retention_days is not None:
                task = asyncio.create_task(_retention_loop(keeper, RETENTION_EVERY))
            try:
                yield state
            finally:
                if task is not None:
                    task.cancel()
                    await asyncio.gather(task, return_exceptions=True)
                keeper.close_store()

    app.router.lifespan_context = lifespan


async def _retention_loop(keeper: ViewKeeper, every: float) -> None:
    """Apply retention now and then every ``every`` seconds; a failed run is logged, not fatal."""
    while True:
        try:
            await asyncio.to_thread(keeper.apply_retention)
        except ApiError as error:
            log.error("retention run failed: %s", error.message)
        except Exception:
            log.exception("retention run failed")
        await asyncio.sleep(every)
