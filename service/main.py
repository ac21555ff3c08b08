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
from uvicorn.middleware.proxy_headers import ProxyHeadersMiddleware

import service.api
import service.web
from service import __version__
from service.config import get_settings
from service.db import PROJECT_ROOT, current_revision, get_engine, head_revision, require_migrated
from service.errors import ServiceError
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
    app.add_exception_handler(ServiceError, _service_error)
    install_web_error_handling(app)  # pages get HTML errors; /api/ keeps the JSON above
    install_security(app)  # after: its validation handler wraps the one installed before
    proxies = get_settings().trusted_proxies
    if proxies:  # outermost: every part of the app sees the client's own address
        app.add_middleware(ProxyHeadersMiddleware, trusted_hosts=proxies)
    return app


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


async def _service_error(_request: Request, exc: Exception) -> JSONResponse:
    assert isinstance(exc, ServiceError)
    if isinstance(exc.detail, list) and exc.status_code == 422:
        return JSONResponse({"detail": exc.detail}, status_code=422)
    body: dict[str, Any] = {"error": exc.code, "detail": exc.message}
    if exc.detail is not None:
        body["context"] = exc.detail
    return JSONResponse(body, status_code=exc.status_code)
