"""The service's FastAPI application, built by a factory from :class:`api.settings.ServiceSettings`.

``create_app(settings)`` loads the published index (a missing or refused one leaves the service
up, answering 503 until a good index is published), installs the JSON error handlers, the body
size limit and request metrics, and includes the routers:

- ``api.lists``: related pages, personal lists, landing orderings, page search;
- ``api.status``: health, the index manifest, reload, ``/metrics``;
- ``api.preview``: the preview page;
- ``api.views`` (when present): ``router`` and ``attach(app, settings)`` for views ingestion.

``app.state.service`` is the :class:`api.service.Service` (live index, tokens, read stores and the
prometheus ``registry`` that other modules register their metrics on). The watcher thread runs
while the app's lifespan does (uvicorn, or ``with TestClient(app)``).
"""

from __future__ import annotations

import importlib.util
from contextlib import asynccontextmanager

from fastapi import FastAPI

from rankrec import __version__

from .errors import install_error_handlers
from .lists import make_router
from .middleware import BodyLimitMiddleware, MetricsMiddleware, ServiceMetrics
from .service import Service
from .settings import ServiceSettings

DESCRIPTION = (
    "Related pages, personal lists and team landing orderings of the wiki, from a published "
    "rankrec index. Every list is filtered by the viewer's access groups; without a viewer only "
    "pages visible to everyone are listed. A reader token names the viewer only in a signed, "
    "short-lived X-Rankrec-Viewer header (USER.EXPIRY.MAC, made with the token's viewer key); "
    "viewer= is for admin tokens. List and search calls are rate and concurrency limited per token "
    "(429 with Retry-After). Page ids travel percent-encoded (a '/' as %2F). "
    'Errors are JSON: {"error": {"code", "message", "details"}}.'
)


def _views_module():
    """``api.views`` if it exists (its own import errors are not hidden), else None."""
    if importlib.util.find_spec("api.views") is None:
        return None
    from . import views

    return views


def create_app(settings: ServiceSettings) -> FastAPI:
    """The service for ``settings``; see the module docstring."""
    service = Service(settings)
    metrics = ServiceMetrics(service.registry, service.live)

    def count(outcome) -> None:
        (metrics.swaps if outcome.outcome == "swapped" else metrics.refusals).inc()

    service.live.reload()
    service.live.on_outcome = count

    @asynccontextmanager
    async def lifespan(app: FastAPI):
        service.live.start_watching(settings.watch_seconds)
        try:
            yield
        finally:
            service.close()

    app = FastAPI(
        title="rankrec",
        version=__version__,
        description=DESCRIPTION,
        lifespan=lifespan,
    )
    app.state.service = service
    app.state.settings = settings
    app.state.metrics = metrics
    install_error_handlers(app)
    app.add_middleware(BodyLimitMiddleware, limit=settings.max_body_bytes)
    app.add_middleware(MetricsMiddleware, metrics=metrics)  # added last: outermost, sees every answer

    from . import preview, status

    app.include_router(make_router(settings.max_k))
    app.include_router(status.router)
    app.include_router(preview.router)
    views = _views_module()
    if views is not None:
        app.include_router(views.router)
        views.attach(app, settings)
    return app


def app_from_environment() -> FastAPI:
    """The uvicorn ``factory=True`` target: settings from the ``RANKREC_SERVE_*`` variables."""
    return create_app(ServiceSettings.from_environment())
