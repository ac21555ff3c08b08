"""Chain-of-custody rules: events are appended, never edited, and sealed into the hash chain.

A disposal closes a sample's chain: it sets the sample's `disposed_at`, and nothing may be
recorded for the sample after it."""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime, timedelta

from pydantic import AwareDatetime, BaseModel, ConfigDict, Field
from sqlmodel import Session, col, select

from service.access import get_visible
from service.accounts.models import User
from service.audit import chain
from service.audit.chain import ChainReport
from service.audit.service import apply_changes
from service.common import CustodyKind
from service.custody.models import CustodyEvent
from service.db import utcnow
from service.errors import Conflict, InvalidInput, NotFound
from service.samples.models import Sample

# Kinds that put the sample somewhere: the sample's storage place follows them.
PLACING_KINDS = frozenset({CustodyKind.STORED, CustodyKind.MOVED, CustodyKind.RETURNED_TO_STORE})
# What each kind must name, beyond who recorded it and when.
REQUIRED_FIELDS: dict[CustodyKind, tuple[str, ...]] = {
    CustodyKind.STORED: ("place",),
    CustodyKind.MOVED: ("place",),
    CustodyKind.RETURNED_TO_STORE: ("place",),
    CustodyKind.HANDED_TO_TECHNICIAN: ("to_holder",),
    CustodyKind.SHIPPED: ("to_holder",),
}
CLOCK_SLACK = timedelta(minutes=10)


class CustodyEventIn(BaseModel):
    """One thing that happened to a sample; who recorded it is the signed-in user."""

    model_config = ConfigDict(extra="forbid", str_strip_whitespace=True)

    kind: CustodyKind
    occurred_at: AwareDatetime | None = Field(
        default=None, description="when it happened (default: now); with a timezone"
    )
    from_holder: str = Field(default="", max_length=120, description="who gave it")
    to_holder: str = Field(default="", max_length=120, description="who took it")
    place: str = Field(default="", max_length=120, description="where it is now")
    condition: str = Field(default="", max_length=300)
    note: str = Field(default="", max_length=1000)


class CustodyEventRead(BaseModel):
    model_config = ConfigDict(from_attributes=True)

    id: int
    seq: int
    sample_id: int
    kind: str
    from_holder: str
    to_holder: str
    place: str
    condition: str
    note: str
    occurred_at: datetime
    recorded_by_id: int | None
    prev_hash: str
    row_hash: str


class ChainReportRead(BaseModel):
    """The verdict on a log's hash chains (one per entity) against the signed checkpoints:
    every link holds, or the first row that cannot be trusted."""

    chain: str = Field(description="the log: custody or audit")
    rows: int
    ok: bool
    first_broken_seq: int | None = Field(description="within first_broken_chain")
    first_broken_chain: str | None = Field(description="the entity, e.g. sample:17")
    problem: str
    chains: int
    unanchored_rows: int = Field(description="rows no signed checkpoint covers yet")
    checkpoint: int | None = Field(description="the latest signed checkpoint")
    broken_chains: list[str]


def refuse_if_disposed(sample: Sample) -> None:
    """Nothing happens to a sample after its disposal (409)."""
    if sample.disposed_at is not None:
        raise Conflict(
            f"sample {sample.lab_id} was disposed on {sample.disposed_at:%Y-%m-%d %H:%M} UTC; "
            "nothing can be recorded for it after disposal",
            detail={"sample_id": sample.id, "disposed_at": sample.disposed_at.isoformat()},
        )


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
    """Append one custody event to the chain (the workflow's own entry point).

    Refuses (409) a sample already disposed; a disposal sets `disposed_at`; storing or
    moving the sample updates its storage place (audited)."""
    sample = session.get(Sample, sample_id)
    if sample is None:
        raise NotFound(f"sample {sample_id} not found")
    refuse_if_disposed(sample)
    occurred = when or utcnow()
    event = CustodyEvent(
        seq=0,
        sample_id=sample_id,
        kind=kind,
        from_holder=from_holder,
        to_holder=to_holder,
        place=place,
        condition=condition,
        note=note,
        occurred_at=occurred,
        recorded_by_id=actor_id,
        prev_hash="",
        row_hash="",
    )
    chain.append(session, "custody", chain.custody_key(sample_id), event)
    changes: dict[str, object] = {}
    if kind == CustodyKind.DISPOSED:
        changes["disposed_at"] = occurred
    elif kind in PLACING_KINDS and place:
        changes["storage_place"] = place[:60]
    if changes:
        apply_changes(session, sample, changes, actor_id=actor_id)
    session.flush()  # the chain no longer flushes each append; callers want the event's id
    return event


def add_custody_event(
    session: Session, sample_id: int, data: CustodyEventIn, *, actor: User
) -> CustodyEvent:
    """Record what happened to a sample, after checking the kind's required fields and time."""
    sample = get_visible(session, Sample, sample_id, actor, "sample")
    refuse_if_disposed(sample)
    problems = [
        {
            "loc": ["body", name],
            "msg": f"{name}: a {data.kind.value.replace('_', ' ')} event needs it; "
            f"accepted: {'where the sample is now' if name == 'place' else 'who took it'}",
            "type": "missing",
        }
        for name in REQUIRED_FIELDS.get(data.kind, ())
        if not getattr(data, name)
    ]
    now = utcnow()
    occurred = data.occurred_at or now
    if occurred > now + CLOCK_SLACK:
        problems.append(
            {
                "loc": ["body", "occurred_at"],
                "msg": f"occurred_at: {occurred.isoformat()} is in the future; "
                "accepted: a time not later than now",
                "type": "future_time",
            }
        )
    elif occurred < sample.received_at:
        problems.append(
            {
                "loc": ["body", "occurred_at"],
                "msg": f"occurred_at: {occurred.isoformat()} is before the sample was received "
                f"({sample.received_at.isoformat()}); accepted: a time after receipt",
                "type": "before_receipt",
            }
        )
    if problems:
        raise InvalidInput("custody event refused", detail=problems)
    assert sample.id is not None
    return record_custody(
        session,
        sample_id=sample.id,
        kind=data.kind,
        actor_id=actor.id,
        from_holder=data.from_holder,
        to_holder=data.to_holder,
        place=data.place,
        condition=data.condition,
        note=data.note,
        when=occurred,
    )


def custody_timeline(session: Session, sample_id: int) -> Sequence[CustodyEvent]:
    return session.exec(
        select(CustodyEvent)
        .where(CustodyEvent.sample_id == sample_id)
        .order_by(col(CustodyEvent.seq))
    ).all()


def sample_timeline(session: Session, sample_id: int, *, user: User) -> Sequence[CustodyEvent]:
    """A sample's custody events in the order they were recorded (404 if not visible)."""
    sample = get_visible(session, Sample, sample_id, user, "sample")
    assert sample.id is not None
    return custody_timeline(session, sample.id)


def verify_chain(session: Session, name: chain.LogName) -> ChainReportRead:
    """Walk every chain of the custody or audit log against the signed checkpoints; the first
    broken or missing row, if any."""
    report: ChainReport = chain.verify(session, name)
    return ChainReportRead(**report.as_dict())
