"""Pydantic models of every request and response body of the service (the OpenAPI schema).

Requests forbid unknown fields. The views models live beside their routes in ``api/views.py``.
"""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, ConfigDict, Field

_ITEM_EXAMPLE = {
    "rank": 1,
    "page": "ops/patching-quarterly-checklist",
    "title": "Patching quarterly checklist",
    "space": "ops",
    "score": 0.0841,
    "pagerank": 0.0123,
    "reason": "linked from Patching emergency schedule",
}


class ErrorDetail(BaseModel):
    code: str = Field(description="stable code clients may match on", examples=["unknown_page"])
    message: str = Field(examples=["unknown page 'ops/patching'; closest: ops/patching-overview"])
    details: dict | None = None


class ErrorResponse(BaseModel):
    """Every error answer."""

    model_config = ConfigDict(
        json_schema_extra={
            "examples": [{"error": {"code": "unauthorised", "message": "the bearer token is not valid"}}]
        }
    )
    error: ErrorDetail


class Item(BaseModel):
    """One recommended page and why it is in the list."""

    model_config = ConfigDict(json_schema_extra={"examples": [_ITEM_EXAMPLE]})
    rank: int = Field(ge=1)
    page: str
    title: str
    space: str | None
    score: float = Field(description="ranking score: personalised PageRank after the lift")
    pagerank: float = Field(description="personalised PageRank value")
    reason: str


class ListResponse(BaseModel):
    """A list, best first."""

    model_config = ConfigDict(
        json_schema_extra={
            "examples": [
                {
                    "kind": "related",
                    "subject": "ops/patching-emergency-schedule",
                    "viewer": "u00003",
                    "items": [_ITEM_EXAMPLE],
                    "error_bound": None,
                    "index": ".index.20260401T061154-ab12cd34",
                }
            ]
        }
    )
    kind: Literal["related", "personal", "landing"]
    subject: str = Field(description="the page, user or team the list is for, as requested")
    viewer: str | None = Field(description="whose access groups filtered the list (None: public pages only)")
    items: list[Item]
    error_bound: float | None = Field(description="L1 bound of the PageRank scores' error (None: unknown)")
    index: str = Field(description="the index publication that answered")


class PageMatch(BaseModel):
    page: str
    title: str
    space: str | None


class PageSearchResponse(BaseModel):
    """Pages whose id starts with a prefix (visible to the viewer)."""

    model_config = ConfigDict(
        json_schema_extra={
            "examples": [
                {
                    "pages": [
                        {
                            "page": "ops/patching-quarterly-checklist",
                            "title": "Patching quarterly checklist",
                            "space": "ops",
                        }
                    ]
                }
            ]
        }
    )
    pages: list[PageMatch]


class HealthResponse(BaseModel):
    """Which index is live and how old it is."""

    model_config = ConfigDict(
        json_schema_extra={
            "examples": [
                {
                    "status": "ok",
                    "index": ".index.20260401T061154-ab12cd34",
                    "built": "2026-04-01T06:11:54Z",
                    "age_seconds": 3600.0,
                    "loaded_at": "2026-04-01T06:12:01Z",
                    "pages": 300,
                    "last_refusal": None,
                }
            ]
        }
    )
    status: Literal["ok", "no_index"]
    index: str | None = Field(description="folder name of the live index publication")
    built: str | None
    age_seconds: float | None
    loaded_at: str | None
    pages: int | None
    last_refusal: str | None = Field(description="why the last published index was refused, if it was")


class IndexResponse(BaseModel):
    """The live index's manifest (the store is named by its file name only)."""

    model_config = ConfigDict(
        json_schema_extra={
            "examples": [
                {
                    "index": ".index.20260401T061154-ab12cd34",
                    "format_version": 2,
                    "fingerprint": "3f2a9c",
                    "created": "2026-04-01T06:11:54Z",
                    "damping": 0.85,
                    "tol": 1e-6,
                    "lift": 0.5,
                    "k_related": 50,
                    "topics": "spaces",
                    "counts": {"pages": 300, "links": 2138},
                    "store": "wiki.db",
                    "precompute": {"method": "power", "view_share": None, "pages": "all"},
                    "configuration": {"damping": 0.85, "lift": 0.5, "navigation_weight": 0.3},
                    "serving": {"vector_epsilon": 1e-4, "configured": 1e-6, "readers": 64},
                    "versions": {"rankrec": "0.1.0"},
                }
            ]
        }
    )
    index: str
    format_version: int
    fingerprint: str
    created: str
    damping: float
    tol: float
    lift: float
    k_related: int
    topics: str
    counts: dict[str, int]
    store: str
    precompute: dict
    configuration: dict
    serving: dict = Field(
        default_factory=dict,
        description="settings the build measured for serving: the push threshold of personal lists "
        "(vector_epsilon), the configured one, and the sampled readers it was checked on",
    )
    versions: dict


class ReloadResponse(BaseModel):
    """What ``POST /v1/index/reload`` did."""

    model_config = ConfigDict(
        json_schema_extra={
            "examples": [{"outcome": "swapped", "index": ".index.20260402T010000-ef56ab78", "reason": None}]
        }
    )
    outcome: Literal["swapped", "unchanged", "refused"]
    index: str | None = Field(description="the publication serving after the call")
    reason: str | None


def error_responses(*statuses: int) -> dict:
    """The ``responses=`` entry documenting error answers with :class:`ErrorResponse`."""
    words = {
        401: "missing or invalid bearer token",
        403: "the token's role or the viewer does not allow this",
        404: "unknown page, user or team",
        409: "too few distinct active readers in the team",
        413: "request body too large",
        422: "the request does not match the schema",
        429: "rate or concurrency limit reached: retry after Retry-After seconds",
        503: "no index is live, or the store cannot be used just now (e.g. no space left)",
    }
    return {status: {"model": ErrorResponse, "description": words[status]} for status in statuses}
