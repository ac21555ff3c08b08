"""The lab's work queue for managers.

One query per figure (counts by state, technician load, the page of tests and its total),
whatever the number of samples: no per-row look-ups."""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from datetime import date
from typing import Any

import sqlalchemy as sa
from pydantic import BaseModel, Field
from sqlmodel import Session, col, func, select

from service.accounts.models import Organisation, User
from service.common import Priority, TestState
from service.db import utcnow
from service.lab_tests.models import PermeabilityTest
from service.paging import Page, count_of
from service.projects.models import Project
from service.samples.models import Sample

# Tests still owed to a client: these count towards load and can be overdue.
OPEN_STATES = (TestState.PLANNED, TestState.RUNNING, TestState.SUBMITTED, TestState.APPROVED)


# --- the queue -----------------------------------------------------------------------------


@dataclass(frozen=True)
class QueueFilters:
    states: tuple[TestState, ...] = ()
    client_id: int | None = None
    project_id: int | None = None
    technician_id: int | None = None
    due_before: date | None = None
    overdue: bool | None = None
    today: date = field(default_factory=lambda: utcnow().date())


class QueueTest(BaseModel):
    """One test in the queue, with what a manager needs to plan it."""

    test_id: int
    state: str
    method: str
    sample_id: int
    sample_lab_id: str
    client_sample_id: str
    client_id: int
    client_name: str
    project_id: int
    project_number: str
    technician_id: int | None
    technician_name: str | None
    due_date: date | None
    overdue: bool
    priority: str


class TechnicianLoad(BaseModel):
    """Open tests (planned to approved) held by one technician; id None = not yet assigned."""

    technician_id: int | None
    technician_name: str | None
    planned: int = 0
    running: int = 0
    submitted: int = 0
    approved: int = 0
    total: int = 0
    overdue: int = 0


class QueueView(BaseModel):
    today: date
    counts: dict[str, int] = Field(description="tests per state (the state filter not applied)")
    overdue: int = Field(description="open tests past their due date")
    load: list[TechnicianLoad]
    tests: Page[QueueTest]


def _due_date() -> sa.ColumnElement[Any]:
    # A test may carry its own due date; otherwise the sample's (receipt + turnaround).
    return func.coalesce(col(PermeabilityTest.due_date), col(Sample.due_date), type_=sa.Date())


def _overdue(today: date) -> sa.ColumnElement[bool]:
    return sa.and_(
        col(PermeabilityTest.state).in_([s.value for s in OPEN_STATES]),
        _due_date() < today,
    )


def due_dates(
    session: Session, test_ids: list[int], today: date
) -> dict[int, tuple[date | None, bool]]:
    """Each test's due date and whether it is overdue, by the queue's own rule (for pages
    that list tests outside the queue, such as the technician's home)."""
    if not test_ids:
        return {}
    rows = session.execute(
        sa.select(col(PermeabilityTest.id), _due_date(), _overdue(today))
        .select_from(PermeabilityTest)
        .join(Sample, col(Sample.id) == col(PermeabilityTest.sample_id))
        .where(col(PermeabilityTest.id).in_(test_ids))
    ).all()
    return {test_id: (due, bool(late)) for test_id, due, late in rows}


def _filtered(
    query: Any, filters: QueueFilters, *, with_state: bool = True, join_sample: bool = False
) -> Any:
    """Apply the filters; `sample` is joined when asked or when a filter needs it (counting
    by state alone then reads the test table's state index)."""
    needs_sample = (
        join_sample
        or filters.client_id is not None
        or filters.project_id is not None
        or filters.due_before is not None
        or filters.overdue is not None
    )
    if needs_sample:
        query = query.join(Sample, col(Sample.id) == col(PermeabilityTest.sample_id))
    if filters.client_id is not None:
        query = query.join(Project, col(Project.id) == col(Sample.project_id)).where(
            col(Project.client_id) == filters.client_id
        )
    if with_state and filters.states:
        query = query.where(col(PermeabilityTest.state).in_([s.value for s in filters.states]))
    if filters.project_id is not None:
        query = query.where(col(Sample.project_id) == filters.project_id)
    if filters.technician_id is not None:
        query = query.where(col(PermeabilityTest.technician_id) == filters.technician_id)
    if filters.due_before is not None:
        query = query.where(_due_date() < filters.due_before)
    if filters.overdue is not None:
        overdue = _overdue(filters.today)
        query = query.where(overdue if filters.overdue else sa.not_(overdue))
    return query


def queue_counts(session: Session, filters: QueueFilters) -> dict[str, int]:
    """How many tests stand in each state (every state listed, zeros included); the state
    filter itself is not applied, so the counts show the whole picture."""
    query = _filtered(
        select(col(PermeabilityTest.state), func.count()).select_from(PermeabilityTest),
        filters,
        with_state=False,
    ).group_by(col(PermeabilityTest.state))
    counts = {state.value: 0 for state in TestState}
    for state, number in session.exec(query).all():
        counts[state] = int(number)
    return counts


def technician_load(session: Session, filters: QueueFilters) -> list[TechnicianLoad]:
    """Open tests per technician by state, most loaded first; unassigned tests last."""
    overdue = func.sum(sa.case((_overdue(filters.today), 1), else_=0))
    grouped = (
        _filtered(
            select(
                col(PermeabilityTest.technician_id),
                col(PermeabilityTest.state),
                func.count(),
                overdue,
            ).select_from(PermeabilityTest),
            filters,
            with_state=False,
            join_sample=True,
        )
        .where(col(PermeabilityTest.state).in_([s.value for s in OPEN_STATES]))
        .group_by(col(PermeabilityTest.technician_id), col(PermeabilityTest.state))
    )
    rows = session.exec(grouped).all()
    ids = {row[0] for row in rows if row[0] is not None}
    names = dict(
        session.exec(select(User.id, User.full_name).where(col(User.id).in_(ids))).all()
        if ids
        else []
    )
    by_technician: dict[int | None, TechnicianLoad] = {}
    for technician_id, state, number, late in rows:
        load = by_technician.setdefault(
            technician_id,
            TechnicianLoad(technician_id=technician_id, technician_name=names.get(technician_id)),
        )
        setattr(load, state, getattr(load, state) + int(number))
        load.total += int(number)
        load.overdue += int(late or 0)
    return sorted(
        by_technician.values(),
        key=lambda load: (load.technician_id is None, -load.total, load.technician_name or ""),
    )


SORTS = ("due", "priority", "state")


def _order(sort: str) -> list[Any]:
    """The ORDER BY of a sort: earliest due first (urgent first on the same day); or urgent
    first, then by due date; or by state (lifecycle order), then by due date."""
    urgent_first = sa.case((col(Sample.priority) == Priority.URGENT.value, 0), else_=1)
    by_due = [_due_date().is_(None), _due_date()]
    if sort == "priority":
        return [urgent_first, *by_due, col(PermeabilityTest.id)]
    if sort == "state":
        ranks = {state.value: rank for rank, state in enumerate(TestState)}
        by_state = sa.case(ranks, value=col(PermeabilityTest.state), else_=len(ranks))
        return [by_state, *by_due, col(PermeabilityTest.id)]
    return [*by_due, urgent_first, col(PermeabilityTest.id)]


def queue_tests(
    session: Session, filters: QueueFilters, *, limit: int, offset: int, sort: str = "due"
) -> Page[QueueTest]:
    """The tests matching `filters` in the order of `sort` (one of SORTS: "due", the default,
    earliest due first with urgent first on the same day; "priority"; "state").

    Without a state filter the queue shows open tests only (planned to approved). The page
    is chosen on the test and sample tables alone; names are fetched for its rows only."""
    if sort not in SORTS:
        raise ValueError(f"sort must be one of {', '.join(SORTS)}")
    if not filters.states:
        filters = replace(filters, states=OPEN_STATES)
    total = count_of(session, _filtered(select(PermeabilityTest.id), filters))
    page_ids: list[int] = list(
        session.exec(
            _filtered(select(PermeabilityTest.id), filters, join_sample=True)
            .order_by(*_order(sort))
            .limit(limit)
            .offset(offset)
        ).all()
    )
    if not page_ids:
        return Page[QueueTest](items=[], total=total, limit=limit, offset=offset)
    # Fourteen columns: beyond sqlmodel's typed select(), so a plain SQLAlchemy select.
    columns: tuple[Any, ...] = (
        col(PermeabilityTest.id),
        col(PermeabilityTest.state),
        col(PermeabilityTest.method),
        col(Sample.id),
        col(Sample.lab_id),
        col(Sample.client_sample_id),
        col(Sample.priority),
        col(Project.id),
        col(Project.number),
        col(Organisation.id),
        col(Organisation.name),
        col(PermeabilityTest.technician_id),
        col(User.full_name),
        _due_date(),
    )
    details = session.execute(
        sa.select(*columns)
        .select_from(PermeabilityTest)
        .join(Sample, col(Sample.id) == col(PermeabilityTest.sample_id))
        .join(Project, col(Project.id) == col(Sample.project_id))
        .join(Organisation, col(Organisation.id) == col(Project.client_id))
        .outerjoin(User, col(User.id) == col(PermeabilityTest.technician_id))
        .where(col(PermeabilityTest.id).in_(page_ids))
    ).all()
    open_states = {s.value for s in OPEN_STATES}
    by_id: dict[int, QueueTest] = {}
    for row in details:
        (test_id, state, method, sample_id, lab_id, client_sample_id, priority) = row[:7]
        (project_id, number, client_id, client_name, technician_id, technician_name, due_on) = row[
            7:
        ]
        by_id[test_id] = QueueTest(
            test_id=test_id,
            state=state,
            method=method,
            sample_id=sample_id,
            sample_lab_id=lab_id,
            client_sample_id=client_sample_id,
            client_id=client_id,
            client_name=client_name,
            project_id=project_id,
            project_number=number,
            technician_id=technician_id,
            technician_name=technician_name,
            due_date=due_on,
            overdue=bool(due_on is not None and due_on < filters.today) and state in open_states,
            priority=priority,
        )
    items = [by_id[test_id] for test_id in page_ids]
    return Page[QueueTest](items=items, total=total, limit=limit, offset=offset)


def queue_view(
    session: Session, filters: QueueFilters, *, limit: int, offset: int, sort: str = "due"
) -> QueueView:
    """Everything the manager's queue shows, in six small queries whatever the data size."""
    load = technician_load(session, filters)
    return QueueView(
        today=filters.today,
        counts=queue_counts(session, filters),
        overdue=sum(row.overdue for row in load),
        load=load,
        tests=queue_tests(session, filters, limit=limit, offset=offset, sort=sort),
    )
