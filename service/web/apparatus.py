"""The apparatus register pages (/apparatus): the list with calibration due dates and an
overdue marker, and adding or editing an item (typed areas, spacing and resolution with
their units) through service.apparatus.service, against the version read."""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import date
from typing import Annotated, Any
from urllib.parse import urlencode

from fastapi import APIRouter, Query, Request
from fastapi.responses import Response
from sqlmodel import Session
from starlette.datastructures import FormData

from service.accounts.models import User
from service.apparatus.models import Apparatus
from service.apparatus.service import (
    ApparatusCreate,
    ApparatusUpdate,
    create_apparatus,
    get_apparatus,
    is_overdue,
    list_apparatus,
    may_edit_register,
    update_apparatus,
)
from service.common import ApparatusKind
from service.db import utcnow
from service.deps import SessionDep
from service.errors import PermissionDenied
from service.web.entries import posted as posted_text
from service.web.entries import register_form
from service.web.htmx import PostedForm, htmx_details, redirect, render
from service.web.pages import layout_context
from service.web.queue import StaffUser
from service.web.refusals import Attempt, attempt, simple_name

router = APIRouter(prefix="/apparatus", include_in_schema=False)

PAGE_SIZE = 50
KIND_WORDS = {
    ApparatusKind.RIGID_WALL_PERMEAMETER: "Rigid-wall permeameter",
    ApparatusKind.FLEXIBLE_WALL_PERMEAMETER: "Flexible-wall permeameter",
    ApparatusKind.BALANCE: "Balance",
    ApparatusKind.THERMOMETER: "Thermometer",
    ApparatusKind.TIMER: "Timer",
    ApparatusKind.CALIPER: "Caliper",
    ApparatusKind.PRESSURE_TRANSDUCER: "Pressure transducer",
    ApparatusKind.BURETTE: "Burette",
}
TEXT_FIELDS = (
    "identifier",
    "description",
    "specimen_area",
    "port_spacing",
    "standpipe_area",
    "headwater_area",
    "tailwater_area",
    "resolution",
)
DATE_FIELDS = ("calibrated_on", "calibration_due")
LABELS = {
    "identifier": "Identifier",
    "kind": "Kind",
    "description": "Description",
    "specimen_area": "Specimen area",
    "port_spacing": "Manometer port spacing",
    "standpipe_area": "Standpipe area",
    "headwater_area": "Headwater burette area",
    "tailwater_area": "Tailwater burette area",
    "resolution": "Resolution",
    "calibrated_on": "Calibrated on",
    "calibration_due": "Calibration due",
    "is_active": "In use",
}


@dataclass(slots=True)
class ItemForm:
    """An item's form exactly as typed; `errors` maps a field to its message."""

    values: dict[str, str] = field(default_factory=dict)
    errors: dict[str, dict[str, str]] = field(default_factory=dict)
    message: str = ""
    stale: dict[str, Any] | None = None

    def value(self, name: str) -> str:
        return self.values.get(name, "")


def _require_editor(user: User) -> None:
    if not may_edit_register(user):
        raise PermissionDenied("the apparatus register is edited by lab managers and admins")


def _form_of(item: Apparatus) -> ItemForm:
    values = {
        name: str(getattr(item, f"{name}_text", getattr(item, name, "")) or "")
        for name in TEXT_FIELDS
    }
    values["identifier"] = item.identifier
    values["description"] = item.description
    values["kind"] = item.kind
    for name in DATE_FIELDS:
        day = getattr(item, name)
        values[name] = day.isoformat() if day else ""
    values["is_active"] = "on" if item.is_active else ""
    values["version"] = str(item.version)
    return ItemForm(values=values)


def _context(
    request: Request, user: User, form: ItemForm, item: Apparatus | None
) -> dict[str, Any]:
    return layout_context(
        request,
        user,
        form=form,
        item=item,
        kinds=[(k.value, KIND_WORDS[k]) for k in ApparatusKind],
        labels=LABELS,
        fields=register_form(
            getattr(user, "display_units", "si"), item.kind if item else form.value("kind")
        ),
    )


def _form_response(
    request: Request, user: User, form: ItemForm, item: Apparatus | None, status_code: int = 200
) -> Response:
    return render(
        request,
        "apparatus/form.html",
        _context(request, user, form, item),
        fragment="apparatus/_form.html",
        status_code=status_code,
    )


# ---------- the register ----------


@router.get("")
def register(
    request: Request,
    session: SessionDep,
    user: StaffUser,
    kind: Annotated[str, Query(max_length=40)] = "",
    show: Annotated[str, Query(max_length=20)] = "",
    page: Annotated[int, Query(ge=1, le=10_000)] = 1,
    saved: Annotated[int | None, Query()] = None,
) -> Response:
    """The register by identifier, with calibration due dates; htmx gets the list alone."""
    today = utcnow().date()
    wanted = ApparatusKind(kind) if kind in {k.value for k in ApparatusKind} else None
    rows, total = _listed(session, wanted, show, page, today)
    saved_item = session.get(Apparatus, saved) if saved else None
    context = layout_context(
        request,
        user,
        items=[(row, is_overdue(row, on=today), _due_soon(row, today)) for row in rows],
        total=total,
        page=page,
        pages=max(1, (total + PAGE_SIZE - 1) // PAGE_SIZE),
        kind=kind if wanted else "",
        show=show if show in ("overdue", "all") else "",
        kinds=[(k.value, KIND_WORDS[k]) for k in ApparatusKind],
        kind_words={k.value: w for k, w in KIND_WORDS.items()},
        can_edit=may_edit_register(user),
        saved_item=saved_item,
        today=today,
    )
    response = render(request, "apparatus/list.html", context, fragment="apparatus/_list.html")
    if htmx_details(request).is_htmx:
        kept = {k: v for k, v in (("kind", context["kind"]), ("show", context["show"])) if v}
        response.headers["HX-Push-Url"] = "/apparatus" + (f"?{urlencode(kept)}" if kept else "")
    return response


def _listed(
    session: Session, kind: ApparatusKind | None, show: str, page: int, today: date
) -> tuple[list[Apparatus], int]:
    return list_apparatus(
        session,
        kind=kind,
        overdue=True if show == "overdue" else None,
        active=None if show == "all" else True,
        on=today,
        limit=PAGE_SIZE,
        offset=(page - 1) * PAGE_SIZE,
    )


def _due_soon(item: Apparatus, today: date) -> bool:
    return item.calibration_due is not None and 0 <= (item.calibration_due - today).days <= 30


@router.get("/new")
def new_item(request: Request, user: StaffUser) -> Response:
    """An empty form for a new item."""
    _require_editor(user)
    form = ItemForm(values={"kind": ApparatusKind.BALANCE.value, "is_active": "on"})
    return _form_response(request, user, form, None)


@router.get("/{apparatus_id}/edit")
def edit_item(
    request: Request, session: SessionDep, user: StaffUser, apparatus_id: int
) -> Response:
    """The item's form with what is stored, as it was typed."""
    _require_editor(user)
    item = get_apparatus(session, apparatus_id)
    return _form_response(request, user, _form_of(item), item)


def _read_form(posted: FormData) -> ItemForm:
    """The posted form as typed: each keypad field joined to its unit picker ('0.5' and
    'cm**2' -> '0.5 cm**2'), as the API takes it."""
    values = {
        name: posted_text(posted, name).strip()
        for name in (*TEXT_FIELDS, *DATE_FIELDS, "kind", "version")
    }
    values["is_active"] = "on" if posted.get("is_active") else ""
    return ItemForm(values=values)


def _dates(form: ItemForm) -> dict[str, date | None]:
    out: dict[str, date | None] = {}
    for name in DATE_FIELDS:
        text = form.value(name)
        if not text:
            out[name] = None
            continue
        try:
            out[name] = date.fromisoformat(text)
        except ValueError:
            form.errors[name] = {
                "msg": f"{LABELS[name]}: '{text[:40]}' is not a date; accepted: YYYY-MM-DD, "
                "for example 2027-03-31.",
                "kind": "value_error",
            }
    return out


def _take_refusal(form: ItemForm, tried: Attempt) -> None:
    """Put a refusal beside its fields, or atop the form; keep both versions of a stale edit."""
    errors, general = tried.fields(simple_name(LABELS, {"calibrated_on": "calibration_due"}))
    for name, error in errors.items():
        form.errors.setdefault(name, {**error, "msg": f"{LABELS[name]}: {error['msg']}"})
    if tried.stale is not None:
        form.stale = tried.stale.detail
    form.message = " ".join(general) or (
        tried.message
        if tried.stale is not None
        else "Some entries need attention; each is marked beside its field."
    )


def _refused(
    request: Request,
    session: Session,
    user: User,
    form: ItemForm,
    item: Apparatus | None,
    status: int,
) -> Response:
    if not form.message:
        form.message = "Some entries need attention; each is marked beside its field."
    if item is not None and item.id is not None:
        item = get_apparatus(session, item.id)
    return _form_response(request, user, form, item, status)


@router.post("")
def create(request: Request, session: SessionDep, user: StaffUser, posted: PostedForm) -> Response:
    """Add an item to the register; refusals come back beside their fields, all typed kept."""
    _require_editor(user)
    form = _read_form(posted)
    dates = _dates(form)
    if form.errors:
        return _refused(request, session, user, form, None, 422)
    with attempt(session) as tried:
        data = ApparatusCreate(
            identifier=form.value("identifier"),
            kind=form.value("kind"),
            description=form.value("description"),
            **{name: form.value(name) or None for name in TEXT_FIELDS[2:]},
            **dates,
            is_active=bool(form.value("is_active")),
        )
        item = create_apparatus(session, data, actor=user)
    if tried.refused:
        _take_refusal(form, tried)
        return _refused(request, session, user, form, None, tried.status)
    return redirect(request, f"/apparatus?saved={item.id}")


@router.post("/{apparatus_id}")
def update(
    request: Request,
    session: SessionDep,
    user: StaffUser,
    apparatus_id: int,
    posted: PostedForm,
) -> Response:
    """Edit an item against the version read (409 with both versions if it changed since)."""
    _require_editor(user)
    item = get_apparatus(session, apparatus_id)
    form = _read_form(posted)
    form.values["kind"] = item.kind  # the kind of an item does not change
    dates = _dates(form)
    version = form.value("version")
    if not version.isdigit():
        form.errors["form"] = {"msg": "Version: reload the page and try again.", "kind": "missing"}
    if form.errors:
        return _refused(request, session, user, form, item, 422)
    with attempt(session) as tried:
        data = ApparatusUpdate(
            version=int(version),
            identifier=form.value("identifier"),
            description=form.value("description"),
            **{name: form.value(name) for name in TEXT_FIELDS[2:]},
            **dates,
            is_active=bool(form.value("is_active")),
        )
        update_apparatus(session, apparatus_id, data, actor=user)
    if tried.refused:
        _take_refusal(form, tried)
        return _refused(request, session, user, form, item, tried.status)
    return redirect(request, f"/apparatus?saved={apparatus_id}")
