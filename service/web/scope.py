"""The laboratory's accredited scope page (/scope), for admins and lab managers: the
standards and editions the laboratory works to, their defaults, and each rule's limits as
the laboratory confirms or changes them. One form, saved against the scope version read;
a refusal comes back with every entry kept and each message beside its field."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Annotated, Any

from fastapi import APIRouter, Query, Request
from fastapi.responses import Response
from sqlmodel import Session
from starlette.datastructures import FormData

from service.accounts.models import User
from service.deps import SessionDep
from service.errors import PermissionDenied
from service.scope.service import (
    DECISION_RULE_NAMES,
    REFERENCE_TEMPERATURES_C,
    UNCONFIRMED,
    ScopeUpdate,
    may_edit_scope,
    update_scope,
    view,
)
from service.web.htmx import PostedForm, redirect, render
from service.web.pages import layout_context
from service.web.queue import StaffUser
from service.web.refusals import attempt

router = APIRouter(prefix="/scope", include_in_schema=False)

UNIT_WORDS = {"": "number", "m": "m", "m/s": "m/s", "degC": "°C"}
SAVED = "Saved: a new version of the scope applies to tests reduced from now on."
UNCHANGED = "Nothing changed: the scope stays as it was."


@dataclass(slots=True)
class ScopeForm:
    """The form exactly as typed; `errors` maps a field name to its message."""

    values: dict[str, str] = field(default_factory=dict)
    errors: dict[str, dict[str, str]] = field(default_factory=dict)
    message: str = ""

    def value(self, name: str) -> str:
        return self.values.get(name, "")

    def checked(self, name: str) -> bool:
        return self.values.get(name) == "on"


def _require_editor(user: User) -> None:
    if not may_edit_scope(user):
        raise PermissionDenied("the accredited scope is kept by lab managers and admins")


def _name(*parts: Any) -> str:
    return ".".join(str(p).replace(" ", "_").replace(".", "_") for p in parts)


def _form_of(scope: dict[str, Any]) -> ScopeForm:
    values: dict[str, str] = {"version": str(scope["version"])}
    for std in scope["standards"]:
        key = std["standard"]
        values[_name("std", key, "in_scope")] = "on" if std["in_scope"] else ""
        values[_name("std", key, "edition")] = std["edition"]
        values[_name("std", key, "reference")] = f"{std['reference_temperature_c']:g}"
        values[_name("std", key, "decision_rule")] = std["decision_rule"]
        values[_name("std", key, "determinations")] = str(std["determinations"])
        for rule in std["rules"]:
            base = ("rule", key, rule["rule_id"])
            values[_name(*base, "confirmed")] = "on" if rule["status"] != "unconfirmed" else ""
            values[_name(*base, "edition")] = rule["edition"]
            values[_name(*base, "clause")] = rule["clause"]
            for limit in rule["limits"]:
                values[_name(*base, "limit", limit["id"])] = f"{limit['value']:g}"
    return ScopeForm(values=values)


def _context(
    request: Request, session: Session, user: User, form: ScopeForm, notice: str = ""
) -> dict[str, Any]:
    return layout_context(
        request,
        user,
        scope=view(session),
        form=form,
        name=_name,
        unit_words=UNIT_WORDS,
        decision_rules=list(DECISION_RULE_NAMES.items()),
        references=[f"{t:g}" for t in REFERENCE_TEMPERATURES_C],
        unconfirmed=UNCONFIRMED,
        notice=notice,
    )


def _page(
    request: Request,
    session: Session,
    user: User,
    form: ScopeForm,
    notice: str = "",
    status_code: int = 200,
) -> Response:
    return render(
        request,
        "scope/scope.html",
        _context(request, session, user, form, notice),
        fragment="scope/_form.html",
        status_code=status_code,
    )


@router.get("")
def scope_page(
    request: Request,
    session: SessionDep,
    user: StaffUser,
    saved: Annotated[str, Query(max_length=10)] = "",
) -> Response:
    """The scope with its current version; the form holds what is stored."""
    _require_editor(user)
    notice = {"yes": SAVED, "same": UNCHANGED}.get(saved, "")
    return _page(request, session, user, _form_of(view(session)), notice)


def _number(form: ScopeForm, name: str, label: str) -> float | None:
    text = form.value(name).replace(",", ".").strip()
    try:
        value = float(text)
    except ValueError:
        value = math.nan
    if not math.isfinite(value) or value <= 0:
        form.errors[name] = {
            "msg": f"{label}: '{text[:40]}' is not a positive number; accepted: a number such "
            "as 0.25 or 1e-9, in the unit shown.",
            "kind": "value_error",
        }
        return None
    return value


def _whole(text: str) -> bool:
    return text.isascii() and text.isdigit() and len(text) < 10


def _reference(text: str) -> float | None:
    """The chosen reference temperature; anything not offered is left to the service to
    refuse by name (None: the standard's own)."""
    try:
        value = float(text)
    except ValueError:
        return None
    return value if math.isfinite(value) else None


def _read(posted: FormData, scope: dict[str, Any]) -> tuple[ScopeForm, dict[str, Any] | None]:
    values = {k: str(v).strip() for k, v in posted.items() if isinstance(v, str)}
    form = ScopeForm(values=values)
    standards: list[dict[str, Any]] = []
    rules: list[dict[str, Any]] = []
    for std in scope["standards"]:
        key = std["standard"]
        in_scope = form.checked(_name("std", key, "in_scope"))
        determinations = form.value(_name("std", key, "determinations"))
        if not _whole(determinations) or not 1 <= int(determinations) <= 20:
            form.errors[_name("std", key, "determinations")] = {
                "msg": f"{key} · Number of determinations: a whole number from 1 to 20.",
                "kind": "value_error",
            }
        if in_scope or std["listed"]:
            standards.append(
                {
                    "standard": key,
                    "edition": form.value(_name("std", key, "edition"))[:40],
                    "in_scope": in_scope,
                    "reference_temperature_c": _reference(
                        form.value(_name("std", key, "reference"))
                    ),
                    "decision_rule": form.value(_name("std", key, "decision_rule")),
                    "determinations": int(determinations) if _whole(determinations) else None,
                }
            )
        for rule in std["rules"]:
            base = ("rule", key, rule["rule_id"])
            confirmed = form.checked(_name(*base, "confirmed"))
            if not confirmed and rule["status"] == "unconfirmed":
                continue
            limits = {}
            for limit in rule["limits"]:
                value = _number(
                    form, _name(*base, "limit", limit["id"]), f"{rule['name']} · {limit['label']}"
                )
                if value is not None:
                    limits[limit["id"]] = value
            rules.append(
                {
                    "standard": key,
                    "rule_id": rule["rule_id"],
                    "confirmed": confirmed,
                    "edition": form.value(_name(*base, "edition"))[:40],
                    "clause": form.value(_name(*base, "clause"))[:120],
                    "limits": limits,
                }
            )
    version = form.value("version")
    if form.errors or not _whole(version):
        if not _whole(version):
            form.message = "The form lost its version: reload the page and try again."
        return form, None
    return form, {
        "version": int(version),
        "note": form.value("note")[:500],
        "standards": standards,
        "rules": rules,
    }


@router.post("")
def save_scope(
    request: Request, session: SessionDep, user: StaffUser, posted: PostedForm
) -> Response:
    """Save the scope against the version read; a refusal keeps every entry."""
    _require_editor(user)
    form, data = _read(posted, view(session))
    if data is None:
        form.message = form.message or "Some entries need attention; each is marked beside it."
        return _page(request, session, user, form, status_code=422)
    with attempt(session) as tried:
        saved = update_scope(session, ScopeUpdate.model_validate(data), actor=user)
    if tried.refused:
        form.message = tried.message
        if tried.stale is not None:
            form.message = (
                "Someone else changed the scope while you were editing. Your entries are kept "
                "below; the page now shows the saved version number, so saving again replaces it."
            )
            form.values["version"] = str(view(session)["version"])
        return _page(request, session, user, form, status_code=tried.status)
    return redirect(request, f"/scope?saved={'yes' if saved else 'same'}")
