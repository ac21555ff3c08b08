"""Pages everyone uses: sign in, sign out, the home page that fits the role, sample search."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Form, Query, Request
from fastapi.responses import Response
from itsdangerous import BadSignature
from sqlmodel import Session

from service.accounts import signin
from service.accounts.models import AccessToken, User
from service.accounts.service import revoke_token
from service.accounts.tokens import find_live_token
from service.common import Role, TokenKind
from service.db import utcnow
from service.deps import (
    SESSION_COOKIE,
    Authentication,
    CurrentUser,
    OptionalUser,
    SessionDep,
    cookie_serializer,
    device_of,
    set_device_cookie,
    set_session_cookie,
)
from service.errors import NotAuthenticated, TooManyAttempts
from service.lab_tests import service as lab_tests
from service.projects.service import projects_with_sample_counts
from service.queue import due_dates
from service.samples.service import lookup_samples, search_samples
from service.web.htmx import redirect, render, safe_next

router = APIRouter(include_in_schema=False)

# Main navigation per role; pages added later append here.
NAV: dict[str, list[tuple[str, str]]] = {
    Role.RECEPTION: [("/", "Home"), ("/reception", "Receive"), ("/projects", "Projects")],
    Role.TECHNICIAN: [("/", "My tests"), ("/reception", "Receive"), ("/bench", "Bench")],
    Role.REVIEWER: [
        ("/", "Home"),
        ("/queue", "Queue"),
        ("/projects", "Projects"),
        ("/bench", "Bench"),
    ],
    Role.LAB_MANAGER: [
        ("/queue", "Queue"),
        ("/reception", "Receive"),
        ("/projects", "Projects"),
        ("/apparatus", "Apparatus"),
        ("/scope", "Scope"),
        ("/bench", "Bench"),
    ],
    Role.ADMIN: [
        ("/queue", "Queue"),
        ("/reception", "Receive"),
        ("/projects", "Projects"),
        ("/apparatus", "Apparatus"),
        ("/scope", "Scope"),
        ("/admin/users", "Users"),
        ("/admin/lab", "Lab"),
    ],
    Role.CLIENT: [("/", "My projects")],
}
# The longest menus leave "Home" to the brand mark (it links home), so they keep one row on a
# 1024 px tablet.

# Messages a redirect may ask the next page to show (a key, never free text from the URL).
FLASHES: dict[str, tuple[str, str]] = {
    "signed-out": ("ok", "You are signed out."),
    "signed-in": ("ok", "You are signed in."),
    "user-created": ("ok", "Account created. Pass the initial password on to the person."),
    "user-saved": ("ok", "Account saved."),
    "password-reset": ("ok", "Password reset. The person's sessions and API tokens were ended."),
    "tests-requested": ("ok", "Tests requested on the ticked samples."),
    "lab-saved": ("ok", "Laboratory settings saved. Certificates issued from now on show them."),
}

SEARCH_LIMIT = 50


def layout_context(request: Request, user: User | None, **extra: Any) -> dict[str, Any]:
    """What base.html needs: the user, their navigation, flash messages, the current path."""
    flash_key = request.query_params.get("flash", "")
    return {
        "user": user,
        "nav": [{"href": href, "label": label} for href, label in NAV.get(user.role, [])]
        if user
        else [],
        "current_path": request.url.path,
        "units": user.display_units if user else "si",
        "flashes": [FLASHES[flash_key]] if flash_key in FLASHES else [],
        **extra,
    }


# ---------- sign in and out ----------


def _browser_session(request: Request, session: Session) -> AccessToken | None:
    cookie = request.cookies.get(SESSION_COOKIE)
    if not cookie:
        return None
    try:
        raw = cookie_serializer().loads(cookie)
    except BadSignature:
        return None
    found = find_live_token(session, raw, kind=TokenKind.SESSION) if isinstance(raw, str) else None
    return found[0] if found else None


def _sign_in_page(
    request: Request, *, email: str = "", next_url: str = "/", error: str = "", status: int = 200
) -> Response:
    return render(
        request,
        "account/sign_in.html",
        layout_context(request, None, email=email, next_url=next_url, error=error),
        status_code=status,
    )


def _refusal(exc: NotAuthenticated | TooManyAttempts) -> str:
    if isinstance(exc, NotAuthenticated):
        return "That email address and password do not match an active account."
    return _wait_message(exc)


def _wait_message(exc: TooManyAttempts) -> str:
    wait = exc.detail.get("retry_after_seconds")
    if wait is None:
        return "Too many failed sign-ins. Wait a few minutes, then try again."
    return f"Too many failed sign-ins. Wait {wait} seconds, then try again."


@router.get("/sign-in")
def sign_in_form(
    request: Request, user: OptionalUser, next_url: Annotated[str, Query(alias="next")] = "/"
) -> Response:
    """The sign-in form (already signed in: straight on to where you were going)."""
    target = safe_next(next_url)
    if user is not None:
        return redirect(request, target)
    return _sign_in_page(request, next_url=target)


@router.post("/sign-in")
def sign_in(
    request: Request,
    email: Annotated[str, Form(max_length=254)] = "",
    password: Annotated[str, Form(max_length=1024)] = "",
    next_url: Annotated[str, Form(alias="next")] = "/",
) -> Response:
    """Check the password (with the limits of accounts.signin), then set the cookies."""
    target = safe_next(next_url)
    refusal = ("Enter both your email address and your password.", 422)
    if email.strip() and password:

        def start(session: Session, user: User) -> tuple[str, str]:
            raw, _token = signin.start_session(
                session, user, replacing=_browser_session(request, session)
            )
            return raw, signin.device_cookie(user)

        try:
            raw, device = signin.sign_in(
                email=email, password=password, device=device_of(request), then=start
            )
        except NotAuthenticated:
            refusal = ("That email address and password do not match an active account.", 401)
        except TooManyAttempts as exc:
            refusal = (_wait_message(exc), 429)
        else:
            response = redirect(request, target)
            set_session_cookie(response, request, raw)
            set_device_cookie(response, request, device)
            return response
    message, status = refusal
    return _sign_in_page(request, email=email, next_url=target, error=message, status=status)


@router.post("/sign-out")
def sign_out(request: Request, auth: Authentication, session: SessionDep) -> Response:
    """End this browser's session (a POST carrying the CSRF token, checked by `authenticate`)."""
    if auth is not None:
        user, token = auth
        revoke_token(session, token, actor=user)
    response = redirect(request, "/sign-in?flash=signed-out")
    response.delete_cookie(SESSION_COOKIE, httponly=True, samesite="lax")
    return response


# ---------- home ----------


@router.get("/")
def home(request: Request, user: OptionalUser, session: SessionDep) -> Response:
    """The home page that fits the role; anonymous visitors go to the sign-in page."""
    if user is None:
        return redirect(request, "/sign-in")
    context = layout_context(request, user)
    if user.role == Role.TECHNICIAN:
        my_tests = lab_tests.assigned_tests(session, user)
        context["my_tests"] = my_tests
        context["today"] = utcnow().date()
        context["due"] = due_dates(session, [t.id for t, _ in my_tests if t.id], context["today"])
    elif user.role == Role.CLIENT:
        context["projects"] = projects_with_sample_counts(session, user=user)
    else:
        context["counts"] = lab_tests.state_counts(session)
        if lab_tests.may_review(user):
            context["awaiting_review"] = lab_tests.awaiting_review(session, user)
    return render(request, "home/home.html", context)


# ---------- search ----------


@router.get("/search")
def search(
    request: Request,
    user: CurrentUser,
    session: SessionDep,
    q: Annotated[str, Query(max_length=100)] = "",
) -> Response:
    """Open the sample a typed or scanned ID names; else the samples whose lab ID, client
    sample ID, project number or certificate number contains the text (several are listed,
    none says so).

    A GET, not a POST: a search changes nothing and its URL can be bookmarked or shared.
    """
    text = q.strip()
    exact = lookup_samples(session, text, user=user, limit=2, offset=0)[0] if text else []
    if len(exact) == 1:
        return redirect(request, f"/samples/{exact[0].id}")
    samples = search_samples(session, text, user=user, limit=SEARCH_LIMIT) if text else []
    if len(samples) == 1:
        return redirect(request, f"/samples/{samples[0][0].id}")
    context = layout_context(request, user, search_query=text, samples=samples)
    return render(
        request,
        "search/results.html",
        context,
        fragment="search/_results.html",
        status_code=200 if samples or not text else 404,
    )
