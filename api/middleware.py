"""Plain ASGI middleware: request metrics (prometheus), the access log, and the request body size limit.

Metrics and the access log (logger ``rankrec.api.access``: method, route template, status, time)
name the route *template* (``/v1/pages/{page}/related``), never the raw path or query, so page and
user ids (who read what) do not become label values or log lines. ``rankrec serve`` turns uvicorn's
own access log, which writes the raw request line, off.
"""

from __future__ import annotations

import json
import logging
import time
from datetime import datetime

from prometheus_client import CollectorRegistry, Counter, Gauge, Histogram
from starlette.exceptions import HTTPException

from .errors import error_body

access_log = logging.getLogger("rankrec.api.access")

# 0.5 ms to 5 s: related lists answer in about a millisecond, personal lists in tens (common practice:
# buckets spanning the expected latencies with roughly 2-2.5x steps)
LATENCY_BUCKETS = (0.0005, 0.001, 0.002, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0)


class ServiceMetrics:
    """The service's request metrics and index age, registered on ``registry``."""

    def __init__(self, registry: CollectorRegistry, live) -> None:
        self.requests = Counter(
            "rankrec_http_requests",
            "HTTP requests answered, by route template, method and status",
            ("route", "method", "status"),
            registry=registry,
        )
        self.latency = Histogram(
            "rankrec_http_request_seconds",
            "Time to answer an HTTP request, by route template",
            ("route",),
            buckets=LATENCY_BUCKETS,
            registry=registry,
        )
        self.index_age = Gauge(
            "rankrec_index_age_seconds",
            "Seconds since the live index was built (-1: no index is live)",
            registry=registry,
        )
        self.index_age.set_function(lambda: index_age(live))
        self.swaps = Counter("rankrec_index_swaps", "New indexes swapped in while serving", registry=registry)
        self.refusals = Counter(
            "rankrec_index_refusals",
            "Published indexes refused (the old one kept serving)",
            registry=registry,
        )


def built_at(loaded) -> float:
    """The Unix time the index of ``loaded`` was built (its manifest's ``created``)."""
    return datetime.strptime(loaded.index.manifest.created, "%Y-%m-%dT%H:%M:%S%z").timestamp()


def index_age(live) -> float:
    loaded = live.current
    return -1.0 if loaded is None else max(0.0, time.time() - built_at(loaded))


def route_template(scope) -> str:
    """The template of the route that answered (``"unmatched"`` if none): never a page or user id."""
    return getattr(scope.get("route"), "path", None) or "unmatched"


class MetricsMiddleware:
    """Count every HTTP request, time it and log it, by the route template that answered it."""

    def __init__(self, app, metrics: ServiceMetrics) -> None:
        self.app = app
        self.metrics = metrics

    async def __call__(self, scope, receive, send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        started = time.perf_counter()
        status = {"code": 500}

        async def sending(message) -> None:
            if message["type"] == "http.response.start":
                status["code"] = message["status"]
            await send(message)

        try:
            await self.app(scope, receive, sending)
        finally:
            template = route_template(scope)
            seconds = time.perf_counter() - started
            self.metrics.requests.labels(template, scope["method"], str(status["code"])).inc()
            self.metrics.latency.labels(template).observe(seconds)
            access_log.info("%s %s %d %.1f ms", scope["method"], template, status["code"], seconds * 1000)


class _TooLarge(HTTPException):
    def __init__(self, limit: int) -> None:
        super().__init__(413, f"the request body is larger than {limit} bytes")


class BodyLimitMiddleware:
    """Refuse request bodies over ``limit`` bytes with 413 ``too_large`` (declared or streamed)."""

    def __init__(self, app, limit: int) -> None:
        self.app = app
        self.limit = limit

    async def __call__(self, scope, receive, send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        declared = dict(scope.get("headers") or ()).get(b"content-length")
        if declared is not None and (not declared.isdigit() or int(declared) > self.limit):
            await self._refuse(send)
            return
        seen = 0

        async def receiving():
            nonlocal seen
            message = await receive()
            if message["type"] == "http.request":
                seen += len(message.get("body", b""))
                if seen > self.limit:
                    raise _TooLarge(self.limit)  # an HTTPException: the app's handlers answer 413
            return message

        await self.app(scope, receiving, send)

    async def _refuse(self, send) -> None:
        body = json.dumps(
            error_body("too_large", f"the request body is larger than {self.limit} bytes")
        ).encode()
        await send(
            {
                "type": "http.response.start",
                "status": 413,
                "headers": [
                    (b"content-type", b"application/json"),
                    (b"content-length", str(len(body)).encode()),
                ],
            }
        )
        await send({"type": "http.response.body", "body": body})
