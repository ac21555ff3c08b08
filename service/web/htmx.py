"""The htmx protocol in one place: request details, fragment-or-page rendering, redirects.

Chosen htmx 4 behaviour (STACK.md): htmx 4 swaps 4xx and 5xx responses like any other
(only 204 and 304 are not swapped). We keep that default on purpose. Every fragment a route
may answer with an error status (a 422 form fragment, a 409 conflict, a 404) is written to be
swapped into the same target as the success fragment, so the message appears where the user
was looking and everything they typed stays in the page. Redirects go through `redirect()`,
which answers htmx with `HX-Redirect` (htmx then loads the page itself) and anything else
with 303 See Other.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Annotated, Any

from fastapi import Depends, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response
from fastapi.templating import Jinja2Templates
from sqlalchemy.exc import SQLAlchemyError
from starlette.datastructures import FormData

from service import __version__
from service.db import PROJECT_ROOT, session_scope
from service.laboratory.service import accreditation_text, lab_settings
from service.web.display import install as install_display_filters
from service.web.entries import NUMBER_PATTERN, entry_label
from service.web.rules_words import install as install_rules_words


async def posted_form(request: Request) -> FormData:
    """Read the posted form on the event loop, before the route runs.

    A page route that takes ``PostedForm`` can then be a plain ``def``: FastAPI runs it in the
    thread pool, so its database work never blocks the event loop. (An ``async def`` route
    that waited on a row lock held by another request froze the whole server on PostgreSQL.)
    """
    return await request.form()


PostedForm = Annotated[FormData, Depends(posted_form)]

HTMX_VERSION = "4.0.1"
HTMX_SCRIPT = f"/static/vendor/htmx-{HTMX_VERSION}.min.js"


@dataclass(frozen=True, slots=True)
class HtmxDetails:
    """What htmx told us about a request (all false/None for an ordinary browser request)."""

    is_htmx: bool
    boosted: bool
    target: str | None
    source: str | None
    current_url: str | None
    history_restore: bool

    @property
    def wants_fragment(self) -> bool:
        """A fragment answers a targeted htmx request; boosts and history restores need pages."""
        return self.is_htmx and not self.boosted and not self.history_restore


def htmx_details(request: Request) -> HtmxDetails:
    headers = request.headers
    return HtmxDetails(
        is_htmx=headers.get("HX-Request") == "true",
        boosted=headers.get("HX-Boosted") == "true",
        target=headers.get("HX-Target") or None,
        source=headers.get("HX-Source") or None,
        current_url=headers.get("HX-Current-URL") or None,
        history_restore=headers.get("HX-History-Restore-Request") == "true",
    )


HtmxDep = Annotated[HtmxDetails, Depends(htmx_details)]


def lab_identity() -> dict[str, str]:
    """The laboratory's name and accreditation for the page footer, read in a session of
    its own (pages render with whatever context they built; the footer is on all of them)."""
    try:
        with session_scope() as session:
            settings = lab_settings(session)
            return {"name": settings.name, "accreditation": accreditation_text(settings)}
    except SQLAlchemyError:  # the database is away: the page (often the 503 page) goes on
        return {"name": "", "accreditation": ""}


def _make_templates() -> Jinja2Templates:
    templates = Jinja2Templates(directory=PROJECT_ROOT / "templates")
    env = templates.env
    install_display_filters(env.filters)
    install_rules_words(env.filters)
    env.globals["htmx_script"] = HTMX_SCRIPT
    env.globals["app_version"] = __version__
    env.globals["lab_identity"] = lab_identity
    env.globals["number_pattern"] = NUMBER_PATTERN
    env.globals["entry_label"] = entry_label
    env.trim_blocks = True
    env.lstrip_blocks = True
    return templates


templates = _make_templates()


def _vary_on_htmx(response: Response) -> None:
    existing = response.headers.get("Vary")
    if existing is None:
        response.headers["Vary"] = "HX-Request"
    elif "hx-request" not in existing.lower():
        response.headers["Vary"] = f"{existing}, HX-Request"


def render(
    request: Request,
    template: str,
    context: Mapping[str, Any] | None = None,
    *,
    fragment: str | None = None,
    status_code: int = 200,
    headers: Mapping[str, str] | None = None,
) -> HTMLResponse:
    """Render `fragment` for a targeted htmx request, else the full page `template`.

    The page template includes its fragments, so both answers carry the same markup.
    `Vary: HX-Request` is always set: caches must not serve a fragment for a page load.
    """
    details = htmx_details(request)
    name = fragment if fragment is not None and details.wants_fragment else template
    full_context: dict[str, Any] = {
        "csrf_token": getattr(request.state, "csrf_token", None),
        "htmx": details,
        **(context or {}),
    }
    response = templates.TemplateResponse(
        request, name, full_context, status_code=status_code, headers=dict(headers or {})
    )
    _vary_on_htmx(response)
    return response


def redirect(request: Request, url: str, *, status_code: int = 303) -> Response:
    """Send the browser to `url`: `HX-Redirect` for htmx (a full load), else 303 See Other."""
    if htmx_details(request).is_htmx:
        response = Response(status_code=200, headers={"HX-Redirect": url})
    else:
        response = RedirectResponse(url, status_code=status_code)
    _vary_on_htmx(response)
    return response


def safe_next(target: str | None, default: str = "/") -> str:
    """`target` if it is a path on this site, else `default` (no open redirects)."""
    if not target or not target.startswith("/") or target.startswith("//"):
        return default
    if "\\" in target or any(ord(ch) < 32 for ch in target):
        return default
    return target
