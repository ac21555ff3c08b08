"""Every error of the JSON API as RFC 9457 problem details (``application/problem+json``).

One shape for every status (400, 401, 403, 404, 405, 409, 413, 422, 429)::

    {"type": "/problems/stale-version", "title": "Changed since you read it",
     "status": 409, "detail": "the test changed since you read it: ...",
     "instance": "/api/v1/tests/7", "code": "stale_version",
     "yours": {...}, "current": {...}}

`detail` is always a sentence. The facts a client acts on are extension members beside it:
`state` and `allowed` (a wrong state), `yours` and `current` (a stale edit), `retry_after_seconds`,
`limit_bytes`, and for refused fields `errors`, one item per field::

    {"loc": ["body", "trials", 2, "head_final"], "field": "trials[2].head_final",
     "label": "Trial 3 · Head at end", "msg": "Trial 3 · Head at end: must be below the head
     at start (100 cm)", "value": "120 cm", "accepted": "...", "type": "impossible_test"}

`value` echoes what was sent, cut to 200 characters; passwords are never echoed. Domain
errors name fields without ``body``; it is added here.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from pydantic import BaseModel, Field
from starlette.exceptions import HTTPException as StarletteHTTPException

from service.errors import (
    PARAMETER_PLACES,
    FieldProblem,
    InvalidInput,
    ServiceError,
    capped,
    field_path,
    problems_from_validation,
)
from service.lab_tests.reduction import accepted_of, label

MEDIA_TYPE = "application/problem+json"
HIDDEN = "[hidden]"
# Locations that are not inside the JSON body: request parameters, and an uploaded file's
# own rows and columns ("file", "row", 7, "column", "depth_top").
ROOTS = PARAMETER_PLACES | {"file"}
HTTP_TITLES = {
    400: ("bad_request", "The request could not be handled"),
    401: ("not_authenticated", "Sign in first"),
    403: ("forbidden", "Not allowed"),
    404: ("not_found", "Not found"),
    405: ("method_not_allowed", "Method not allowed"),
    409: ("conflict", "Conflict with the stored record"),
    413: ("too_large", "Too large"),
    415: ("unsupported_media_type", "Unsupported media type"),
    422: ("invalid_input", "Some entries need attention"),
    429: ("too_many_attempts", "Too many attempts"),
}


def json_safe(value: Any) -> Any:
    """`value` with NaN and infinities as text and anything exotic as its str()."""
    if isinstance(value, float):
        return value if math.isfinite(value) else str(value)
    if value is None or isinstance(value, str | int | bool):
        return value
    if isinstance(value, Mapping):
        return {
            str(k): HIDDEN if "password" in str(k).lower() and v not in (None, "") else json_safe(v)
            for k, v in value.items()
        }
    if isinstance(value, list | tuple | set | frozenset):
        return [json_safe(v) for v in value]
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    return str(value)


def field_item(problem: FieldProblem) -> dict[str, Any]:
    """One refused field as an item of `errors` (``body`` put in front of a body field)."""
    loc = list(problem.loc)
    if not loc or loc[0] not in ROOTS:
        loc = ["body", *loc]
    secret = any("password" in str(part).lower() for part in loc)
    named = problem.label or label(problem.loc)
    return {
        "loc": loc,
        "field": field_path(loc[1:] if loc[0] == "body" else loc),
        "label": named,
        "msg": f"{named}: {problem.reason}",
        "value": HIDDEN
        if secret and problem.value not in (None, "")
        else json_safe(capped(problem.value)),
        "accepted": problem.accepted,
        "type": problem.kind,
    }


def problem_response(
    request: Request, exc: ServiceError, *, headers: Mapping[str, str] | None = None
) -> JSONResponse:
    """A refusal as problem details; its `detail` mapping gives the extension members."""
    status = exc.status_code
    body: dict[str, Any] = {
        "type": f"/problems/{exc.code.replace('_', '-')}",
        "title": exc.title,
        "status": status,
        "detail": capped(exc.message, 1000),
        "instance": request.url.path,
        "code": exc.code,
    }
    members = dict(exc.detail)
    if isinstance(exc, InvalidInput):
        members["errors"] = [field_item(p) for p in exc.problems]
    for name, value in members.items():
        if name not in body:
            body[name] = json_safe(value)
    return JSONResponse(
        body, status_code=status, media_type=MEDIA_TYPE, headers=dict(headers or {})
    )


def validation_response(request: Request, exc: RequestValidationError) -> JSONResponse:
    problems = problems_from_validation(exc.errors(), label, accepted_of)
    detail = problems[0].msg if len(problems) == 1 else f"{len(problems)} entries need attention"
    return problem_response(request, InvalidInput(detail, problems=problems))


def http_error_response(request: Request, exc: StarletteHTTPException) -> JSONResponse:
    code, title = HTTP_TITLES.get(exc.status_code, ("http_error", "The request was refused"))
    detail = str(exc.detail)
    if exc.status_code == 404 and detail == "Not Found":
        detail = f"there is nothing at {request.url.path}"
    refusal = ServiceError(detail)
    refusal.status_code, refusal.code, refusal.title = exc.status_code, code, title
    return problem_response(request, refusal, headers=exc.headers)


class FieldError(BaseModel):
    """One refused field of a 422."""

    loc: list[str | int] = Field(description="its path: body, query, path, header or file")
    field: str = Field(description="the same as text, e.g. trials[2].head_final")
    label: str = Field(description="the field in words with its position")
    msg: str = Field(description="label: why it is refused")
    value: Any = Field(None, description="what was sent, cut to 200 characters")
    accepted: str = Field("", description="what the field takes")
    type: str = Field(description="a category, e.g. missing, wrong_dimension, impossible_test")


class Problem(BaseModel):
    """RFC 9457 problem details, the answer to every refusal of the API."""

    type: str = Field(description="a URI reference naming the kind of problem")
    title: str
    status: int
    detail: str = Field(description="one sentence for people")
    instance: str = Field(description="the path that was refused")
    code: str = Field(description="the kind of problem, for programs")
    errors: list[FieldError] | None = Field(None, description="422: one item per field")


def _document(app: FastAPI) -> None:
    """Describe every 4xx answer of the OpenAPI document as problem details."""
    plain = app.openapi

    def openapi() -> dict[str, Any]:
        if app.openapi_schema is not None:
            return app.openapi_schema
        schema = plain()
        components = schema.setdefault("components", {}).setdefault("schemas", {})
        for model in (FieldError, Problem):
            components[model.__name__] = model.model_json_schema(
                ref_template="#/components/schemas/{model}"
            )
        components.pop("HTTPValidationError", None)
        components.pop("ValidationError", None)
        content = {MEDIA_TYPE: {"schema": {"$ref": "#/components/schemas/Problem"}}}
        for path in schema.get("paths", {}).values():
            for operation in path.values():
                for status, answer in operation.get("responses", {}).items():
                    if str(status).startswith("4"):
                        answer["content"] = content
                        answer.setdefault("description", "Problem details")
        app.openapi_schema = schema
        return schema

    app.openapi = openapi  # type: ignore[method-assign]


def install_problem_details(app: FastAPI) -> None:
    """Answer every refusal of the app as problem details (the pages wrap these handlers for
    their own paths; call this first), and document them so in the OpenAPI description."""
    _document(app)

    async def on_service_error(request: Request, exc: Exception) -> JSONResponse:
        assert isinstance(exc, ServiceError)
        return problem_response(request, exc)

    async def on_validation(request: Request, exc: Exception) -> JSONResponse:
        assert isinstance(exc, RequestValidationError)
        return validation_response(request, exc)

    async def on_http(request: Request, exc: Exception) -> JSONResponse:
        assert isinstance(exc, StarletteHTTPException)
        return http_error_response(request, exc)

    app.add_exception_handler(ServiceError, on_service_error)
    app.add_exception_handler(RequestValidationError, on_validation)
    app.add_exception_handler(StarletteHTTPException, on_http)
