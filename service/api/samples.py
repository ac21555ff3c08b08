"""Sample reception and the sample register: /api/v1/samples and a project's batch receipt."""

from __future__ import annotations

from datetime import datetime
from typing import Annotated

from fastapi import APIRouter, Header, Query
from fastapi.responses import JSONResponse

from service.api.paging import Paging
from service.deps import CurrentUser, Reception, SessionDep
from service.paging import Page
from service.samples.service import (
    DisposalCandidate,
    ReceivedBatch,
    SampleBatch,
    SampleRead,
    SampleUpdate,
    due_for_disposal,
    get_sample,
    list_samples,
    lookup_samples,
    receive_samples_once,
    update_sample,
)

router = APIRouter(prefix="/api/v1", tags=["samples"])

IdempotencyKey = Annotated[
    str,
    Header(
        alias="Idempotency-Key",
        description="new for each distinct batch (a UUID); a retry with the same key and body "
        "answers the first response and stores nothing more",
    ),
]


@router.post(
    "/projects/{project_id}/samples",
    status_code=201,
    response_model=ReceivedBatch,
    responses={409: {"description": "the key was used for a different request"}},
)
def receive_batch(
    project_id: int,
    batch: SampleBatch,
    session: SessionDep,
    user: Reception,
    idempotency_key: IdempotencyKey,
) -> JSONResponse:
    """Receive samples against a project, all or none: each gets a lab ID, a due date
    (receipt plus the project's turnaround) and a 'received' custody event ('stored' too
    when a storage place is given). Refusals name the row index and field."""
    status, answer, replayed = receive_samples_once(
        session, project_id, batch, actor=user, idempotency_key=idempotency_key
    )
    headers = {"Idempotent-Replayed": "true"} if replayed else {}
    return JSONResponse(answer, status_code=status, headers=headers)


@router.get("/samples", response_model=Page[SampleRead])
def list_all(
    session: SessionDep,
    user: CurrentUser,
    paging: Paging,
    project_id: int | None = None,
    client_id: int | None = None,
    location_id: int | None = None,
    disposed: bool | None = None,
    received_after: datetime | None = None,
) -> Page[SampleRead]:
    """Samples you may see, most recently received first."""
    rows, total = list_samples(
        session,
        user=user,
        project_id=project_id,
        client_id=client_id,
        location_id=location_id,
        disposed=disposed,
        received_after=received_after,
        **paging.window,
    )
    return paging.of(rows, total, SampleRead.model_validate)


@router.get("/samples/lookup", response_model=Page[SampleRead])
def lookup(
    session: SessionDep,
    user: CurrentUser,
    paging: Paging,
    code: Annotated[str, Query(max_length=80, description="lab ID or client sample ID")],
) -> Page[SampleRead]:
    """Find samples by what a barcode scanner types: a lab ID or a client sample ID
    (surrounding spaces and letter case ignored)."""
    rows, total = lookup_samples(session, code, user=user, **paging.window)
    return paging.of(rows, total, SampleRead.model_validate)


@router.get("/samples/due-for-disposal", response_model=Page[DisposalCandidate])
def disposal_list(
    session: SessionDep,
    user: CurrentUser,
    paging: Paging,
) -> Page[DisposalCandidate]:
    """Samples whose project's retention period after their latest certificate has passed,
    not yet disposed and with no test still open. Disposal is a custody event."""
    return due_for_disposal(session, user=user, **paging.window)


@router.get("/samples/{sample_id}", response_model=SampleRead)
def read(sample_id: int, session: SessionDep, user: CurrentUser) -> SampleRead:
    return SampleRead.model_validate(get_sample(session, sample_id, user=user))


@router.patch("/samples/{sample_id}", response_model=SampleRead)
def update(sample_id: int, data: SampleUpdate, session: SessionDep, user: Reception) -> SampleRead:
    """Correct a sample's record against the version you read (409 if stale). Moves between
    storage places are custody events."""
    return SampleRead.model_validate(update_sample(session, sample_id, data, actor=user))
