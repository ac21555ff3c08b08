"""The lab manager's queue (/queue) and assigning a test's technician and apparatus
(/tests/{test_id}/assign): filters and sort in the URL, the table refreshed by htmx."""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import date
from typing import Annotated, Any
from urllib.parse import urlencode

from fastapi import APIRouter, Depends, Query, Request
from fastapi.responses import Response
from sqlmodel import Session

from service.accounts.models import User
from service.accounts.service import list_organisations, list_users, names_of
from service.apparatus.service import identifiers_of, is_overdue, list_apparatus
from service.common import ApparatusKind, OrganisationKind, Role, TestState
from service.db import utcnow
from service.deps import CurrentUser, SessionDep
from service.errors import NotFound, PermissionDenied, ServiceError
from service.lab_tests import service as lab_tests
from service.lab_tests.models import PermeabilityTest
from service.lab_tests.reduction import catalogue
from service.lab_tests.schemas import TestUpdate
from service.paging import Page
from service.projects.models import Project
from service.projects.service import list_projects
from service.queue import (
    QueueFilters,
    QueueTest,
    cached,
    queue_counts,
    queue_tests,
    technician_load,
)
from service.samples.models import Sample
from service.web.htmx import PostedForm, htmx_details, redirect, render, safe_next
from service.web.pages import layout_context
from service.web.refusals import attempt

router = APIRouter(include_in_schema=False)

PAGE_SIZE = 25
OPTION_LIMIT = 500
STATE_ORDER = [s.value for s in TestState]
SORTS = (
    ("due", "Due date"),
    ("priority", "Urgent first"),
    ("state", "State"),
)
STATE_WORDS = {
    "planned": "Planned",
    "running": "Running",
    "submitted": "Awaiting review",
    "approved": "Approved",
    "issued": "Issued",
    "superseded": "Superseded",
}
METHOD_WORDS = {m.id: m.short_name for m in catalogue.METHODS}


def lab_staff_page(user: CurrentUser) -> User:
    """Lab staff only; anyone else (a client) is told there is no such page, as for any
    record of another organisation."""
    if user.role == Role.CLIENT:
        raise NotFound("there is no such page")
    return user


StaffUser = Annotated[User, Depends(lab_staff_page)]


# ---------- the filters, exactly as typed ----------


@dataclass(slots=True)
class QueueQuery:
    """The queue's URL parameters as typed, and what they mean once checked."""

    raw: dict[str, str] = field(default_factory=dict)
    errors: dict[str, dict[str, str]] = field(default_factory=dict)
    filters: QueueFilters = field(default_factory=QueueFilters)
    sort: str = "due"
    page: int = 1

    def value(self, name: str) -> str:
        return self.raw.get(name, "")

    def url(self, **changes: Any) -> str:
        """/queue with these filters, some changed (None drops one); empty values left out."""
        params = {**self.raw, **{k: str(v) for k, v in changes.items() if v is not None}}
        for name, value in changes.items():
            if value is None:
                params.pop(name, None)
        defaults = {"page": "1", "sort": "due"}
        kept = {k: v for k, v in params.items() if v and defaults.get(k) != v}
        return "/queue" + (f"?{urlencode(kept)}" if kept else "")


FILTER_NAMES = ("state", "client_id", "project_id", "technician_id", "due_before", "sort", "page")


def _id_of(query: QueueQuery, name: str, label: str) -> int | None:
    text = query.value(name).strip()
    if not text:
        return None
    if text.isdigit():
        return int(text)
    query.errors[name] = {
        "msg": f"{label}: '{text[:40]}' is not one of the choices; pick one from the list.",
        "kind": "value_error",
    }
    return None


def read_queue_query(params: dict[str, str]) -> QueueQuery:
    """Check the URL's filters; each refusal is kept beside its field, the rest still apply."""
    query = QueueQuery(raw={k: params.get(k, "") for k in FILTER_NAMES if params.get(k)})
    state_text = query.value("state")
    states: tuple[TestState, ...] = ()
    if state_text == "all":
        states = tuple(TestState)
    elif state_text:
        if state_text in STATE_ORDER:
            states = (TestState(state_text),)
        else:
            accepted = ", ".join(STATE_ORDER)
            query.errors["state"] = {
                "msg": f"State: '{state_text[:40]}' is not a state; accepted: {accepted} or all.",
                "kind": "value_error",
            }
    due_before = None
    due_text = query.value("due_before").strip()
    if due_text:
        try:
            due_before = date.fromisoformat(due_text)
        except ValueError:
            query.errors["due_before"] = {
                "msg": f"Due before: '{due_text[:40]}' is not a date; accepted: YYYY-MM-DD, "
                "for example 2026-12-31.",
                "kind": "value_error",
            }
    sort = query.value("sort") or "due"
    if sort not in dict(SORTS):
        query.errors["sort"] = {
            "msg": f"Sort: '{sort[:40]}' is not offered; accepted: due, priority or state.",
            "kind": "value_error",
        }
        sort = "due"
    page_text = query.value("page") or "1"
    page = int(page_text) if page_text.isdigit() and int(page_text) >= 1 else 1
    query.filters = QueueFilters(
        states=states,
        client_id=_id_of(query, "client_id", "Client"),
        project_id=_id_of(query, "project_id", "Project"),
        technician_id=_id_of(query, "technician_id", "Technician"),
        due_before=due_before,
    )
    query.sort, query.page = sort, page
    return query


# ---------- choices for the selects ----------


def technicians(session: Session) -> list[User]:
    """Active technicians of the lab, by name: the only people a test can be assigned to."""
    users, _ = list_users(session, role=Role.TECHNICIAN, limit=OPTION_LIMIT, offset=0)
    lab_orgs, _ = list_organisations(
        session, kind=OrganisationKind.LAB, limit=OPTION_LIMIT, offset=0
    )
    lab_ids = {org.id for org in lab_orgs}
    return sorted(
        (u for u in users if u.is_active and u.organisation_id in lab_ids),
        key=lambda u: u.full_name,
    )


def _filter_choices(session: Session, user: User) -> dict[str, Any]:
    """The filters' lists (clients, projects, technicians), kept a few seconds per user."""
    return cached(("filter choices", user.id), lambda: _choices(session, user))


def _choices(session: Session, user: User) -> dict[str, Any]:
    clients, _ = list_organisations(
        session, kind=OrganisationKind.CLIENT, limit=OPTION_LIMIT, offset=0
    )
    projects, _ = list_projects(session, user=user, limit=OPTION_LIMIT, offset=0)
    return {
        "clients": [(str(c.id), c.name) for c in clients],
        "projects": [(str(p.id), f"{p.number} · {p.name}") for p in sorted(projects, key=_num)],
        "technicians": [(str(t.id), t.full_name) for t in technicians(session)],
        "states": [("", "Open tests (planned to approved)")]
        + [(s, STATE_WORDS[s]) for s in STATE_ORDER]
        + [("all", "All states")],
        "sorts": list(SORTS),
    }


def _num(project: Project) -> str:
    return project.number


# ---------- /queue ----------


def _require_queue_role(user: User) -> None:
    if not lab_tests.may_assign(user):
        raise PermissionDenied("the queue is for reviewers, lab managers and admins")


def _page_of(session: Session, query: QueueQuery) -> Page[QueueTest]:
    """The page asked for, or the last one when the filters leave fewer pages."""
    offset = (query.page - 1) * PAGE_SIZE
    page = queue_tests(session, query.filters, limit=PAGE_SIZE, offset=offset, sort=query.sort)
    if page.total and offset >= page.total:
        query.page = (page.total - 1) // PAGE_SIZE + 1
        offset = (query.page - 1) * PAGE_SIZE
        page = queue_tests(session, query.filters, limit=PAGE_SIZE, offset=offset, sort=query.sort)
    return page


@router.get("/queue")
def queue(
    request: Request,
    session: SessionDep,
    user: StaffUser,
    assigned: Annotated[int | None, Query()] = None,
) -> Response:
    """Counts by state, the load per technician and the page of tests; htmx gets the results
    alone when a filter changes (the form stays as typed), a browser the whole page."""
    _require_queue_role(user)
    query = read_queue_query(dict(request.query_params))
    filters = query.filters
    page = _page_of(session, query)
    notice = _assigned_notice(session, assigned) if assigned else None
    context = layout_context(
        request,
        user,
        query=query,
        today=filters.today,
        counts=queue_counts(session, filters),
        load=technician_load(session, filters),
        page=page,
        pages=max(1, (page.total + PAGE_SIZE - 1) // PAGE_SIZE),
        can_assign=lab_tests.may_assign(user),
        method_words=METHOD_WORDS,
        notice=notice,
        **_filter_choices(session, user),
    )
    context["overdue_total"] = sum(row.overdue for row in context["load"])
    response = render(
        request,
        "queue/queue.html",
        context,
        fragment="queue/_results.html",
        status_code=422 if query.errors else 200,
    )
    if htmx_details(request).is_htmx:
        # The form sends every field, empty ones too: push the URL without them.
        response.headers["HX-Push-Url"] = query.url(page=query.page)
    return response


def _assigned_notice(session: Session, test_id: int) -> str | None:
    test = session.get(PermeabilityTest, test_id)
    if test is None:
        return None
    sample = session.get(Sample, test.sample_id)
    technician = session.get(User, test.technician_id) if test.technician_id else None
    apparatus = lab_tests.apparatus_of(session, test_id)
    who = technician.full_name if technician else "nobody (not assigned)"
    what = ", ".join(a.identifier for a in apparatus) or "no apparatus"
    lab_id = sample.lab_id if sample else f"test {test_id}"
    return f"{lab_id} test {test.series}: assigned to {who}; apparatus {what}."


# ---------- /tests/{test_id}/assign ----------


@dataclass(slots=True)
class AssignForm:
    """The assignment as typed: the technician, the apparatus ticked, the version read."""

    technician_id: str = ""
    apparatus_ids: list[str] = field(default_factory=list)
    version: str = ""
    next_url: str = "/queue"


def _apparatus_choices(session: Session, today: date) -> list[dict[str, Any]]:
    items, _ = list_apparatus(session, active=True, limit=OPTION_LIMIT, offset=0)
    kinds = [k.value for k in ApparatusKind]
    items = sorted(
        items, key=lambda a: (kinds.index(a.kind) if a.kind in kinds else 99, a.identifier)
    )
    return [
        {
            "id": str(a.id),
            "identifier": a.identifier,
            "kind": a.kind.replace("_", " "),
            "due": a.calibration_due,
            "overdue": is_overdue(a, on=today),
            "description": a.description,
        }
        for a in items
    ]


def _assign_context(
    request: Request,
    session: Session,
    user: User,
    test: PermeabilityTest,
    form: AssignForm,
    *,
    errors: dict[str, dict[str, str]] | None = None,
    message: str = "",
    stale: dict[str, Any] | None = None,
) -> dict[str, Any]:
    today = utcnow().date()
    sample = session.get(Sample, test.sample_id)
    load = {row.technician_id: row.total for row in technician_load(session, QueueFilters())}
    return layout_context(
        request,
        user,
        test=test,
        sample=sample,
        form=form,
        errors=errors or {},
        message=message,
        stale=stale,
        technicians=[(str(t.id), t.full_name, load.get(t.id, 0)) for t in technicians(session)],
        apparatus=_apparatus_choices(session, today),
        editable=test.state in lab_tests.EDITABLE,
        method_words=METHOD_WORDS,
    )


def _require_assigner(user: User) -> None:
    if not lab_tests.may_assign(user):
        raise PermissionDenied("assigning tests is for lab managers, reviewers and admins")


@router.get("/tests/{test_id}/assign")
def assign_form(
    request: Request,
    session: SessionDep,
    user: StaffUser,
    test_id: int,
    next_url: Annotated[str, Query(alias="next")] = "/queue",
) -> Response:
    """The assignment form (a small page; htmx loads it into the queue beside the table)."""
    _require_assigner(user)
    test = lab_tests.get_test(session, test_id, actor=user)
    current = [str(a.id) for a in lab_tests.apparatus_of(session, test_id)]
    form = AssignForm(
        technician_id=str(test.technician_id or ""),
        apparatus_ids=current,
        version=str(test.version),
        next_url=safe_next(next_url, "/queue"),
    )
    context = _assign_context(request, session, user, test, form)
    return render(request, "queue/assign.html", context, fragment="queue/_assign.html")


def _int_or_error(
    text: str, name: str, label: str, errors: dict[str, dict[str, str]]
) -> int | None:
    text = text.strip()
    if not text:
        return None
    if text.isdigit():
        return int(text)
    errors[name] = {"msg": f"{label}: '{text[:40]}' is not one of the choices.", "kind": "x"}
    return None


def _stale_assignment(session: Session, test: PermeabilityTest, sent: TestUpdate) -> dict[str, Any]:
    """Both sides of a stale assignment in words: the technician and apparatus chosen, and
    those saved now."""
    assert test.id is not None
    current_ids = [a.id for a in lab_tests.apparatus_of(session, test.id) if a.id is not None]
    chosen = sent.apparatus_ids or []
    names = names_of(session, [sent.technician_id, test.technician_id])
    labels = identifiers_of(session, [*chosen, *current_ids])

    def side(version: int, person: int | None, items: list[int]) -> dict[str, Any]:
        return {
            "version": version,
            "technician": names.get(person or 0, "not assigned"),
            "apparatus": ", ".join(sorted(labels.get(i, str(i)) for i in items)) or "none",
        }

    return {
        "yours": side(sent.version, sent.technician_id, chosen),
        "current": side(test.version, test.technician_id, current_ids),
    }


def _read_assignment(form: AssignForm) -> tuple[TestUpdate | None, dict[str, dict[str, str]]]:
    """The assignment to send, or the form's own refusals (no technician chosen, choices
    that are not numbers)."""
    errors: dict[str, dict[str, str]] = {}
    technician_id = _int_or_error(form.technician_id, "technician_id", "Technician", errors)
    if not form.technician_id.strip():
        errors["technician_id"] = {"msg": "Choose a technician.", "kind": "missing"}
    apparatus_ids = [
        value
        for raw in form.apparatus_ids
        if (value := _int_or_error(raw, "apparatus_ids", "Apparatus", errors)) is not None
    ]
    version = _int_or_error(form.version, "version", "Version", errors)
    if version is None and "version" not in errors:
        errors["version"] = {"msg": "Version: reload the page and try again.", "kind": "missing"}
    if errors or version is None:
        return None, errors
    return TestUpdate(
        version=version, technician_id=technician_id, apparatus_ids=apparatus_ids
    ), errors


def _assign_answer(
    request: Request,
    session: Session,
    user: User,
    test_id: int,
    form: AssignForm,
    *,
    status_code: int,
    **shown: Any,
) -> Response:
    test = lab_tests.get_test(session, test_id, actor=user)
    context = _assign_context(request, session, user, test, form, **shown)
    return render(
        request,
        "queue/assign.html",
        context,
        fragment="queue/_assign.html",
        status_code=status_code,
    )


@router.post("/tests/{test_id}/assign")
def assign(
    request: Request, session: SessionDep, user: StaffUser, test_id: int, posted: PostedForm
) -> Response:
    """Set the technician and apparatus through the lifecycle's update_test (with the version
    read): refused entries come back beside their fields, a stale version with both sides."""
    _require_assigner(user)
    form = AssignForm(
        technician_id=str(posted.get("technician_id", "")),
        apparatus_ids=[str(v) for v in posted.getlist("apparatus_ids")],
        version=str(posted.get("version", "")),
        next_url=safe_next(str(posted.get("next", "/queue")), "/queue"),
    )
    lab_tests.get_test(session, test_id, actor=user)
    data, errors = _read_assignment(form)
    if data is None:
        message = "Check the marked entries."
        return _assign_answer(
            request, session, user, test_id, form, status_code=422, errors=errors, message=message
        )
    with attempt(session, catch=(ServiceError,)) as tried:
        lab_tests.update_test(session, test_id, data, actor=user)
    if tried.refused:
        test = lab_tests.get_test(session, test_id, actor=user)
        stale = _stale_assignment(session, test, data) if tried.stale is not None else None
        errors, _ = tried.fields(lambda loc: str(loc[0]) if loc else None)
        return _assign_answer(
            request, session, user, test_id, form, status_code=tried.status, errors=errors,
            message=tried.message, stale=stale,
        )  # fmt: skip
    joiner = "&" if "?" in form.next_url else "?"
    return redirect(request, f"{form.next_url}{joiner}assigned={test_id}")
