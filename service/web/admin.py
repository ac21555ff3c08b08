"""The admin's pages: users (list, create, change role or name, deactivate, reset a password)
and the laboratory's identity. The rules are those of accounts.service and
laboratory.service; these pages only read forms and show refusals beside the fields."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import Response
from sqlmodel import Session

from service.accounts import service as accounts
from service.accounts.models import User
from service.common import DisplayUnits, Role
from service.deps import Admin, SessionDep
from service.laboratory.service import FIELDS as LAB_FIELDS
from service.laboratory.service import lab_settings, save_lab_settings
from service.web.htmx import PostedForm, redirect, render
from service.web.pages import layout_context
from service.web.refusals import Attempt, attempt, simple_name

router = APIRouter(prefix="/admin", include_in_schema=False)

ROLE_WORDS = {
    Role.RECEPTION.value: "Reception (receives samples, prints labels)",
    Role.TECHNICIAN.value: "Technician",
    Role.REVIEWER.value: "Reviewer",
    Role.LAB_MANAGER.value: "Lab manager",
    Role.ADMIN.value: "Admin",
    Role.CLIENT.value: "Client (sees its own projects)",
}
ACTIVE_CHOICES = (("yes", "Active: may sign in"), ("no", "Deactivated: cannot sign in"))
CREATE_FIELDS = ("organisation_id", "role", "full_name", "email", "password")
EDIT_FIELDS = ("full_name", "role", "is_active", "version")
PASSWORD_FIELDS = ("new_password", "repeat_password", "version")
USER_LIMIT = 500


def _values(posted: Mapping[str, Any], names: tuple[str, ...]) -> dict[str, str]:
    return {name: str(posted.get(name, "")).strip() for name in names}


def _refusal(tried: Attempt, names: tuple[str, ...]) -> tuple[dict[str, Any], list[str]]:
    return tried.fields(simple_name(names))


def _role(text: str) -> Role:
    try:
        return Role(text)
    except ValueError:
        raise accounts.field_error(
            "role", f"{text!r} is not a role; accepted: {', '.join(r.value for r in Role)}"
        ) from None


def _number(text: str, field: str) -> int:
    if not text.isdigit():
        raise accounts.field_error(field, "choose one of the listed entries")
    return int(text)


# --- users ---------------------------------------------------------------------------------


def _list_context(request: Request, session: Session, admin: User, **extra: Any) -> dict[str, Any]:
    users, _ = accounts.list_users(session, limit=USER_LIMIT, offset=0)
    organisations, _ = accounts.list_organisations(session, limit=USER_LIMIT, offset=0)
    names = {o.id: o.name for o in organisations}
    context: dict[str, Any] = {
        "users": [(u, names.get(u.organisation_id, "")) for u in users],
        "organisation_choices": [("", "Choose")] + [(str(o.id), o.name) for o in organisations],
        "role_choices": [("", "Choose"), *ROLE_WORDS.items()],
        "role_words": ROLE_WORDS,
        "form": dict.fromkeys(CREATE_FIELDS, ""),
        "errors": {},
        "general": [],
    }
    context.update(extra)
    return layout_context(request, admin, **context)


@router.get("/users")
def users_page(request: Request, admin: Admin, session: SessionDep) -> Response:
    """Every account, and the form to create one."""
    return render(request, "admin/users.html", _list_context(request, session, admin))


@router.post("/users")
def user_create(
    request: Request, admin: Admin, session: SessionDep, posted: PostedForm
) -> Response:
    """Create an account with an initial password (passed on to the person by hand)."""
    form = _values(posted, CREATE_FIELDS)
    with attempt(session) as tried:
        user = accounts.add_user(
            session,
            actor=admin,
            organisation_id=_number(form["organisation_id"], "organisation_id"),
            email=form["email"],
            full_name=form["full_name"],
            role=_role(form["role"]),
            password=str(posted.get("password", "")),
            display_units=DisplayUnits.SI,
        )
    if not tried.refused:
        return redirect(request, f"/admin/users/{user.id}?flash=user-created")
    errors, general = _refusal(tried, CREATE_FIELDS)
    form["password"] = ""  # never written back into a page
    context = _list_context(request, session, admin, form=form, errors=errors, general=general)
    return render(request, "admin/users.html", context, status_code=tried.status)


def _user_context(
    request: Request, session: Session, admin: User, user: User, **extra: Any
) -> dict[str, Any]:
    organisation = accounts.get_organisation(session, user.organisation_id)
    context: dict[str, Any] = {
        "person": user,
        "organisation": organisation,
        "role_choices": list(ROLE_WORDS.items()),
        "active_choices": ACTIVE_CHOICES,
        "form": {
            "full_name": user.full_name,
            "role": user.role,
            "is_active": "yes" if user.is_active else "no",
        },
        "errors": {},
        "general": [],
        "password_errors": {},
        "password_general": [],
    }
    context.update(extra)
    return layout_context(request, admin, **context)


@router.get("/users/{user_id}")
def user_page(request: Request, admin: Admin, session: SessionDep, user_id: int) -> Response:
    """One account: change its name, role or active state; reset its password."""
    user = accounts.get_user(session, user_id)
    return render(request, "admin/user.html", _user_context(request, session, admin, user))


@router.post("/users/{user_id}")
def user_update(
    request: Request, admin: Admin, session: SessionDep, user_id: int, posted: PostedForm
) -> Response:
    """Save a change of name, role or active state (deactivating signs the person out)."""
    user = accounts.get_user(session, user_id)
    form = _values(posted, EDIT_FIELDS)
    with attempt(session) as tried:
        if not form["full_name"]:
            raise accounts.field_error("full_name", "must not be blank")
        if form["is_active"] not in ("yes", "no"):
            raise accounts.field_error("is_active", "choose active or deactivated")
        changes = {
            "full_name": form["full_name"],
            "role": _role(form["role"]),
            "is_active": form["is_active"] == "yes",
        }
        version = _number(form["version"], "version")
        accounts.update_user(session, user, actor=admin, version=version, changes=changes)
    if not tried.refused:
        return redirect(request, f"/admin/users/{user_id}?flash=user-saved")
    session.refresh(user)
    errors, general = _refusal(tried, EDIT_FIELDS)
    context = _user_context(
        request, session, admin, user, form=form, errors=errors, general=general
    )
    return render(request, "admin/user.html", context, status_code=tried.status)


@router.post("/users/{user_id}/password")
def user_password(
    request: Request, admin: Admin, session: SessionDep, user_id: int, posted: PostedForm
) -> Response:
    """Give the account a new password; its sessions and API tokens stop working."""
    user = accounts.get_user(session, user_id)
    new = str(posted.get("new_password", ""))
    with attempt(session) as tried:
        if new != str(posted.get("repeat_password", "")):
            raise accounts.field_error("repeat_password", "differs from the new password")
        version = _number(str(posted.get("version", "")).strip(), "version")
        accounts.reset_password(session, user, actor=admin, version=version, new_password=new)
    if not tried.refused:
        return redirect(request, f"/admin/users/{user_id}?flash=password-reset")
    session.refresh(user)
    errors, general = _refusal(tried, PASSWORD_FIELDS)
    context = _user_context(
        request, session, admin, user, password_errors=errors, password_general=general
    )
    return render(request, "admin/user.html", context, status_code=tried.status)


# --- the laboratory ------------------------------------------------------------------------


def _lab_context(request: Request, session: Session, admin: User, **extra: Any) -> dict[str, Any]:
    settings = lab_settings(session)
    context: dict[str, Any] = {
        "fields": LAB_FIELDS,
        "form": {name: getattr(settings, name) for name in LAB_FIELDS},
        "version": settings.version if settings.id is not None else "",
        "errors": {},
        "general": [],
    }
    context.update(extra)
    return layout_context(request, admin, **context)


@router.get("/lab")
def lab_page(request: Request, admin: Admin, session: SessionDep) -> Response:
    """The laboratory's name, address and accreditation, as certificates and pages show them."""
    return render(request, "admin/lab.html", _lab_context(request, session, admin))


@router.post("/lab")
def lab_save(request: Request, admin: Admin, session: SessionDep, posted: PostedForm) -> Response:
    form = {name: str(posted.get(name, "")) for name in LAB_FIELDS}
    version_text = str(posted.get("version", "")).strip()
    with attempt(session) as tried:
        version = int(version_text) if version_text.isdigit() else None
        save_lab_settings(session, actor=admin, version=version, values=form)
    if not tried.refused:
        return redirect(request, "/admin/lab?flash=lab-saved")
    errors, general = _refusal(tried, tuple(LAB_FIELDS))
    if tried.stale is not None:
        general = [
            "The settings were changed by someone else since you opened this page; "
            "what you typed is kept below. Save again to replace theirs."
        ]
    context = _lab_context(request, session, admin, form=form, errors=errors, general=general)
    if tried.stale is not None:
        context["version"] = tried.stale.current.get("version", context["version"])
    return render(request, "admin/lab.html", context, status_code=tried.status)
