"""Chain-of-custody rules: events are appended, never edited, and sealed into the hash chain."""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime

from sqlmodel import Session, col, select

from service.audit import chain
from service.common import CustodyKind
from service.custody.models import CustodyEvent
from service.db import utcnow


def record_custody(
    session: Session,
    *,
    sample_id: int,
    kind: CustodyKind,
    actor_id: int | None,
    from_holder: str = "",
    to_holder: str = "",
    place: str = "",
    condition: str = "",
    note: str = "",
    when: datetime | None = None,
) -> CustodyEvent:
    event = CustodyEvent(
        seq=0,
        sample_id=sample_id,
        kind=kind,
        from_holder=from_holder,
        to_holder=to_holder,
        place=place,
        condition=condition,
        note=note,
        occurred_at=when or utcnow(),
        recorded_by_id=actor_id,
        prev_hash="",
        row_hash="",
    )
    chain.append(session, "custody", event)
    return event


def custody_timeline(session: Session, sample_id: int) -> Sequence[CustodyEvent]:
    return session.exec(
        select(CustodyEvent)
        .where(CustodyEvent.sample_id == sample_id)
        .order_by(col(CustodyEvent.seq))
    ).all()
