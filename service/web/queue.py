"""The lab manager's queue (/queue) and assigning a test's technician and apparatus
(/tests/{test_id}/assign): filters and sort in the URL, the table refreshed by htmx."""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from datetime import date
from typing import Annotated, Any
from urllib.parse import urlencode

import sqlalchemy as sa
from fastapi import APIRouter, Depends, Query, Request
from fastapi.responses import Response
from sqlmodel import Session, col, select

from service.accounts.models import Organisation, User
from service.accounts.service import list_organisations, list_users
from service.apparatus.models import Apparatus
from service.apparatus.service import is_overdue, list_apparatus
from service.common import ApparatusKind, OrganisationKind, Priority, Role, TestState
from service.db import utcnow
from service.deps import CurrentUser, SessionDep
from service.errors import InvalidInput, NotFound, PermissionDenied, ServiceError, StaleVersion
from service.lab_tests import service as lifecycle
from service.lab_tests.models import PermeabilityTest
from service.lab_tests.schemas import TestUpdate
from service.projects.models import Project
from service.projects.service import list_projects
from service.queue import (
    OPEN_STATES,
    Page,
    QueueFilters,
    QueueTest,
    _due_date,
    _filtered,
    count_of,
    queue_counts,
    queue_tests,
    technician_load,
)
from service.samples.models import Sample
from service.web.htmx import htmx_details, redirect, render, safe_next
from service.web.pages import layout_context

router = APIRouter(include_in_schema=False)

PAGE_SIZE = 25
OPTION_LIMIT = 500
QUEUE_ROLES = frozenset({Role.REVIEWER, Role.LAB_MANAGER, Role.ADMIN})
ASSIGNERS = frozenset({Role.REVIEWER, Role.LAB_MANAGER, Role.ADMIN})
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
METHOD_WORDS = {
    "constant_head": "Constant head",
    "falling_head": "Falling head",
    "falling_head_rising_tail": "Falling head, rising tailwater",
    "constant_rate": "Constant rate of flow",
}


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


# ---------- a page of the queue in the chosen order ----------


def _sorted_ids(
    session: Session, filters: QueueFilters, sort: str, *, limit: int, offset: int
) -> tuple[list[int], int]:
    # service.queue sorts by due date only; priority and state orders are built on its
    # filters here (see the report: a `sort` argument on queue_tests would replace this).
    if not filters.states:
        filters = replace(filters, states=OPEN_STATES)
    base = _filtered(select(PermeabilityTest.id), filters, join_sample=True)
    total = count_of(session, base)
    if sort == "priority":
        first: list[Any] = [sa.case((col(Sample.priority) == Priority.URGENT.value, 0), else_=1)]
    else:
        ranks = {state: rank for rank, state in enumerate(STATE_ORDER)}
        first = [sa.case(ranks, value=col(PermeabilityTest.state), else_=len(ranks))]
    ordered = base.order_by(*first, _due_date().is_(None), _due_date(), col(PermeabilityTest.id))
    return list(session.exec(ordered.limit(limit).offset(offset)).all()), total


def _queue_rows(session: Session, test_ids: list[int], today: date) -> list[QueueTest]:
    if not test_ids:
        return []
    rows = session.exec(
        select(PermeabilityTest, Sample, Project, Organisation)
        .join(Sample, col(Sample.id) == col(PermeabilityTest.sample_id))
        .join(Project, col(Project.id) == col(Sample.project_id))
        .join(Organisation, col(Organisation.id) == col(Project.client_id))
        .where(col(PermeabilityTest.id).in_(test_ids))
    ).all()
    technician_ids = {test.technician_id for test, *_ in rows if test.technician_id}
    names = dict(
        session.exec(select(User.id, User.full_name).where(col(User.id).in_(technician_ids))).all()
        if technician_ids
        else []
    )
    open_states = {s.value for s in OPEN_STATES}
    by_id: dict[int, QueueTest] = {}
    for test, sample, project, client in rows:
        due_on = test.due_date or sample.due_date
        assert test.id is not None
        assert sample.id is not None
        by_id[test.id] = QueueTest(
            test_id=test.id,
            state=test.state,
            method=test.method,
            sample_id=sample.id,
            sample_lab_id=sample.lab_id,
            client_sample_id=sample.client_sample_id,
            client_id=client.id or 0,
            client_name=client.name,
            project_id=project.id or 0,
            project_number=project.number,
            technician_id=test.technician_id,
            technician_name=names.get(test.technician_id),
            due_date=due_on,
            overdue=bool(due_on is not None and due_on < today and test.state in open_states),
            priority=sample.priority,
        )
    return [by_id[test_id] for test_id in test_ids if test_id in by_id]


def queue_page(
    session: Session, filters: QueueFilters, sort: str, *, limit: int, offset: int
) -> Page[QueueTest]:
    if sort == "due":
        return queue_tests(session, filters, limit=limit, offset=offset)
    ids, total = _sorted_ids(session, filters, sort, limit=limit, offset=offset)
    items = _queue_rows(session, ids, filters.today)
    return Page[QueueTest](items=items, total=total, limit=limit, offset=offset)


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
    if user.role not in QUEUE_ROLES:
        raise PermissionDenied("the queue is for reviewers, lab managers and admins")


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
    limit = PAGE_SIZE
    offset = (query.page - 1) * limit
    page = queue_page(session, filters, query.sort, limit=limit, offset=offset)
    if page.total and offset >= page.total:
        query.page = (page.total - 1) // limit + 1
        offset = (query.page - 1) * limit
        page = queue_page(session, filters, query.sort, limit=limit, offset=offset)
    pages = max(1, (page.total + limit - 1) // limit)
    notice = _assigned_notice(session, assigned) if assigned else None
    context = layout_context(
        request,
        user,
        query=query,
        today=filters.today,
        counts=queue_counts(session, filters),
        load=technician_load(session, filters),
        page=page,
        pages=pages,
        can_assign=user.role in ASSIGNERS,
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
    apparatus = lifecycle.apparatus_of(session, test_id)
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
        editable=test.state in lifecycle.EDITABLE,
        method_words=METHOD_WORDS,
    )


def _require_assigner(user: User) -> None:
    if user.role not in ASSIGNERS:
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
    test = lifecycle.get_test(session, test_id, actor=user)
    current = [str(a.id) for a in lifecycle.apparatus_of(session, test_id)]
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


def _error_field(loc: list[Any]) -> str:
    parts = [str(p) for p in loc if p != "body"]
    return parts[0] if parts else "form"


def _person(session: Session, user_id: Any) -> str:
    if not user_id:
        return "not assigned"
    person = session.get(User, int(user_id))
    return person.full_name if person else f"user {user_id}"


def _identifiers(session: Session, ids: list[Any]) -> str:
    if not ids:
        return "none"
    rows = session.exec(select(Apparatus).where(col(Apparatus.id).in_([int(i) for i in ids])))
    return ", ".join(sorted(a.identifier for a in rows.all())) or "none"


@router.post("/tests/{test_id}/assign")
async def assign(request: Request, session: SessionDep, user: StaffUser, test_id: int) -> Response:
    """Set the technician and apparatus through the lifecycle's update_test (with the version
    read): refused entries come back beside their fields, a stale version with both sides."""
    _require_assigner(user)
    posted = await request.form()
    form = AssignForm(
        technician_id=str(posted.get("technician_id", "")),
        apparatus_ids=[str(v) for v in posted.getlist("apparatus_ids")],
        version=str(posted.get("version", "")),
        next_url=safe_next(str(posted.get("next", "/queue")), "/queue"),
    )
    test = lifecycle.get_test(session, test_id, actor=user)
    errors: dict[str, dict[str, str]] = {}
    technician_id = _int_or_error(form.technician_id, "technician_id", "Technician", errors)
    apparatus_ids = [
        value
        for raw in form.apparatus_ids
        if (value := _int_or_error(raw, "apparatus_ids", "Apparatus", errors)) is not None
    ]
    version = _int_or_error(form.version, "version", "Version", errors)
    if version is None and "version" not in errors:
        errors["version"] = {"msg": "Version: reload the page and try again.", "kind": "missing"}
    if errors:
        context = _assign_context(
            request, session, user, test, form, errors=errors, message="Check the marked entries."
        )
        return render(
            request, "queue/assign.html", context, fragment="queue/_assign.html", status_code=422
        )
    assert version is not None
    data = TestUpdate(version=version, technician_id=technician_id, apparatus_ids=apparatus_ids)
    try:
        lifecycle.update_test(session, test_id, data, actor=user)
    except ServiceError as exc:
        session.rollback()  # nothing of a refused assignment may be committed
        test = lifecycle.get_test(session, test_id, actor=user)
        stale = None
        if isinstance(exc, StaleVersion):
            current_ids = [a.id for a in lifecycle.apparatus_of(session, test_id)]
            stale = {
                "yours": {
                    "version": version,
                    "technician": _person(session, technician_id),
                    "apparatus": _identifiers(session, apparatus_ids),
                },
                "current": {
                    "version": test.version,
                    "technician": _person(session, test.technician_id),
                    "apparatus": _identifiers(session, current_ids),
                },
            }
        if isinstance(exc, InvalidInput) and isinstance(exc.detail, list):
            for problem in exc.detail:
                errors.setdefault(
                    _error_field(problem.get("loc", [])),
                    {"msg": problem.get("msg", exc.message), "kind": problem.get("type", "")},
                )
        context = _assign_context(
            request, session, user, test, form, errors=errors, message=exc.message, stale=stale
        )
        return render(
            request,
            "queue/assign.html",
            context,
            fragment="queue/_assign.html",
            status_code=exc.status_code,
        )
    target = form.next_url
    joiner = "&" if "?" in target else "?"
    return redirect(request, f"{target}{joiner}assigned={test_id}")
