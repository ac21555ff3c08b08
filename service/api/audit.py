"""The audit trail: a record's history of changes, and the verification of the audit chain."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends
from sqlmodel import SQLModel

from service.access import is_client
from service.accounts.models import User
from service.api.paging import Paging
from service.audit.service import FieldChange, history
from service.custody.service import ChainReportRead, verify_chain
from service.deps import CurrentUser, LabStaff, SessionDep
from service.errors import InvalidInput, NotFound
from service.paging import Page

router = APIRouter(prefix="/api/v1/audit", tags=["audit"])

# Tables whose rows are themselves log entries or secrets have no history of their own.
_NOT_AUDITED = {
    "audit_event",
    "chain_head",
    "custody_event",
    "access_token",
    "idempotency_record",
    "log_checkpoint",
    "signing_key",
}


def lab_staff_or_not_found(user: CurrentUser) -> User:
    """Audit trails are the lab's: to a client they do not exist (404, not 403)."""
    if is_client(user):
        raise NotFound("no audit trail here")
    return user


AuditReader = Annotated[User, Depends(lab_staff_or_not_found)]


@router.get("/verify", response_model=ChainReportRead)
def verify(session: SessionDep, _user: LabStaff) -> ChainReportRead:
    """Recompute every link of the audit chains against the signed checkpoints; names the
    first row edited or deleted and its chain."""
    return verify_chain(session, "audit")


@router.get("/{entity}/{entity_id}", response_model=Page[FieldChange])
def record_history(
    entity: str,
    entity_id: int,
    session: SessionDep,
    _user: AuditReader,
    paging: Paging,
) -> Page[FieldChange]:
    """Every change to one record (entity is the table name: project, sample, apparatus,
    permeability_test ...), oldest first, field by field: old and new value, who, when."""
    audited = sorted(set(SQLModel.metadata.tables) - _NOT_AUDITED)
    if entity not in audited:
        message = f"entity: '{entity}' is not a kind of record; accepted: {', '.join(audited)}"
        raise InvalidInput(
            message, detail=[{"loc": ["path", "entity"], "msg": message, "type": "enum"}]
        )
    events = history(session, entity, entity_id)
    return paging.cut(events, lambda change: change)
