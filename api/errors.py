"""Errors the service answers with: JSON ``{"error": {"code": ..., "message": ...}}``, never a traceback.

Route code raises :class:`ApiError`, or lets a rankrec error (:class:`rankrec.errors.RankrecError`)
through; :func:`install_error_handlers` turns them, request-validation failures and any unexpected
exception into that shape, library errors by :func:`from_library`. Codes are stable strings clients
may match on.
"""

from __future__ import annotations

import logging
import sqlite3
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from starlette.exceptions import HTTPException as StarletteHTTPException

from rankrec.errors import (
    GroupTooSmall,
    NoSpace,
    RankrecError,
    StaleData,
    StoreUnavailable,
    UnknownName,
    UnknownPage,
    UnknownTeam,
    UnknownUser,
)
from rankrec.store import store_unavailable

log = logging.getLogger("rankrec.api")


class ApiError(Exception):
    """An error answer: HTTP ``status``, a stable ``code``, a human ``message`` and optional ``details``."""

    def __init__(
        self,
        status: int,
        code: str,
        message: str,
        details: dict[str, Any] | None = None,
        headers: dict[str, str] | None = None,
    ) -> None:
        super().__init__(message)
        self.status = status
        self.code = code
        self.message = message
        self.details = details
        self.headers = headers


def from_library(error: RankrecError) -> ApiError:
    """The answer to a rankrec domain error (the one place that maps them to HTTP statuses).

    Suggestions are kept for pages (the caller filters them to visible ones) and teams; user ids
    are never suggested, since they would tell one reader who else uses the wiki.
    """
    if isinstance(error, UnknownPage):
        return ApiError(404, "unknown_page", f"unknown page {error.name!r}", _suggested(error))
    if isinstance(error, UnknownUser):
        return ApiError(404, "unknown_user", f"unknown user {error.name!r}")
    if isinstance(error, UnknownTeam):
        return ApiError(404, "unknown_team", f"unknown team {error.name!r}", _suggested(error))
    if isinstance(error, GroupTooSmall):
        return ApiError(409, "group_too_small", str(error), {"minimum": error.minimum})
    if isinstance(error, StaleData):
        return ApiError(503, "stale_index", "the live index does not match the wiki store; rebuild it")
    if isinstance(error, NoSpace):  # RFC 9110 section 15.6.4: 503 with Retry-After, a temporary state
        return ApiError(
            503, "no_space", "the service has no space left on its disk; nothing was stored", None, _LATER
        )
    if isinstance(error, StoreUnavailable):  # the message names no path: that stays on the server
        return ApiError(503, "store_unavailable", "the store cannot be used just now; retry", None, _SOON)
    return ApiError(422, "invalid_request", "the library refused the request")


_SOON, _LATER = {"Retry-After": "1"}, {"Retry-After": "60"}


def from_storage(error: BaseException) -> ApiError | None:
    """The answer to a raw store or system error (a full disk, a lock held elsewhere) met outside the
    store's own transactions, or None when it is none of those."""
    found = store_unavailable("store", error)
    return None if found is None else from_library(found)


def _suggested(error: UnknownName) -> dict[str, Any] | None:
    return {"closest": list(error.suggestions)} if error.suggestions else None


def error_body(code: str, message: str, details: dict[str, Any] | None = None) -> dict:
    """The JSON body of an error answer."""
    error: dict[str, Any] = {"code": code, "message": message}
    if details:
        error["details"] = details
    return {"error": error}


def _answer(error: ApiError) -> JSONResponse:
    return JSONResponse(
        error_body(error.code, error.message, error.details), status_code=error.status, headers=error.headers
    )


_HTTP_CODES = {
    401: "unauthorised",
    403: "forbidden",
    404: "not_found",
    405: "method_not_allowed",
    409: "conflict",
    413: "too_large",
    415: "unsupported_media_type",
}


def install_error_handlers(app: FastAPI) -> None:
    """Answer every failure as JSON with a stable code; log unexpected ones without exposing them."""

    @app.exception_handler(ApiError)
    async def _api_error(request: Request, error: ApiError) -> JSONResponse:
        return _answer(error)

    @app.exception_handler(RankrecError)
    async def _library_error(request: Request, error: RankrecError) -> JSONResponse:
        return _answer(from_library(error))

    @app.exception_handler(RequestValidationError)
    async def _invalid(request: Request, error: RequestValidationError) -> JSONResponse:
        problems = [
            {"where": ".".join(map(str, problem.get("loc", ()))), "reason": problem.get("msg", "")}
            for problem in error.errors()
        ]
        return JSONResponse(
            error_body("invalid_request", "the request does not match the schema", {"problems": problems}),
            status_code=422,
        )

    @app.exception_handler(StarletteHTTPException)
    async def _http(request: Request, error: StarletteHTTPException) -> JSONResponse:
        if (
            error.status_code == 400
        ):  # FastAPI: a body it could not parse (e.g. not UTF-8); as its JSON errors
            return JSONResponse(
                error_body("invalid_request", "the request body could not be parsed"), status_code=422
            )
        code = _HTTP_CODES.get(error.status_code, "http_error")
        message = error.detail if isinstance(error.detail, str) else code.replace("_", " ")
        return JSONResponse(error_body(code, message), status_code=error.status_code, headers=error.headers)

    @app.exception_handler(sqlite3.OperationalError)
    @app.exception_handler(OSError)
    async def _storage(request: Request, error: Exception) -> JSONResponse:
        answer = from_storage(error)
        if answer is None:
            return _failed(request)
        log.error("store unavailable on %s %s: %s", request.method, _template(request), answer.code)
        return _answer(answer)

    @app.exception_handler(Exception)
    async def _unexpected(request: Request, error: Exception) -> JSONResponse:
        return _failed(request)


def _template(request: Request) -> str:
    """The route template, not the path: the path holds page and user ids."""
    return getattr(request.scope.get("route"), "path", None) or "unmatched"


def _failed(request: Request) -> JSONResponse:
    """The answer to an unexpected exception (logged with its traceback, which the answer never holds)."""
    log.exception("unexpected error on %s %s", request.method, _template(request))
    return JSONResponse(error_body("internal", "the service failed on this request"), status_code=500)
