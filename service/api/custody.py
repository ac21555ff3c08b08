"""Chain of custody: a sample's events, and the verification of the custody hash chain."""

from __future__ import annotations

from fastapi import APIRouter

from service.api.paging import Paging
from service.custody.service import (
    ChainReportRead,
    CustodyEventIn,
    CustodyEventRead,
    add_custody_event,
    sample_timeline,
    verify_chain,
)
from service.deps import CurrentUser, LabStaff, SessionDep
from service.paging import Page

router = APIRouter(prefix="/api/v1", tags=["custody"])


@router.post(
    "/samples/{sample_id}/custody",
    status_code=201,
    response_model=CustodyEventRead,
    responses={409: {"description": "the sample was disposed: nothing may follow"}},
)
def record_event(
    sample_id: int, data: CustodyEventIn, session: SessionDep, user: LabStaff
) -> CustodyEventRead:
    """Append an event to the sample's chain of custody (never edited afterwards). A
    'disposed' event closes the chain; storing or moving updates the storage place."""
    return CustodyEventRead.model_validate(add_custody_event(session, sample_id, data, actor=user))


@router.get("/samples/{sample_id}/custody", response_model=Page[CustodyEventRead])
def timeline(
    sample_id: int,
    session: SessionDep,
    user: CurrentUser,
    paging: Paging,
) -> Page[CustodyEventRead]:
    """The sample's custody events in the order they were recorded."""
    events = sample_timeline(session, sample_id, user=user)
    return paging.cut(events, CustodyEventRead.model_validate)


@router.get("/custody/verify", response_model=ChainReportRead)
def verify(session: SessionDep, _user: LabStaff) -> ChainReportRead:
    """Recompute every link of the custody chains (one per sample) against the signed
    checkpoints; names the first row edited or deleted and its sample."""
    return verify_chain(session, "custody")
