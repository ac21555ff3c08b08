"""Errors answered as HTML for the pages, JSON for /api/: one install call for create_app().

`install_web_error_handling(app)` wraps whatever handler the app already has for
`ServiceError` (main.py's JSON one) so /api/ paths keep their JSON, while page paths get
the error page (or, for htmx, the error fragment swapped into the request's target) with
the real status. A 401 on a page sends the browser to the sign-in page with `next` set.
"""

from __future__ import annotations

import inspect
from collections.abc import Awaitable, Callable, Sequence
from typing import Any
from urllib.parse import quote, urlsplit

from fastapi import FastAPI, Request
from fastapi.exception_handlers import http_exception_handler
from fastapi.exceptions import RequestValidationError
from fastapi.responses import Response
from starlette.exceptions import HTTPException as StarletteHTTPException

from service.errors import (
    FieldProblem,
    InvalidInput,
    NotAuthenticated,
    ServiceError,
    problems_from_validation,
)
from service.lab_tests.reduction import accepted_of, label
from service.web.htmx import htmx_details, redirect, render, safe_next

API_PREFIX = "/api/"
Handler = Callable[[Request, Any], Response | Awaitable[Response]]

TITLES = {
    400: "That request could not be handled",
    401: "Please sign in",
    403: "Not allowed",
    404: "Not found",
    405: "Not allowed here",
    409: "Changed or in the wrong state",
    413: "Too large",
    422: "Some entries need attention",
    429: "Too many attempts",
    503: "Briefly unavailable",
}


def is_api_path(request: Request) -> bool:
    return request.url.path.startswith(API_PREFIX)


def sign_in_url(request: Request) -> str:
    """/sign-in?next=... pointing back at the page the user was trying to see."""
    details = htmx_details(request)
    if details.is_htmx and details.current_url:
        parts = urlsplit(details.current_url)
        back = parts.path + (f"?{parts.query}" if parts.query else "")
    elif request.method == "GET":
        back = request.url.path + (f"?{request.url.query}" if request.url.query else "")
    else:
        referer = urlsplit(request.headers.get("referer", ""))
        back = referer.path if referer.netloc in ("", request.url.netloc) else "/"
    back = safe_next(back)
    if back == "/":
        return "/sign-in"
    return f"/sign-in?next={quote(back, safe='/')}"


def error_response(
    request: Request,
    status_code: int,
    message: str,
    *,
    problems: list[dict[str, Any]] | None = None,
    context: Any = None,
) -> Response:
    """The error page, or the error fragment for htmx, with the real status code."""
    return render(
        request,
        "errors/error.html",
        {
            "status_code": status_code,
            "title": TITLES.get(status_code, "Something went wrong"),
            "message": message,
            "problems": problems or [],
            "error_context": context,
        },
        fragment="errors/_error.html",
        status_code=status_code,
    )


def _listed(problems: Sequence[FieldProblem]) -> list[dict[str, str]]:
    """Refused fields as the error page lists them: the field in words, then why."""
    return [{"field": p.name, "msg": p.reason} for p in problems]


def page_service_error(request: Request, exc: ServiceError) -> Response:
    if isinstance(exc, NotAuthenticated):
        response = redirect(request, sign_in_url(request))
        if htmx_details(request).is_htmx:
            response.status_code = 401
        return response
    problems = _listed(exc.problems) if isinstance(exc, InvalidInput) else []
    context = None if problems else (exc.detail or None)
    return error_response(request, exc.status_code, exc.message, problems=problems, context=context)


def _previous(app: FastAPI, exc_type: type[Exception]) -> Handler:
    handler = app.exception_handlers.get(exc_type)
    if handler is None:
        raise LookupError(f"install the JSON API's handler for {exc_type.__name__} first")
    return handler


async def _call(handler: Handler, request: Request, exc: Exception) -> Response:
    answer = handler(request, exc)
    return await answer if inspect.isawaitable(answer) else answer


def install_web_error_handling(app: FastAPI) -> None:
    """Answer page paths with HTML errors; keep the JSON API's answers for /api/.

    Call after the JSON API's handlers are added (it wraps them). Safe to call twice.
    """
    if getattr(app.state, "web_errors_installed", False):
        return
    app.state.web_errors_installed = True
    json_service_error = _previous(app, ServiceError)
    json_http_error = _previous(app, StarletteHTTPException)
    json_validation_error = _previous(app, RequestValidationError)

    async def service_error(request: Request, exc: Exception) -> Response:
        assert isinstance(exc, ServiceError)
        if is_api_path(request):
            return await _call(json_service_error, request, exc)
        return page_service_error(request, exc)

    async def http_error(request: Request, exc: Exception) -> Response:
        assert isinstance(exc, StarletteHTTPException)
        if is_api_path(request):
            return await _call(json_http_error, request, exc)
        if exc.status_code < 400:
            return await http_exception_handler(request, exc)
        message = str(exc.detail) or "The request was refused."
        if exc.status_code == 404:
            message = f"There is no page at {request.url.path}."
        return error_response(request, exc.status_code, message)

    async def validation_error(request: Request, exc: Exception) -> Response:
        assert isinstance(exc, RequestValidationError)
        if is_api_path(request):
            return await _call(json_validation_error, request, exc)
        problems = _listed(problems_from_validation(exc.errors(), label, accepted_of))
        return error_response(
            request, 422, "Some entries were missing or not accepted.", problems=problems
        )

    app.add_exception_handler(ServiceError, service_error)
    app.add_exception_handler(StarletteHTTPException, http_error)
    app.add_exception_handler(RequestValidationError, validation_error)
