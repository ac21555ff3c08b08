"""The lab's work queue for managers.

One query per figure (counts by state, technician load, the page of tests and its total),
whatever the number of samples: no per-row look-ups. The order reads the keys stored on
each test (`queue_due_date`, `queue_rank`: service/queue_keys.py) through the indexes of
one table; the lab-wide figures (counts, load, the filters' lists) are kept a few seconds
(`cached`), and forgotten at once when this process writes a test, sample, project, user
or organisation. Pages go by offset (the page links) or by keyset (`after`, the API's
`next_after`), which costs the same on the thousandth page as on the first."""

from __future__ import annotations

import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from datetime import date
from typing import Any, TypeVar

import sqlalchemy as sa
from pydantic import BaseModel, Field
from sqlmodel import Session, col, func, select

from service.accounts.models import Organisation, User
from service.common import NO_DUE_DATE, OPEN_STATES, TestState
from service.db import utcnow
from service.lab_tests.models import PermeabilityTest
from service.paging import KeysetPage, count_of, decode_after, encode_after, refused_position
from service.projects.models import Project
from service.samples.models import Sample

__all__ = ["OPEN_STATES"]

T = TypeVar("T")

# --- the lab-wide figures, kept briefly ------------------------------------------------------

CACHE_SECONDS = 3.0
_CACHE_SIZE = 256
_cache: dict[Any, tuple[float, Any]] = {}
_cache_lock = threading.Lock()
# What the cached figures are made of: a flush writing one of these forgets them all.
_SOURCES = (PermeabilityTest, Sample, Project, User, Organisation)


def cached(key: Any, compute: Callable[[], T]) -> T:
    """`compute()`, or its value from less than CACHE_SECONDS ago under the same key.
    Another process's writes show within CACHE_SECONDS; this process's at once."""
    now = time.monotonic()
    hit = _cache.get(key)
    if hit is not None and now - hit[0] < CACHE_SECONDS:
        return hit[1]  # type: ignore[no-any-return]
    value = compute()
    with _cache_lock:
        if len(_cache) >= _CACHE_SIZE:
            _cache.clear()
        _cache[key] = (now, value)
    return value


def forget() -> None:
    """Drop every cached figure."""
    with _cache_lock:
        _cache.clear()


def _forget_on_write(session: Session, _context: Any) -> None:
    if any(isinstance(row, _SOURCES) for row in (*session.new, *session.dirty, *session.deleted)):
        forget()


def install() -> None:
    """Forget the cached figures on every flush that writes what they are made of (the
    flush, not the commit: a reader in the same transaction sees its own writes)."""
    if not sa.event.contains(Session, "after_flush", _forget_on_write):
        sa.event.listen(Session, "after_flush", _forget_on_write)


install()


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
    tests: KeysetPage[QueueTest]


def _open() -> sa.ColumnElement[bool]:
    """The open-test condition with constants, as the partial indexes are declared."""
    return col(PermeabilityTest.state).in_([sa.literal_column(f"'{s.value}'") for s in OPEN_STATES])


def _in_states(states: tuple[TestState, ...]) -> sa.ColumnElement[bool]:
    if set(states) == set(OPEN_STATES):
        return _open()
    return col(PermeabilityTest.state).in_([s.value for s in states])


def _overdue(today: date) -> sa.ColumnElement[bool]:
    return sa.and_(_open(), col(PermeabilityTest.queue_due_date) < today)


def _filtered(
    query: Any, filters: QueueFilters, *, with_state: bool = True, join_sample: bool = False
) -> Any:
    """Apply the filters; `sample` is joined only when asked or for a client or project
    filter (the due date and the rank are the test's own columns)."""
    needs_sample = join_sample or filters.client_id is not None or filters.project_id is not None
    if needs_sample:
        query = query.join(Sample, col(Sample.id) == col(PermeabilityTest.sample_id))
    if filters.client_id is not None:
        query = query.join(Project, col(Project.id) == col(Sample.project_id)).where(
            col(Project.client_id) == filters.client_id
        )
    if with_state and filters.states:
        query = query.where(_in_states(filters.states))
    if filters.project_id is not None:
        query = query.where(col(Sample.project_id) == filters.project_id)
    if filters.technician_id is not None:
        query = query.where(col(PermeabilityTest.technician_id) == filters.technician_id)
    if filters.due_before is not None:
        query = query.where(col(PermeabilityTest.queue_due_date) < filters.due_before)
    if filters.overdue is not None:
        overdue = _overdue(filters.today)
        query = query.where(overdue if filters.overdue else sa.not_(overdue))
    return query


def queue_counts(session: Session, filters: QueueFilters) -> dict[str, int]:
    """How many tests stand in each state (every state listed, zeros included); the state
    filter itself is not applied, so the counts show the whole picture. Read from the
    (state, technician, due date) index; kept a few seconds."""

    def compute() -> dict[str, int]:
        query = _filtered(
            select(col(PermeabilityTest.state), func.count()).select_from(PermeabilityTest),
            filters,
            with_state=False,
        ).group_by(col(PermeabilityTest.state))
        counts = {state.value: 0 for state in TestState}
        for state, number in session.exec(query).all():
            counts[state] = int(number)
        return counts

    return dict(cached(("counts", replace(filters, states=())), compute))


def technician_load(session: Session, filters: QueueFilters) -> list[TechnicianLoad]:
    """Open tests per technician by state, most loaded first; unassigned tests last. One
    grouped query (names joined in); kept a few seconds."""

    def compute() -> list[TechnicianLoad]:
        overdue = func.sum(
            sa.case((col(PermeabilityTest.queue_due_date) < filters.today, 1), else_=0)
        )
        grouped = (
            _filtered(
                sa.select(
                    col(PermeabilityTest.technician_id),
                    col(User.full_name),
                    col(PermeabilityTest.state),
                    func.count(),
                    overdue,
                ).select_from(PermeabilityTest),
                filters,
                with_state=False,
            )
            .outerjoin(User, col(User.id) == col(PermeabilityTest.technician_id))
            .where(_open())
            .group_by(
                col(PermeabilityTest.technician_id),
                col(User.full_name),
                col(PermeabilityTest.state),
            )
        )
        by_technician: dict[int | None, TechnicianLoad] = {}
        for technician_id, name, state, number, late in session.execute(grouped).all():
            load = by_technician.setdefault(
                technician_id, TechnicianLoad(technician_id=technician_id, technician_name=name)
            )
            setattr(load, state, getattr(load, state) + int(number))
            load.total += int(number)
            load.overdue += int(late or 0)
        return sorted(
            by_technician.values(),
            key=lambda load: (load.technician_id is None, -load.total, load.technician_name or ""),
        )

    rows = cached(("load", replace(filters, states=())), compute)
    return [row.model_copy() for row in rows]


SORTS = ("due", "priority", "state")
_STATE_RANKS = {state.value: rank for rank, state in enumerate(TestState)}


def _order(sort: str) -> list[Any]:
    """The ORDER BY of a sort (its keyset): earliest due first (urgent first on the same
    day); or urgent first, then by due date; or by state (lifecycle order), then by due
    date. The first two are the partial indexes on open tests."""
    due, rank, test_id = (
        col(PermeabilityTest.queue_due_date),
        col(PermeabilityTest.queue_rank),
        col(PermeabilityTest.id),
    )
    if sort == "priority":
        return [rank, due, test_id]
    if sort == "state":
        by_state = sa.case(_STATE_RANKS, value=col(PermeabilityTest.state), else_=len(_STATE_RANKS))
        return [by_state, due, rank, test_id]
    return [due, rank, test_id]


def _key_of(sort: str, item: QueueTest, rank: int, due: date) -> list[Any]:
    """The keyset values of one row, in the order of `_order(sort)`."""
    if sort == "priority":
        return [rank, due.isoformat(), item.test_id]
    if sort == "state":
        return [
            _STATE_RANKS.get(item.state, len(_STATE_RANKS)),
            due.isoformat(),
            rank,
            item.test_id,
        ]
    return [due.isoformat(), rank, item.test_id]


def _after(sort: str, after: str) -> sa.ColumnElement[bool]:
    """Rows strictly after the keyset position `after` (its dates sent as ISO text)."""
    values = decode_after(after, len(_order(sort)))
    due_at = 0 if sort == "due" else 1
    try:
        due = date.fromisoformat(values[due_at])
    except (TypeError, ValueError):
        raise refused_position(after) from None
    if any(isinstance(v, str) for i, v in enumerate(values) if i != due_at):
        raise refused_position(after)
    values[due_at] = due
    return sa.tuple_(*_order(sort)) > sa.tuple_(*values)


def queue_tests(
    session: Session,
    filters: QueueFilters,
    *,
    limit: int,
    offset: int = 0,
    sort: str = "due",
    after: str | None = None,
) -> KeysetPage[QueueTest]:
    """The tests matching `filters` in the order of `sort` (one of SORTS: "due", the default,
    earliest due first with urgent first on the same day; "priority"; "state").

    Without a state filter the queue shows open tests only (planned to approved). The page
    starts at `offset`, or just after the row `after` names (a page's `next_after`: keyset
    paging; `offset` is then not applied). It is chosen on the test table alone; the
    details are fetched for its rows only."""
    if sort not in SORTS:
        raise ValueError(f"sort must be one of {', '.join(SORTS)}")
    if not filters.states:
        filters = replace(filters, states=OPEN_STATES)
    total = count_of(session, _filtered(select(PermeabilityTest.id), filters))
    chosen = _filtered(select(PermeabilityTest.id), filters).order_by(*_order(sort)).limit(limit)
    if after is not None:
        chosen = chosen.where(_after(sort, after))
    elif offset:
        chosen = chosen.offset(offset)
    page_ids: list[int] = list(session.exec(chosen).all())
    if not page_ids:
        return KeysetPage[QueueTest](items=[], total=total, limit=limit, offset=offset)
    # Sixteen columns: beyond sqlmodel's typed select(), so a plain SQLAlchemy select.
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
        col(PermeabilityTest.queue_due_date),
        col(PermeabilityTest.queue_rank),
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
    keys: dict[int, tuple[int, date]] = {}
    for row in details:
        (test_id, state, method, sample_id, lab_id, client_sample_id, priority) = row[:7]
        (project_id, number, client_id, client_name, technician_id, technician_name) = row[7:13]
        stored_due, rank = row[13:]
        due_on = None if stored_due == NO_DUE_DATE else stored_due
        keys[test_id] = (rank, stored_due)
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
    last = items[-1]
    next_after = (
        encode_after(_key_of(sort, last, *keys[last.test_id])) if len(items) == limit else None
    )
    return KeysetPage[QueueTest](
        items=items, total=total, limit=limit, offset=offset, next_after=next_after
    )


def queue_view(
    session: Session,
    filters: QueueFilters,
    *,
    limit: int,
    offset: int = 0,
    sort: str = "due",
    after: str | None = None,
) -> QueueView:
    """Everything the manager's queue shows, in four small queries whatever the data size
    (the counts and the load kept a few seconds)."""
    load = technician_load(session, filters)
    return QueueView(
        today=filters.today,
        counts=queue_counts(session, filters),
        overdue=sum(row.overdue for row in load),
        load=load,
        tests=queue_tests(session, filters, limit=limit, offset=offset, sort=sort, after=after),
    )
