"""Routes about the service itself: health, the live index's manifest, reload, Prometheus metrics."""

from __future__ import annotations

import time
from dataclasses import asdict
from datetime import UTC, datetime
from pathlib import Path

from fastapi import APIRouter, Request
from fastapi.responses import JSONResponse, Response
from prometheus_client import CONTENT_TYPE_LATEST, generate_latest

from .auth import AdminCaller, ReaderCaller
from .lists import loaded_index
from .middleware import built_at
from .models import HealthResponse, IndexResponse, ReloadResponse, error_responses

router = APIRouter()


def _iso(seconds: float) -> str:
    return datetime.fromtimestamp(seconds, UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


@router.get(
    "/v1/health",
    response_model=HealthResponse,
    responses={503: {"model": HealthResponse, "description": "no index is live"}},
    tags=["service"],
    summary="Which index is live and its age",
)
def health(request: Request):
    live = request.app.state.service.live
    loaded = live.current
    if loaded is None:
        body = HealthResponse(
            status="no_index",
            index=None,
            built=None,
            age_seconds=None,
            loaded_at=None,
            pages=None,
            last_refusal=live.last_refusal,
        )
        return JSONResponse(body.model_dump(), status_code=503)
    return HealthResponse(
        status="ok",
        index=loaded.folder.name,
        built=loaded.index.manifest.created,
        age_seconds=round(max(0.0, time.time() - built_at(loaded)), 3),
        loaded_at=_iso(loaded.loaded_at),
        pages=loaded.index.size,
        last_refusal=live.last_refusal,
    )


@router.get(
    "/v1/index",
    response_model=IndexResponse,
    responses=error_responses(401, 503),
    tags=["service"],
    summary="The live index's manifest",
)
def index_manifest(request: Request, caller: ReaderCaller) -> IndexResponse:
    loaded = loaded_index(request)
    found = loaded.index.manifest
    manifest = asdict(found) | {"damping": found.damping, "tol": found.tol, "lift": found.lift}
    wanted = set(IndexResponse.model_fields) - {"index", "store"}
    return IndexResponse(
        index=loaded.folder.name,
        store=Path(manifest["store"]).name,
        **{key: value for key, value in manifest.items() if key in wanted},
    )


@router.post(
    "/v1/index/reload",
    response_model=ReloadResponse,
    responses=error_responses(401, 403),
    tags=["service"],
    summary="Load a newly published index now",
)
def reload_index(request: Request, caller: AdminCaller) -> ReloadResponse:
    outcome = request.app.state.service.live.reload(retry=True)
    return ReloadResponse(**asdict(outcome))


@router.get(
    "/metrics",
    response_class=Response,
    responses={
        200: {
            "content": {CONTENT_TYPE_LATEST.split(";")[0]: {"schema": {"type": "string"}}},
            "description": "Prometheus text exposition format",
        }
    },
    tags=["service"],
    summary="Prometheus metrics",
)
def metrics(request: Request) -> Response:
    return Response(generate_latest(request.app.state.service.registry), media_type=CONTENT_TYPE_LATEST)
