"""The queue's stored order of each test, kept in this one place on every flush.

A test's effective due date is its own, else its sample's; its urgency rank is its sample's
priority (0 urgent, 1 normal). Both are stored on the test (`queue_due_date`, `queue_rank`)
so the manager's queue sorts, counts and pages on indexes of one table instead of joining
every open test to its sample. They change only when a test is created or its due date
edited, or when its sample's due date or priority is edited: the flush hook below catches
all three, whichever service made the change. Derived columns: not audited (the audit
holds the fields they come from).
"""

from __future__ import annotations

from datetime import date
from typing import Any

import sqlalchemy as sa
from sqlalchemy.orm.attributes import flag_modified, set_committed_value
from sqlmodel import Session

from service.common import NO_DUE_DATE, Priority
from service.lab_tests.models import PermeabilityTest
from service.samples.models import Sample


def rank_of(priority: str | None) -> int:
    """The urgency rank of a priority: urgent first."""
    return 0 if priority == Priority.URGENT.value else 1


def due_of(test_due: date | None, sample_due: date | None) -> date:
    """The effective due date: the test's own, else the sample's; NO_DUE_DATE if neither."""
    return test_due or sample_due or NO_DUE_DATE


def _changed(row: Any, *names: str) -> bool:
    state = sa.inspect(row)
    return any(state.attrs[name].history.has_changes() for name in names)


def keep_queue_keys(session: Session, _context: Any, _instances: Any) -> None:
    """Before each flush: rewrite the keys of every test of a sample whose due date or
    priority changed; set the keys of new tests and of tests whose due date changed."""
    samples: dict[int, Sample] = {}
    for row in session.dirty:
        if isinstance(row, Sample) and row.id is not None and _changed(row, "due_date", "priority"):
            samples[row.id] = row
    tests = [
        row
        for row in [*session.new, *session.dirty]
        if isinstance(row, PermeabilityTest)
        and (row in session.new or _changed(row, "due_date", "sample_id"))
    ]
    pending = {id(row) for row in tests}
    table: Any = PermeabilityTest.__table__  # type: ignore[attr-defined]
    for sample_id, sample in samples.items():
        session.connection().execute(
            sa.update(table)
            .where(table.c.sample_id == sample_id)
            .values(
                queue_due_date=sa.func.coalesce(
                    table.c.due_date, sample.due_date or NO_DUE_DATE, type_=sa.Date()
                ),
                queue_rank=rank_of(sample.priority),
            )
        )
        # The tests of that sample already loaded see the new keys, without being dirtied.
        for row in list(session.identity_map.values()):
            if not isinstance(row, PermeabilityTest) or row.sample_id != sample_id:
                continue
            if id(row) not in pending:
                due = due_of(row.due_date, sample.due_date)
                set_committed_value(row, "queue_due_date", due)
                set_committed_value(row, "queue_rank", rank_of(sample.priority))
    for row in tests:
        of_test = samples.get(row.sample_id) or session.get(Sample, row.sample_id)
        row.queue_due_date = due_of(row.due_date, of_test.due_date if of_test else None)
        row.queue_rank = rank_of(of_test.priority if of_test else None)
        if row not in session.new:  # written even when equal to what is loaded: the row
            flag_modified(row, "queue_due_date")  # may have been rewritten above
            flag_modified(row, "queue_rank")


def install() -> None:
    """Keep the keys on every flush of every session (safe to call twice)."""
    if not sa.event.contains(Session, "before_flush", keep_queue_keys):
        sa.event.listen(Session, "before_flush", keep_queue_keys)
