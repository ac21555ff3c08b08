"""GET /openapi.json: the API's OpenAPI document, for signed-in users only (it maps every
route an attacker could try; a lab's integrators sign in and load it into any OpenAPI tool)."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, FastAPI, Request

from service.deps import CurrentUser

router = APIRouter(include_in_schema=False)


@router.get("/openapi.json")
def openapi_document(request: Request, _user: CurrentUser) -> dict[str, Any]:
    """The OpenAPI 3 description of /api/v1 (sign in first)."""
    app: FastAPI = request.app
    return app.openapi()
