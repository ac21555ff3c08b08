"""Sample reception and the sample register: batch receipt, look-up, edits, disposal list.

A batch is received in one transaction: every row is checked first and any refusal names
its row and field, so either every sample of the batch is stored or none is."""

from __future__ import annotations

from datetime import date, datetime, timedelta
from typing import Any

import sqlalchemy as sa
from pydantic import AwareDatetime, BaseModel, ConfigDict, Field
from sqlmodel import Session, col, func, select

from service.access import get_visible, is_client
from service.accounts.models import User
from service.audit import chain
from service.audit.service import apply_changes, record_created
from service.certificates.models import Certificate, CertificateTest
from service.common import CertificateState, CustodyKind, Priority, Role, SampleType
from service.custody.service import record_custody, refuse_if_disposed
from service.db import utcnow
from service.errors import FieldProblem, InvalidInput, NotFound, invalid, require_version
from service.idempotency import service as idempotency
from service.lab_tests.models import PermeabilityTest
from service.paging import Page, paginate
from service.projects.models import Location, Project
from service.projects.service import get_location, get_project
from service.quantities import LENGTH, typed
from service.queue import OPEN_STATES
from service.samples.ids import next_lab_ids
from service.samples.models import Sample
from service.text import Identifier

MAX_BATCH = 500
# Received times may run a little ahead of the server clock (a tablet's clock), not more.
CLOCK_SLACK = timedelta(minutes=10)

# --- schemas -------------------------------------------------------------------------------


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", str_strip_whitespace=True)


class SampleIn(_Strict):
    """One row of a reception batch: what is written on the tube or bag and what was seen."""

    client_sample_id: Identifier = Field(
        default="", max_length=60, description="the client's own ID"
    )
    location_id: int | None = Field(default=None, description="a location of the project")
    location: Identifier | None = Field(
        default=None, max_length=60, description="or the location's name, e.g. 'BH-03'"
    )
    depth_top: str | None = Field(
        default=None, max_length=40, description="with its unit, e.g. '1.50 m' or '5 ft'"
    )
    depth_bottom: str | None = Field(
        default=None, max_length=40, description="with its unit; not above depth_top"
    )
    sample_type: SampleType
    description: str = Field(default="", max_length=500)
    condition: str = Field(default="", max_length=300, description="condition on arrival")
    seal_intact: bool | None = None
    storage_place: str = Field(default="", max_length=60, description="e.g. 'Cold room B / 4'")
    priority: Priority = Priority.NORMAL


class SampleBatch(_Strict):
    """Samples arriving together against one project (one cooler, one delivery note)."""

    received_at: AwareDatetime | None = Field(
        default=None, description="when they arrived (default: now); with a timezone"
    )
    delivered_by: str = Field(default="", max_length=120, description="courier or client's person")
    samples: list[SampleIn] = Field(min_length=1, max_length=MAX_BATCH)


class SampleUpdate(_Strict):
    """Corrections to a sample's record; storage moves are custody events, not edits."""

    version: int = Field(ge=1, description="the version you read; a stale one answers 409")
    client_sample_id: Identifier | None = Field(default=None, max_length=60)
    location_id: int | None = None
    depth_top: str | None = Field(default=None, max_length=40, description="'' removes it")
    depth_bottom: str | None = Field(default=None, max_length=40, description="'' removes it")
    sample_type: SampleType | None = None
    description: str | None = Field(default=None, max_length=500)
    condition: str | None = Field(default=None, max_length=300)
    seal_intact: bool | None = None
    priority: Priority | None = None


class SampleRead(BaseModel):
    model_config = ConfigDict(from_attributes=True)

    id: int
    lab_id: str
    project_id: int
    location_id: int | None
    client_sample_id: str
    depth_top_text: str
    depth_top_m: float | None
    depth_bottom_text: str
    depth_bottom_m: float | None
    sample_type: str
    description: str
    condition: str
    seal_intact: bool | None
    storage_place: str
    priority: str
    received_at: datetime
    received_by_id: int | None
    due_date: date | None
    disposed_at: datetime | None
    version: int


class ReceivedBatch(BaseModel):
    project_id: int
    received_at: datetime
    samples: list[SampleRead]


class DisposalCandidate(BaseModel):
    """A sample whose retention after its latest certificate has run out."""

    sample: SampleRead
    last_certificate_at: datetime
    retention_days: int
    disposal_due_on: date


# --- reception -----------------------------------------------------------------------------


def _locations_of(session: Session, project_id: int) -> list[Location]:
    return list(session.exec(select(Location).where(Location.project_id == project_id)).all())


def _resolve_location(
    row: SampleIn | SampleUpdate,
    locations: list[Location],
    loc: tuple[str | int, ...],
    problems: list[FieldProblem],
) -> int | None:
    by_id = {location.id: location for location in locations}
    by_name = {location.name.casefold(): location for location in locations}
    names = ", ".join(sorted(location.name for location in locations)) or "none yet"
    chosen: Location | None = None
    if row.location_id is not None:
        chosen = by_id.get(row.location_id)
        if chosen is None:
            problems.append(
                FieldProblem(
                    (*loc, "location_id"),
                    f"no location {row.location_id} in this project",
                    row.location_id,
                    f"the id of one of its locations ({names})",
                    "unknown_location",
                )
            )
            return None
    name = getattr(row, "location", None)
    if name:
        named = by_name.get(name.casefold())
        if named is None:
            problems.append(
                FieldProblem(
                    (*loc, "location"),
                    f"no location named '{name}' in this project",
                    name,
                    names,
                    "unknown_location",
                )
            )
            return None
        if chosen is not None and chosen.id != named.id:
            problems.append(
                FieldProblem(
                    (*loc, "location"),
                    f"'{name}' is not location {row.location_id}",
                    name,
                    "a location name or a location id, not two different ones",
                    "location_mismatch",
                )
            )
            return None
        chosen = named
    return chosen.id if chosen else None


def _depths(
    top_text: str | None,
    bottom_text: str | None,
    loc: tuple[str | int, ...],
    problems: list[FieldProblem],
) -> tuple[tuple[str, float] | None, tuple[str, float] | None]:
    parsed: dict[str, tuple[str, float] | None] = {}
    for name, text in (("depth_top", top_text), ("depth_bottom", bottom_text)):
        parsed[name] = None
        if text:
            try:
                parsed[name] = typed(text, LENGTH, (*loc, name), non_negative=True)
            except InvalidInput as exc:
                problems.extend(exc.problems)
    top, bottom = parsed["depth_top"], parsed["depth_bottom"]
    if top and bottom and bottom[1] < top[1]:
        problems.append(
            FieldProblem(
                (*loc, "depth_bottom"),
                f"is above the top depth ({top[0]})",
                bottom[0],
                "a depth at or below the top",
                "depth_order",
            )
        )
    return top, bottom


def _received_time(batch: SampleBatch) -> datetime:
    now = utcnow()
    received = batch.received_at or now
    if received > now + CLOCK_SLACK:
        raise invalid(
            ("received_at",),
            "is in the future",
            value=received.isoformat(),
            accepted="the time the samples arrived, not later than now",
            kind="future_time",
        )
    return received


def receive_samples(
    session: Session, project_id: int, batch: SampleBatch, *, actor: User
) -> list[Sample]:
    """Receive a batch against a project: lab IDs, due dates, 'received' (and 'stored') custody.

    Every row is validated before anything is written; refusals name row index and field."""
    project = get_project(session, project_id, user=actor)
    assert project.id is not None
    assert actor.id is not None
    received = _received_time(batch)
    locations = _locations_of(session, project.id)
    problems: list[FieldProblem] = []
    prepared: list[tuple[SampleIn, int | None, Any, Any]] = []
    seen_ids: dict[str, int] = {}
    for index, row in enumerate(batch.samples):
        loc = ("samples", index)
        location_id = _resolve_location(row, locations, loc, problems)
        top, bottom = _depths(row.depth_top, row.depth_bottom, loc, problems)
        if row.client_sample_id:
            key = row.client_sample_id.casefold()
            if key in seen_ids:
                problems.append(
                    FieldProblem(
                        (*loc, "client_sample_id"),
                        "appears more than once in this batch",
                        row.client_sample_id,
                        "each client sample ID once per batch",
                        "duplicate",
                    )
                )
            seen_ids.setdefault(key, index)
        prepared.append((row, location_id, top, bottom))
    if problems:
        raise InvalidInput(f"{len(problems)} problem(s) in the batch", problems=problems)

    _serialise_receptions(session)
    lab_ids = next_lab_ids(session, len(prepared), when=received)
    due = received.date() + timedelta(days=project.turnaround_days)
    samples: list[Sample] = []
    for lab_id, (row, location_id, top, bottom) in zip(lab_ids, prepared, strict=True):
        sample = Sample(
            lab_id=lab_id,
            project_id=project.id,
            location_id=location_id,
            client_sample_id=row.client_sample_id,
            depth_top_text=top[0] if top else "",
            depth_top_m=top[1] if top else None,
            depth_bottom_text=bottom[0] if bottom else "",
            depth_bottom_m=bottom[1] if bottom else None,
            sample_type=row.sample_type,
            description=row.description,
            condition=row.condition,
            seal_intact=row.seal_intact,
            storage_place=row.storage_place,
            priority=row.priority,
            received_at=received,
            due_date=due,
            received_by_id=actor.id,
        )
        session.add(sample)
        samples.append(sample)
    session.flush()
    for sample, (row, *_rest) in zip(samples, prepared, strict=True):
        assert sample.id is not None
        record_created(session, sample, actor_id=actor.id)
        seal = {True: "seal intact", False: "seal broken", None: ""}[row.seal_intact]
        record_custody(
            session,
            sample_id=sample.id,
            kind=CustodyKind.RECEIVED,
            actor_id=actor.id,
            from_holder=batch.delivered_by,
            to_holder=actor.full_name,
            place="reception",
            condition=row.condition,
            note=seal,
            when=received,
        )
        if row.storage_place:
            record_custody(
                session,
                sample_id=sample.id,
                kind=CustodyKind.STORED,
                actor_id=actor.id,
                from_holder=actor.full_name,
                place=row.storage_place,
                when=received,
            )
    return samples


def check_samples(
    session: Session, project_id: int, batch: SampleBatch, *, actor: User
) -> list[FieldProblem]:
    """Everything `receive_samples` would refuse in `batch`, storing nothing: the batch is
    received inside a savepoint that is always rolled back."""
    savepoint = session.begin_nested()
    try:
        receive_samples(session, project_id, batch, actor=actor)
    except InvalidInput as exc:
        return list(exc.problems)
    finally:
        savepoint.rollback()
    return []


def _serialise_receptions(session: Session) -> None:
    """Hold a named lock while numbering, so two concurrent batches on PostgreSQL take lab IDs
    one after the other (SQLite's write lock already does)."""
    chain.lock_name(session, "reception")


# --- idempotency ---------------------------------------------------------------------------


def receive_samples_once(
    session: Session, project_id: int, batch: SampleBatch, *, actor: User, idempotency_key: str
) -> tuple[int, dict[str, Any], bool]:
    """`receive_samples` behind an idempotency key: (201, the batch as JSON, replayed?).

    A retry with the same key and body answers the first response and stores nothing more;
    the same key with another body is refused (409). A refused batch stores nothing, not
    even the key, so a corrected batch may reuse it."""
    key = idempotency.check_key(idempotency_key)
    scope = f"receive-samples:{project_id}"
    request_hash = idempotency.fingerprint(batch.model_dump(mode="json"))
    assert actor.id is not None
    # Taken before looking for the key: a concurrent retry waits here, then finds the answer.
    _serialise_receptions(session)
    replay = idempotency.find_replay(
        session, scope=scope, key=key, user_id=actor.id, request_hash=request_hash
    )
    if replay is not None:
        return replay.status_code, dict(replay.response), True
    samples = receive_samples(session, project_id, batch, actor=actor)
    answer = ReceivedBatch(
        project_id=project_id,
        received_at=samples[0].received_at,
        samples=[SampleRead.model_validate(sample) for sample in samples],
    ).model_dump(mode="json")
    idempotency.remember(
        session,
        scope=scope,
        key=key,
        user_id=actor.id,
        request_hash=request_hash,
        status_code=201,
        response=answer,
    )
    return 201, answer, False


# --- the register --------------------------------------------------------------------------


def get_sample(session: Session, sample_id: int, *, user: User) -> Sample:
    return get_visible(session, Sample, sample_id, user, "sample")


def _scoped(query: Any, user: User) -> Any:
    if is_client(user):
        return query.join(Project, col(Project.id) == col(Sample.project_id)).where(
            col(Project.client_id) == user.organisation_id
        )
    return query


RECEIVERS = frozenset({Role.TECHNICIAN, Role.LAB_MANAGER, Role.ADMIN})


def may_receive(user: User) -> bool:
    """Whether `user` receives samples at reception."""
    return user.role in RECEIVERS


def samples_of_project(session: Session, project_id: int) -> list[Sample]:
    """Every sample of a project, by lab ID."""
    query = select(Sample).where(Sample.project_id == project_id).order_by(col(Sample.lab_id))
    return list(session.exec(query).all())


def list_samples(
    session: Session,
    *,
    user: User,
    project_id: int | None = None,
    client_id: int | None = None,
    location_id: int | None = None,
    disposed: bool | None = None,
    received_after: datetime | None = None,
    limit: int,
    offset: int,
) -> tuple[list[Sample], int]:
    """Samples the user may see, newest lab ID first. A client naming another organisation,
    or a project or location it may not see, is answered 404 like any record it may not see."""
    if is_client(user) and client_id is not None and client_id != user.organisation_id:
        raise NotFound(f"organisation {client_id} not found")
    if project_id is not None:
        get_project(session, project_id, user=user)
    if location_id is not None:
        get_location(session, location_id, user=user)
    query = _scoped(select(Sample), user)
    if client_id is not None:
        if not is_client(user):
            query = query.join(Project, col(Project.id) == col(Sample.project_id))
        query = query.where(col(Project.client_id) == client_id)
    if project_id is not None:
        query = query.where(col(Sample.project_id) == project_id)
    if location_id is not None:
        query = query.where(col(Sample.location_id) == location_id)
    if disposed is not None:
        query = query.where(
            col(Sample.disposed_at).is_not(None) if disposed else col(Sample.disposed_at).is_(None)
        )
    if received_after is not None:
        query = query.where(col(Sample.received_at) >= received_after)
    query = query.order_by(col(Sample.received_at).desc(), col(Sample.id).desc())
    return paginate(session, query, limit=limit, offset=offset)


def lookup_samples(
    session: Session, code: str, *, user: User, limit: int, offset: int
) -> tuple[list[Sample], int]:
    """Samples whose lab ID or client sample ID is `code`, as a barcode scanner types it:
    surrounding whitespace ignored, letter case ignored."""
    typed = code.strip()
    if not typed:
        raise invalid(
            ("query", "code"),
            "nothing to look up",
            value=code,
            accepted="a lab ID such as '26-0417' or a client sample ID",
            kind="missing",
        )
    variants = sorted({typed, typed.upper(), typed.lower()})
    # Exact spellings first (they use the indexes); a mixed-case client ID falls back to a
    # case-folded comparison.
    matches = sa.or_(col(Sample.lab_id).in_(variants), col(Sample.client_sample_id).in_(variants))
    query = _scoped(select(Sample), user).where(matches)
    if session.exec(query.limit(1)).first() is None:
        folded = typed.lower()
        query = _scoped(select(Sample), user).where(
            sa.or_(
                func.lower(col(Sample.lab_id)) == folded,
                func.lower(col(Sample.client_sample_id)) == folded,
            )
        )
    query = query.order_by(col(Sample.received_at).desc(), col(Sample.id).desc())
    return paginate(session, query, limit=limit, offset=offset)


def update_sample(session: Session, sample_id: int, data: SampleUpdate, *, actor: User) -> Sample:
    """Correct a sample's record against the version the editor read; every field audited."""
    sample = get_sample(session, sample_id, user=actor)
    require_version(
        sample,
        data.version,
        f"sample {sample.lab_id}",
        yours=data.model_dump(mode="json", exclude_unset=True, exclude={"version"}),
        current=SampleRead.model_validate(sample).model_dump(mode="json"),
    )
    refuse_if_disposed(sample)
    fields = data.model_fields_set - {"version"}
    problems: list[FieldProblem] = []
    changes: dict[str, Any] = {}
    if "location_id" in fields:
        if data.location_id is None:
            changes["location_id"] = None
        else:
            found = _resolve_location(data, _locations_of(session, sample.project_id), (), problems)
            if found is not None:
                changes["location_id"] = found
    top_text = data.depth_top if "depth_top" in fields else sample.depth_top_text
    bottom_text = data.depth_bottom if "depth_bottom" in fields else sample.depth_bottom_text
    if {"depth_top", "depth_bottom"} & fields:
        top, bottom = _depths(top_text, bottom_text, (), problems)
        changes["depth_top_text"], changes["depth_top_m"] = top or ("", None)
        changes["depth_bottom_text"], changes["depth_bottom_m"] = bottom or ("", None)
    if problems:
        raise InvalidInput(f"{len(problems)} problem(s) in the sample", problems=problems)
    for name in (
        "client_sample_id",
        "sample_type",
        "description",
        "condition",
        "seal_intact",
        "priority",
    ):
        if name in fields and (getattr(data, name) is not None or name == "seal_intact"):
            changes[name] = getattr(data, name)
    apply_changes(session, sample, changes, actor_id=actor.id)
    return sample


# --- retention -----------------------------------------------------------------------------


def due_for_disposal(
    session: Session, *, user: User, on: datetime | None = None, limit: int, offset: int
) -> Page[DisposalCandidate]:
    """Samples kept past their project's retention period after their latest certificate,
    not yet disposed, with no test still open. Earliest disposal date first."""
    as_of = on or utcnow()
    # Only samples still kept are of interest: joining them first keeps the aggregation to
    # the certificates of those (a lab disposes of most old samples).
    kept = select(Sample.id).where(col(Sample.disposed_at).is_(None)).subquery("kept")
    direct: Any = (
        select(
            col(Certificate.sample_id).label("sample_id"),
            col(Certificate.issued_at).label("issued_at"),
        )
        .join(kept, kept.c.id == col(Certificate.sample_id))
        .where(col(Certificate.state) != CertificateState.WITHDRAWN.value)
    )
    through_tests = (
        select(col(PermeabilityTest.sample_id), col(Certificate.issued_at))
        .join(CertificateTest, col(CertificateTest.certificate_id) == col(Certificate.id))
        .join(PermeabilityTest, col(PermeabilityTest.id) == col(CertificateTest.test_id))
        .join(kept, kept.c.id == col(PermeabilityTest.sample_id))
        .where(col(Certificate.state) != CertificateState.WITHDRAWN.value)
    )
    issued = sa.union_all(direct, through_tests).subquery("issued")
    latest = (
        select(issued.c.sample_id, func.max(issued.c.issued_at).label("last_issued"))
        .group_by(issued.c.sample_id)
        .subquery("latest")
    )
    # One comparison per retention period in use (a handful), which keeps the date
    # arithmetic in Python and the SQL the same on SQLite and PostgreSQL.
    periods = session.exec(select(Project.retention_days).distinct()).all()
    if not periods:
        return Page[DisposalCandidate](items=[], total=0, limit=limit, offset=offset)
    expired = sa.or_(
        *(
            sa.and_(
                col(Project.retention_days) == days,
                latest.c.last_issued <= as_of - timedelta(days=days),
            )
            for days in periods
        )
    )
    still_open = (
        select(PermeabilityTest.id)
        .where(
            col(PermeabilityTest.sample_id) == col(Sample.id),
            col(PermeabilityTest.state).in_([s.value for s in OPEN_STATES]),
        )
        .exists()
    )
    query: Any = (
        select(Sample, latest.c.last_issued, Project.retention_days)
        .join(latest, latest.c.sample_id == col(Sample.id))
        .join(Project, col(Project.id) == col(Sample.project_id))
        .where(col(Sample.disposed_at).is_(None), expired, ~still_open)
    )
    if is_client(user):
        query = query.where(col(Project.client_id) == user.organisation_id)
    query = query.order_by(latest.c.last_issued, col(Sample.id))
    rows, total = paginate(session, query, limit=limit, offset=offset)
    items = [
        DisposalCandidate(
            sample=SampleRead.model_validate(sample),
            last_certificate_at=last_issued,
            retention_days=days,
            disposal_due_on=(last_issued + timedelta(days=days)).date(),
        )
        for sample, last_issued, days in rows
    ]
    return Page[DisposalCandidate](items=items, total=total, limit=limit, offset=offset)
