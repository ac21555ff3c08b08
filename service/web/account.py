"""Account settings for everyone signed in: display units, password change, and the user's
own sessions and API tokens (list and revoke)."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Form, Request
from fastapi.responses import Response
from sqlmodel import Session

from service.accounts import service as accounts
from service.accounts import signin
from service.accounts.models import AccessToken, User
from service.common import DisplayUnits
from service.deps import Authentication, SessionDep
from service.errors import (
    Conflict,
    InvalidInput,
    NotAuthenticated,
    NotFound,
    PermissionDenied,
    StaleVersion,
    TooManyAttempts,
)
from service.web.htmx import htmx_details, redirect, render
from service.web.pages import layout_context
from service.web.refusals import form_errors, simple_name

router = APIRouter(prefix="/account", include_in_schema=False)

UNIT_CHOICES = (
    (DisplayUnits.SI.value, "SI (m, m/s, kg/m³, kPa)"),
    (DisplayUnits.US.value, "US customary (ft, ft/day, lb/ft³, psi)"),
)
SAVED = {
    "units": "Display units saved. Figures on every page now show in these units.",
    "password": "Password changed. Your other sessions and API tokens were signed out.",
    "token": "Token revoked: it no longer signs anyone in.",
}
PASSWORD_FIELDS = ("current_password", "new_password", "repeat_password")


def _signed_in(auth: Authentication) -> tuple[User, AccessToken]:
    if auth is None:
        raise NotAuthenticated("sign in first")
    return auth


SignedIn = Annotated[tuple[User, AccessToken], Depends(_signed_in)]


def _error(msg: str, kind: str = "value_error") -> dict[str, str]:
    return {"msg": msg, "kind": kind}


def field_errors(exc: InvalidInput) -> dict[str, dict[str, str]]:
    """{field name: error} of a refused form."""
    errors, _ = form_errors(exc.problems, simple_name(PASSWORD_FIELDS))
    return errors


def _context(
    request: Request, session: Session, user: User, current: AccessToken, **extra: Any
) -> dict[str, Any]:
    saved = request.query_params.get("saved", "")
    context: dict[str, Any] = {
        "unit_choices": UNIT_CHOICES,
        "units_value": user.display_units,
        "units_version": user.version,
        "units_error": None,
        "units_message": SAVED["units"] if saved == "units" else "",
        "password_errors": {},
        "password_message": SAVED["password"] if saved == "password" else "",
        "password_alert": "",
        "tokens": accounts.live_tokens(session, user),
        "current_token_id": current.id,
        "tokens_message": SAVED["token"] if saved == "token" else "",
        "tokens_alert": "",
        "tokens_oob": False,
    }
    context.update(extra)
    return layout_context(request, user, **context)


@router.get("")
def settings_page(request: Request, auth: SignedIn, session: SessionDep) -> Response:
    user, current = auth
    return render(request, "account/settings.html", _context(request, session, user, current))


# ---------- display units ----------


def _units_refusal(
    session: Session, user: User, units: str, version: str
) -> tuple[dict[str, str] | None, int]:
    """Save the units, or say why not: (the message beside the choice, the status)."""
    accepted = ", ".join(f"{value} ({label.split(' (')[0]})" for value, label in UNIT_CHOICES)
    if units not in {u.value for u in DisplayUnits}:
        return _error(f"units: {units!r} is not offered; accepted: {accepted}"), 422
    if not version.isdigit():
        return _error(f"version: {version!r} is not a version number; reload the page"), 422
    try:
        changes = {"display_units": units}
        accounts.update_user(session, user, actor=user, version=int(version), changes=changes)
    except StaleVersion as exc:
        return _error(
            f"Your account changed elsewhere (this page had version {version}, it is now at "
            f"version {exc.current.get('version', user.version)}, with units "
            f"{user.display_units!r}). Choose again and save."
        ), 409
    return None, 200


@router.post("/units")
def save_units(
    request: Request,
    auth: SignedIn,
    session: SessionDep,
    units: Annotated[str, Form(max_length=20)] = "",
    version: Annotated[str, Form(max_length=20)] = "",
) -> Response:
    """Save the user's display units (versioned: a change made elsewhere answers 409)."""
    user, current = auth
    problem, status = _units_refusal(session, user, units, version)
    if status == 200 and not htmx_details(request).wants_fragment:
        return redirect(request, "/account?saved=units")
    context = _context(
        request,
        session,
        user,
        current,
        units_value=units if problem else user.display_units,
        units_version=user.version,
        units_error=problem,
        units_message=SAVED["units"] if status == 200 else "",
    )
    return render(
        request,
        "account/settings.html",
        context,
        fragment="account/_units.html",
        status_code=status,
    )


# ---------- password ----------


def _password_refusal(
    session: Session, user: User, current: AccessToken, typed: dict[str, str]
) -> tuple[dict[str, dict[str, str]], str, int]:
    """Change the password, or say why not: (messages beside fields, alert, status)."""
    errors = {name: _error("needed", "missing") for name in PASSWORD_FIELDS if not typed[name]}
    if not errors and typed["new_password"] != typed["repeat_password"]:
        errors["repeat_password"] = _error("does not match the new password typed above")
    if errors:
        return errors, "", 422
    try:
        signin.change_password(
            session,
            user,
            current_password=typed["current_password"],
            new_password=typed["new_password"],
            keep=current,
        )
    except PermissionDenied:
        return {"current_password": _error("this is not your current password")}, "", 403
    except TooManyAttempts as exc:
        return {}, exc.message[:1].upper() + exc.message[1:] + ".", 429
    except InvalidInput as exc:
        return field_errors(exc) or {"new_password": _error(exc.message)}, "", 422
    return {}, "", 200


@router.post("/password")
def change_password(
    request: Request,
    auth: SignedIn,
    session: SessionDep,
    current_password: Annotated[str, Form(max_length=2048)] = "",
    new_password: Annotated[str, Form(max_length=2048)] = "",
    repeat_password: Annotated[str, Form(max_length=2048)] = "",
) -> Response:
    """Change the password (current + new, the new one typed twice). Passwords are never
    written back into the page: a refused form returns with its fields empty and the
    message beside the field it concerns."""
    user, current = auth
    typed = {
        "current_password": current_password,
        "new_password": new_password,
        "repeat_password": repeat_password,
    }
    errors, alert, status = _password_refusal(session, user, current, typed)
    if status == 200 and not htmx_details(request).wants_fragment:
        return redirect(request, "/account?saved=password")
    context = _context(
        request,
        session,
        user,
        current,
        password_errors=errors,
        password_alert=alert,
        password_message=SAVED["password"] if status == 200 else "",
        tokens_oob=status == 200,
    )
    return render(
        request,
        "account/settings.html",
        context,
        fragment="account/_password.html",
        status_code=status,
    )


# ---------- sessions and API tokens ----------


@router.post("/tokens/{token_id}/revoke")
def revoke_token(token_id: int, request: Request, auth: SignedIn, session: SessionDep) -> Response:
    """Revoke one of the user's own sessions or API tokens (not the one in use: sign out)."""
    user, current = auth
    token = accounts.get_token(session, token_id, actor=user)
    if token.user_id != user.id:
        # Admins may revoke anyone's token through the API; this page is for one's own.
        raise NotFound(f"token {token_id} not found")
    status, alert = 200, ""
    if token.id == current.id:
        exc = Conflict("this is the session you are using now: use Sign out to end it")
        status, alert = exc.status_code, exc.message[:1].upper() + exc.message[1:] + "."
    else:
        accounts.revoke_token(session, token, actor=user)
    if status == 200 and not htmx_details(request).wants_fragment:
        return redirect(request, "/account?saved=token")
    context = _context(
        request,
        session,
        user,
        current,
        tokens_message=SAVED["token"] if status == 200 else "",
        tokens_alert=alert,
    )
    return render(
        request,
        "account/settings.html",
        context,
        fragment="account/_tokens.html",
        status_code=status,
    )
