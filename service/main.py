"""Application factory: lifespan, routers, exception handlers and static files."""

from __future__ import annotations

import importlib
import pkgutil
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from typing import Any

import sqlalchemy as sa
from fastapi import APIRouter, FastAPI, Request
from fastapi.responses import JSONResponse
from fastapi.staticfiles import StaticFiles
from starlette.types import ASGIApp, Receive, Scope, Send
from uvicorn.middleware.proxy_headers import ProxyHeadersMiddleware

import service.api
import service.web
from service import __version__
from service.api.problems import install_problem_details
from service.config import get_settings, served_base_url
from service.db import PROJECT_ROOT, current_revision, get_engine, head_revision, require_migrated
from service.security import install_security
from service.stored_text import install as check_stored_text
from service.web.errors import install_web_error_handling


@asynccontextmanager
async def lifespan(app: FastAPI) -> AsyncIterator[None]:
    app.state.migration_revision = require_migrated(get_engine())
    yield


def create_app() -> FastAPI:
    # No /docs or /redoc (they load their scripts from a CDN); the OpenAPI document is served
    # to signed-in users only (service/api/openapi.py).
    app = FastAPI(
        title="Seepline",
        version=__version__,
        summary="System of record for laboratory hydraulic conductivity testing of soils.",
        lifespan=lifespan,
        docs_url=None,
        redoc_url=None,
        openapi_url=None,
    )
    check_stored_text()  # no control character reaches the database, whatever the route
    app.mount("/static", StaticFiles(directory=PROJECT_ROOT / "static"), name="static")
    _add_routes(app)
    install_problem_details(app)  # every refusal as RFC 9457 problem details ...
    install_web_error_handling(app)  # ... except on pages, which get HTML errors
    install_security(app)  # after: its validation handler wraps the one installed before
    app.add_middleware(ServedAddress)  # inside the proxy headers: it sees the client's scheme
    proxies = get_settings().trusted_proxies
    if proxies:  # outermost: every part of the app sees the client's own address
        app.add_middleware(ProxyHeadersMiddleware, trusted_hosts=proxies)
    return app


class ServedAddress:
    """Remember the base URL each request was served at (scheme, host and root path as the
    client used them) for links printed in development, where PUBLIC_BASE_URL is unset."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        token = served_base_url.set(str(Request(scope).base_url))
        try:
            await self.app(scope, receive, send)
        finally:
            served_base_url.reset(token)


def _add_routes(app: FastAPI) -> None:
    # Each module of service/api and service/web that defines `router` is one resource or
    # page group; including them all here keeps the route table in the modules themselves.
    for package in (service.api, service.web):
        for module_info in sorted(pkgutil.iter_modules(package.__path__), key=lambda m: m.name):
            module = importlib.import_module(f"{package.__name__}.{module_info.name}")
            router = getattr(module, "router", None)
            if isinstance(router, APIRouter):
                app.include_router(router)

    @app.get("/healthz", tags=["operations"])
    def healthz() -> JSONResponse:
        """Database reachability and the migration revision it is at."""
        try:
            revision = current_revision(get_engine())
            with get_engine().connect() as connection:
                connection.execute(sa.text("SELECT 1"))
        except sa.exc.SQLAlchemyError as exc:
            body: dict[str, Any] = {"status": "unavailable", "database": "unreachable"}
            body["error"] = type(exc).__name__
            return JSONResponse(body, status_code=503)
        head = head_revision()
        ok = revision == head
        return JSONResponse(
            {
                "status": "ok" if ok else "migration_needed",
                "database": "reachable",
                "migration_revision": revision,
                "expected_revision": head,
                "version": __version__,
            },
            status_code=200 if ok else 503,
        )
