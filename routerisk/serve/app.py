"""The JSON API and the page of ``routerisk serve`` (Starlette).

Every endpoint calls the functions the commands call:
:func:`routerisk.analysis.scoring.score_routes` (``score``),
:func:`routerisk.analysis.alternatives.suggest_routes` (``suggest``),
:func:`routerisk.analysis.review.review_areas` (``review``) and
:func:`routerisk.analysis.dayplan.plan_day` (``plan``); files sent by the page are written under
their own base name into a private temporary folder and read by the same readers, so a figure or a
one-line error is the one the command gives for the same file. The work runs in worker threads, so
the server keeps answering while a request computes.

Endpoints (JSON in, JSON out; every answer carries ``made_from`` and ``caution``):

``GET /api/info``
    Bounds, bands and colours, categories, rules, time zone of the network.
``GET /api/network?bbox=W,S,E,N&zoom=Z``
    Edges (one per street segment, the higher band of its two directions) and sources in the
    box, simplified for the zoom level (see :data:`routerisk.serve.service.MAX_FEATURES` and
    :meth:`routerisk.serve.service.Service.network`).
``POST /api/score``
    ``{"route": ROUTE, "departs": [ISO, ...]}``; ROUTE is ``{"waypoints": [[lon, lat], ...],
    "name": ..., "keep_vias": false}`` (via points required only with ``keep_vias``),
    ``{"geojson": {...}}`` or ``{"file": {"name": ..., "text": ...}}``.
``POST /api/week``
    ``{"route": ROUTE, "date": ISO date}``: the route's risk departing at each of the 168
    hours of that date's week (Monday 00:00 first), with
    :meth:`routerisk.analysis.scoring.Scorer.quick`.
``POST /api/alternatives``
    ``{"route": ROUTE, "departs": [ISO], "count", "max_extra_time", "max_extra_length",
    "min_difference", "keep_every"}`` (the options and bounds of ``suggest``).
``POST /api/review``
    ``{"area": GeoJSON or {"file": ...}, "what_if": [[SPEC, ...], ...], "at", "top"}``.
``POST /api/plan``
    ``{"runs": {"name", "text"}, "routes": [{"name", "text"}], "date", "vehicles", "step",
    "turnaround"}``.
``POST /api/export``
    ``{"name", "depart", "line": [[lon, lat], ...], "format": "geojson" | "gpx"}``: a route
    file :func:`routerisk.io.routes.read_routes` reads back.
"""

from __future__ import annotations

import json
import math
import secrets
from collections.abc import Awaitable, Callable
from importlib import resources
from pathlib import Path
from typing import Any

import anyio
from starlette.applications import Starlette
from starlette.middleware import Middleware
from starlette.middleware.trustedhost import TrustedHostMiddleware
from starlette.requests import Request
from starlette.responses import FileResponse, Response
from starlette.routing import Mount, Route
from starlette.staticfiles import StaticFiles

from routerisk import CAUTION
from routerisk.errors import RouteriskError
from routerisk.io.atomic import dumps_json
from routerisk.serve.requests import (
    MAX_UPLOAD_BYTES,
    RequestError,
    _Upload,
    _upload,
    read_body,
)
from routerisk.serve.service import (
    EXPORT_STEP_M,
    MAX_FEATURES,
    MAX_SOURCES,
    MERGE_BELOW_ZOOM,
    Service,
)

__all__ = [
    "EXPORT_STEP_M",
    "LOOPBACK_HOSTS",
    "MAX_FEATURES",
    "MAX_SOURCES",
    "MAX_UPLOAD_BYTES",
    "MERGE_BELOW_ZOOM",
    "TOKEN_COOKIE",
    "TOKEN_HEADER",
    "RequestError",
    "Service",
    "create_app",
    "is_loopback",
]

#: Hosts the page answers when bound to loopback (a guard against DNS rebinding).
LOOPBACK_HOSTS = ("127.0.0.1", "localhost", "::1", "[::1]")
TOKEN_HEADER = "x-routerisk-token"  # noqa: S105 - a header name, not a secret
TOKEN_COOKIE = "routerisk_token"  # noqa: S105 - a cookie name, not a secret


def is_loopback(host: str) -> bool:
    """Tell whether ``host`` names this machine only (127.0.0.0/8, ::1, localhost)."""
    import ipaddress

    h = host.strip("[]")
    if h == "localhost":
        return True
    try:
        return ipaddress.ip_address(h).is_loopback
    except ValueError:
        return False


def _answer(
    svc: Service, payload: dict[str, Any], up: _Upload | None, status: int = 200
) -> Response:
    payload = dict(payload)
    payload.setdefault("made_from", svc.made_from(up))
    payload["caution"] = CAUTION
    body = json.dumps(
        payload, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False
    )
    return Response(body, status_code=status, media_type="application/json")


def _error(svc: Service, message: str, status: int, up: _Upload | None = None) -> Response:
    text = up.scrub(message) if up else message
    return _answer(svc, {"error": text, "status": status}, None, status)


def _post(
    svc: Service,
    work: Callable[[dict[str, Any], _Upload], dict[str, Any]],
    limiter: anyio.CapacityLimiter,
) -> Callable[[Request], Awaitable[Response]]:
    async def endpoint(request: Request) -> Response:
        try:
            doc = await read_body(request, svc.max_upload)
        except RequestError as exc:
            return _error(svc, exc.message, exc.status)
        with _upload(svc.max_upload) as up:
            try:
                result = await anyio.to_thread.run_sync(work, doc, up, limiter=limiter)
            except RequestError as exc:
                return _error(svc, exc.message, exc.status, up)
            except RouteriskError as exc:
                return _error(svc, exc.one_line(), 422 if _is_data(exc) else 400, up)
            return _answer(svc, result, up)

    return endpoint


def _is_data(exc: RouteriskError) -> bool:
    return type(exc).__name__ in ("EmptyNetworkError",)


def create_app(
    net: Any,
    *,
    token: str | None = None,
    loopback: bool = True,  # noqa: C901
    max_upload: int = MAX_UPLOAD_BYTES,
    workers: int = 4,
) -> Starlette:
    """Return the ASGI application on a loaded network.

    Parameters
    ----------
    net
        A tagged :class:`routerisk.network.folder.Network` (loaded once, shared by every request).
    token
        When given, every request must carry it (header ``X-Routerisk-Token``, query
        ``?token=``, or the cookie the page sets when opened with ``?token=``).
    loopback
        Bound to loopback: answer only requests addressed to a loopback host name.
    max_upload
        Largest request body in bytes.
    workers
        Requests computed at once (worker threads); others wait their turn.
    """
    svc = Service(net, max_upload=max_upload)
    limiter = anyio.CapacityLimiter(workers)
    view_limiter = anyio.CapacityLimiter(2)  # the map layer never waits behind long work
    static = resources.files("routerisk") / "static"
    page = Path(str(static / "serve" / "index.html"))

    async def index(request: Request) -> Response:
        resp = FileResponse(page, media_type="text/html")
        if token and request.query_params.get("token") == token:
            resp.set_cookie(TOKEN_COOKIE, token, httponly=True, samesite="strict")
        return resp

    async def info(request: Request) -> Response:
        return _answer(svc, svc.info(), None)

    async def network(request: Request) -> Response:
        q = request.query_params
        try:
            parts = [float(x) for x in q.get("bbox", "").split(",")]
            zoom = int(q.get("zoom", "15"))
        except ValueError:
            return _error(svc, "bbox must be W,S,E,N in degrees and zoom a whole number", 400)
        if (
            len(parts) != 4
            or not all(map(math.isfinite, parts))
            or not 0 <= zoom <= 24
            or parts[0] >= parts[2]
            or parts[1] >= parts[3]
        ):
            return _error(svc, "bbox must be W,S,E,N in degrees (W < E, S < N), zoom 0-24", 400)
        bbox = (parts[0], parts[1], parts[2], parts[3])
        result = await anyio.to_thread.run_sync(svc.network, bbox, zoom, limiter=view_limiter)
        return _answer(svc, result, None)

    async def export(request: Request) -> Response:
        try:
            doc = await read_body(request, svc.max_upload)
            text, media = svc.export(doc)
        except RequestError as exc:
            return _error(svc, exc.message, exc.status)
        except RouteriskError as exc:
            return _error(svc, exc.one_line(), 400)
        return Response(text, media_type=media)

    async def not_found(request: Request, exc: Exception) -> Response:
        status = getattr(exc, "status_code", 404)
        return _error(svc, f"{request.url.path}: no such page or endpoint", status)

    async def crashed(request: Request, exc: Exception) -> Response:
        import logging

        logging.getLogger(__name__).exception("request %s failed", request.url.path)
        return _error(svc, f"internal error ({type(exc).__name__}); see the server log", 500)

    api = [
        Route("/api/info", info),
        Route("/api/network", network),
        Route("/api/export", export, methods=["POST"]),
    ] + [
        Route(f"/api/{name}", _post(svc, getattr(svc, name), limiter), methods=["POST"])
        for name in ("score", "week", "alternatives", "review", "plan")
    ]
    middleware = []
    if loopback:
        middleware.append(Middleware(TrustedHostMiddleware, allowed_hosts=list(LOOPBACK_HOSTS)))
    if token:
        middleware.append(Middleware(_TokenCheck, token=token))
    app = Starlette(
        routes=[
            Route("/", index),
            *api,
            Mount("/static/serve", StaticFiles(directory=str(static / "serve"))),
            Mount("/static/leaflet", StaticFiles(directory=str(static / "leaflet"))),
        ],
        middleware=middleware,
        exception_handlers={404: not_found, 405: not_found, Exception: crashed},
    )
    app.state.service = svc
    return app


class _TokenCheck:
    """ASGI middleware: refuse (403, JSON) every request without the token."""

    def __init__(self, app: Any, token: str) -> None:
        self.app = app
        self.token = token

    async def __call__(self, scope: Any, receive: Any, send: Any) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        request = Request(scope)
        given = (
            request.headers.get(TOKEN_HEADER)
            or request.query_params.get("token")
            or request.cookies.get(TOKEN_COOKIE)
            or ""
        )
        if not secrets.compare_digest(given.encode(), self.token.encode()):
            body = dumps_json(
                {
                    "error": "this server needs its token (header "
                    "X-Routerisk-Token, or open the page with ?token=)",
                    "status": 403,
                    "caution": CAUTION,
                }
            )
            await Response(body, status_code=403, media_type="application/json")(
                scope, receive, send
            )
            return
        await self.app(scope, receive, send)
