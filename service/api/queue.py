"""GET /api/v1/queue: the manager's view of the lab's work."""

from __future__ import annotations

from datetime import date
from typing import Annotated

from fastapi import APIRouter, Query

from service.api.paging import Limit, Offset
from service.common import TestState
from service.deps import LabStaff, SessionDep
from service.paging import DEFAULT_LIMIT
from service.queue import QueueFilters, QueueView, queue_view

router = APIRouter(prefix="/api/v1/queue", tags=["queue"])


@router.get("", response_model=QueueView)
def read_queue(
    session: SessionDep,
    _user: LabStaff,
    state: Annotated[
        list[TestState] | None, Query(description="repeat for several; default: open tests")
    ] = None,
    client_id: int | None = None,
    project_id: int | None = None,
    technician_id: int | None = None,
    due_before: Annotated[date | None, Query(description="due strictly before this day")] = None,
    overdue: bool | None = None,
    limit: Limit = DEFAULT_LIMIT,
    offset: Offset = 0,
    after: Annotated[
        str | None,
        Query(
            max_length=200,
            description="the `next_after` of the page before (keyset paging, the same cost on "
            "every page; `offset` is then not applied)",
        ),
    ] = None,
) -> QueueView:
    """Counts by state, overdue count, open tests per technician, and the page of tests
    sorted by due date (receipt plus the project's turnaround, or the test's own)."""
    filters = QueueFilters(
        states=tuple(state or ()),
        client_id=client_id,
        project_id=project_id,
        technician_id=technician_id,
        due_before=due_before,
        overdue=overdue,
    )
    return queue_view(session, filters, limit=limit, offset=offset, after=after)
