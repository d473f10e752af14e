"""The FastAPI application: ``create_app(settings)``.

The lifespan opens the store, loads the model once, and finishes any comparison a crash left pending.
Two pure-ASGI guards run before any route: a request body larger than ``max_upload_bytes`` is refused
with 413, and when ``max_inflight`` requests are already working a new write gets 503 with
``Retry-After`` instead of queueing without bound. Errors are ``{error, detail, field}``; no stack trace
ever reaches a client.
"""

from __future__ import annotations

import contextlib
import json
import logging
import os
from collections.abc import AsyncIterator
from pathlib import Path
from typing import Any

import anyio
from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import FileResponse, JSONResponse
from fastapi.staticfiles import StaticFiles
from starlette.exceptions import HTTPException as StarletteHTTPException

from .. import __version__
from .._validation import ShotcheckError
from ..store import Store
from .deps import BodyTooLarge
from .engine import Engine, InputError
from .settings import ENV_SETTINGS, Settings

__all__ = ["create_app", "app_from_environment", "STATIC_DIR"]

log = logging.getLogger("shotcheck.service")

#: Folder of the web page's files.
STATIC_DIR = Path(__file__).parent / "static"

_CODES = {400: "bad_request", 401: "unauthorized", 403: "forbidden", 404: "not_found", 405: "method_not_allowed",
          406: "not_acceptable", 409: "conflict", 413: "too_large", 415: "unsupported_media_type",
          422: "invalid_input", 429: "too_many_requests", 503: "busy"}


def _error(status: int, code: str, detail: str, field: str | None = None,
           headers: dict[str, str] | None = None) -> JSONResponse:
    return JSONResponse({"error": code, "detail": detail, "field": field}, status_code=status, headers=headers)


class GuardMiddleware:
    """Upload size limit and admission control, in front of everything else.

    Parameters
    ----------
    app : ASGI app
    max_upload_bytes : int
        Largest body [bytes].
    max_inflight : int
        Writes working at once; more get 503 + Retry-After.
    retry_after_s : int
        Seconds the client should wait.
    """

    def __init__(self, app: Any, *, max_upload_bytes: int, max_inflight: int, retry_after_s: int):
        self.app = app
        self.max_upload_bytes = max_upload_bytes
        self.max_inflight = max_inflight
        self.retry_after_s = retry_after_s
        self.inflight = 0

    async def __call__(self, scope: Any, receive: Any, send: Any) -> None:
        if scope["type"] != "http" or scope["method"] in ("GET", "HEAD", "OPTIONS"):
            await self.app(scope, receive, send)
            return
        headers = {k.decode("latin-1").lower(): v.decode("latin-1") for k, v in scope.get("headers", [])}
        length = headers.get("content-length")
        if length is not None:
            try:
                n = int(length)
            except ValueError:
                await _error(400, "bad_request", "Content-Length is not a number", "Content-Length")(scope, receive, send)
                return
            if n > self.max_upload_bytes:
                await self._too_large(scope, receive, send)
                return
        if self.inflight >= self.max_inflight:
            await _error(503, "busy", f"the service is working on {self.inflight} requests; retry after "
                         f"{self.retry_after_s} s", None, {"Retry-After": str(self.retry_after_s)})(scope, receive, send)
            return
        self.inflight += 1
        seen = 0
        started = False

        async def counted_receive() -> Any:
            nonlocal seen
            msg = await receive()
            if msg["type"] == "http.request":
                seen += len(msg.get("body", b""))
                if seen > self.max_upload_bytes:
                    raise BodyTooLarge()
            return msg

        async def tracked_send(msg: Any) -> None:
            nonlocal started
            if msg["type"] == "http.response.start":
                started = True
            await send(msg)

        try:
            await self.app(scope, counted_receive, tracked_send)
        except BodyTooLarge:
            if not started:
                await self._too_large(scope, receive, send)
        finally:
            self.inflight -= 1

    async def _too_large(self, scope: Any, receive: Any, send: Any) -> None:
        resp = _error(413, "too_large", f"request body larger than the limit of {self.max_upload_bytes} bytes",
                      "body", {"Connection": "close"})
        await resp(scope, receive, send)


def _load_model(settings: Settings) -> Any:
    from ..compare import default_model

    return default_model(settings.model_path)


def create_app(settings: Settings) -> FastAPI:
    """Build the service.

    Parameters
    ----------
    settings : Settings
        Data folder, token, model, limits.

    Returns
    -------
    fastapi.FastAPI
        Serve it with uvicorn, or test it with ``fastapi.testclient.TestClient`` (inside ``with`` so
        the lifespan runs).
    """
    from .routes import compare as compare_routes
    from .routes import health as health_routes
    from .routes import sequences as sequence_routes

    @contextlib.asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        store = Store(settings.data_dir)
        model = _load_model(settings)
        engine = Engine(store, model, settings.model_path or _default_model_path())
        recovered = await anyio.to_thread.run_sync(engine.recover)
        if recovered:
            log.warning("finished %d comparison(s) left pending by an earlier stop", recovered)
        store.audit("service.started", None, {"version": __version__, "recovered": recovered, "pid": os.getpid()})
        app.state.engine = engine
        app.state.limiter = anyio.CapacityLimiter(settings.compute_threads)
        try:
            yield
        finally:
            store.close()

    app = FastAPI(
        title="shotcheck service",
        version=__version__,
        description="Compares reduced- and full-level lightning-impulse records of power transformers. "
        "Advisory only: the responsible engineer decides whether a unit passed.",
        lifespan=lifespan,
        responses={422: {"model": _error_model()}},
        # FastAPI's /docs and /redoc load their scripts from a CDN; laboratory networks are often offline,
        # so /docs is our own page (static/api.html) that reads /openapi.json from this service only
        docs_url=None,
        redoc_url=None,
    )
    app.state.settings = settings
    app.add_middleware(GuardMiddleware, max_upload_bytes=settings.max_upload_bytes,
                       max_inflight=settings.max_inflight, retry_after_s=settings.retry_after_s)

    @app.exception_handler(InputError)
    async def _input_error(request: Request, exc: InputError) -> JSONResponse:
        headers = {"WWW-Authenticate": "Bearer"} if exc.status == 401 else None
        return _error(exc.status, exc.code, str(exc), exc.field, headers)

    @app.exception_handler(ShotcheckError)
    async def _shotcheck_error(request: Request, exc: ShotcheckError) -> JSONResponse:
        return _error(422, "invalid_input", str(exc), getattr(exc, "field", None))

    @app.exception_handler(RequestValidationError)
    async def _validation_error(request: Request, exc: RequestValidationError) -> JSONResponse:
        errs = exc.errors()
        first = errs[0] if errs else {}
        ctype = request.headers.get("content-type", "").split(";")[0].strip().lower()
        if any(tuple(e.get("loc", ()))[:1] == ("body",) for e in errs) and ctype != "application/json":
            # only JSON bodies are validated here (multipart uploads are read by the routes themselves)
            return _error(415, "unsupported_media_type",
                          f"expected a JSON body (content-type application/json), got {ctype or 'no content type'}",
                          "content-type")
        if first.get("type") == "json_invalid":  # its location is a character offset, not a field
            pos = next((p for p in first.get("loc", ()) if isinstance(p, int)), None)
            return _error(422, "invalid_input", "the body is not valid JSON"
                          + (f" (at character {pos})" if pos is not None else "") + f": {first.get('msg')}", "body")
        loc = ".".join(str(p) for p in first.get("loc", ()) if p != "body")
        detail = "; ".join(f"{'.'.join(str(p) for p in e.get('loc', ()))}: {e.get('msg')}" for e in errs[:5])
        return _error(422, "invalid_input", detail or "invalid request", loc or None)

    @app.exception_handler(StarletteHTTPException)
    async def _http_error(request: Request, exc: StarletteHTTPException) -> JSONResponse:
        return _error(exc.status_code, _CODES.get(exc.status_code, "error"), str(exc.detail), None,
                      getattr(exc, "headers", None))

    @app.exception_handler(Exception)
    async def _unexpected(request: Request, exc: Exception) -> JSONResponse:
        log.exception("unexpected error on %s %s", request.method, request.url.path)
        return _error(500, "internal_error", "the service failed on this request; it has been logged", None)

    app.include_router(health_routes.router)
    app.include_router(compare_routes.router)
    app.include_router(sequence_routes.router)
    default_openapi = app.openapi

    def openapi_with_models() -> dict[str, Any]:
        """The API description, with the models of hand-written request bodies (a route's openapi_extra
        carries them under its schema's ``$defs``, its references pointing to the components) moved to
        the components, so that every reference resolves."""
        if app.openapi_schema is not None:
            return app.openapi_schema
        doc = default_openapi()
        comps = doc.setdefault("components", {}).setdefault("schemas", {})
        for item in doc.get("paths", {}).values():
            for op in item.values():
                if not isinstance(op, dict):
                    continue
                for media in (op.get("requestBody") or {}).get("content", {}).values():
                    for name, model in (media.get("schema") or {}).pop("$defs", {}).items():
                        comps.setdefault(name, model)
        app.openapi_schema = doc
        return doc

    app.openapi = openapi_with_models  # type: ignore[method-assign]

    if STATIC_DIR.is_dir():
        app.mount("/static", StaticFiles(directory=STATIC_DIR), name="static")

        @app.get("/", include_in_schema=False)
        async def index() -> FileResponse:
            return FileResponse(STATIC_DIR / "index.html", media_type="text/html")

        @app.get("/docs", include_in_schema=False)
        async def api_page() -> FileResponse:
            return FileResponse(STATIC_DIR / "api.html", media_type="text/html")

    return app


def _error_model() -> Any:
    from .schemas import ErrorOut

    return ErrorOut


def _default_model_path() -> Path:
    from ..compare import DEFAULT_MODEL_PATH

    return DEFAULT_MODEL_PATH


def app_from_environment() -> FastAPI:
    """App factory for ``uvicorn --factory`` worker processes: settings from ``SHOTCHECK_SERVICE_SETTINGS``."""
    text = os.environ.get(ENV_SETTINGS)
    if not text:
        raise ShotcheckError(f"{ENV_SETTINGS} is not set; start the service with 'shotcheck serve'")
    return create_app(Settings.from_json(text))


def openapi_document(settings: Settings) -> str:
    """The OpenAPI document as JSON text (without starting the service)."""
    return json.dumps(create_app(settings).openapi(), indent=1)
