"""The test page offline: the service worker's route and the page side of kept entries.

The browser keeps each entry of an opted-in form (`data-outbox` on the `<form>`, see
docs/offline.md) in IndexedDB with its idempotency key and the test version it was typed
against, and posts it when the connection returns. The service worker that keeps the page
shell and static files must be served from the origin root so that its scope covers the
pages; its file lives with the other scripts in static/."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Annotated

from fastapi import APIRouter, Depends
from fastapi.responses import FileResponse

from service.db import PROJECT_ROOT
from service.web.htmx import PostedForm

router = APIRouter(include_in_schema=False)

SERVICE_WORKER = PROJECT_ROOT / "static" / "sw.js"
KEY_FIELD = "idempotency_key"
BASED_ON_FIELD = "based_on_version"


@router.get("/sw.js")
def service_worker() -> FileResponse:
    """The service worker script, from the root so its scope is the whole site. `no-cache`:
    the browser checks for a new one on every page load (a stale worker would keep an old
    page shell)."""
    return FileResponse(
        SERVICE_WORKER,
        media_type="text/javascript",
        headers={"Cache-Control": "no-cache", "Service-Worker-Allowed": "/"},
    )


@dataclass(frozen=True)
class KeptEntry:
    """What a kept entry carries besides its fields: its idempotency key (a retry stores
    nothing twice) and the test version it was typed against (None: not checked)."""

    key: str | None
    based_on_version: int | None


def kept_entry(form: PostedForm) -> KeptEntry:
    key = str(form.get(KEY_FIELD, "")).strip() or None
    try:
        based_on: int | None = int(str(form.get(BASED_ON_FIELD, "")))
    except ValueError:
        based_on = None
    return KeptEntry(key=key, based_on_version=based_on)


KeptEntryDep = Annotated[KeptEntry, Depends(kept_entry)]
