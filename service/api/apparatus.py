"""The apparatus register: /api/v1/apparatus (admins and lab managers edit it)."""

from __future__ import annotations

from fastapi import APIRouter, Response

from service.api.paging import Paging
from service.apparatus.service import (
    ApparatusCreate,
    ApparatusRead,
    ApparatusUpdate,
    apparatus_read,
    create_apparatus,
    delete_apparatus,
    get_apparatus,
    list_apparatus,
    update_apparatus,
)
from service.common import ApparatusKind
from service.deps import LabStaff, Manager, SessionDep
from service.paging import Page

router = APIRouter(prefix="/api/v1/apparatus", tags=["apparatus"])


@router.post("", status_code=201, response_model=ApparatusRead)
def create(data: ApparatusCreate, session: SessionDep, user: Manager) -> ApparatusRead:
    """Add an item: areas and spacing with their units, resolution in the kind's quantity
    (balance '0.1 g', thermometer '0.1 K', timer '0.1 s' ...), calibration dates."""
    return apparatus_read(create_apparatus(session, data, actor=user))


@router.get("", response_model=Page[ApparatusRead])
def list_all(
    session: SessionDep,
    _user: LabStaff,
    paging: Paging,
    kind: ApparatusKind | None = None,
    overdue: bool | None = None,
    active: bool | None = None,
) -> Page[ApparatusRead]:
    """The register by identifier; `overdue` marks items past their calibration due date."""
    rows, total = list_apparatus(
        session, kind=kind, overdue=overdue, active=active, **paging.window
    )
    return paging.of(rows, total, apparatus_read)


@router.get("/{apparatus_id}", response_model=ApparatusRead)
def read(apparatus_id: int, session: SessionDep, _user: LabStaff) -> ApparatusRead:
    return apparatus_read(get_apparatus(session, apparatus_id))


@router.patch("/{apparatus_id}", response_model=ApparatusRead)
def update(
    apparatus_id: int, data: ApparatusUpdate, session: SessionDep, user: Manager
) -> ApparatusRead:
    """Edit against the version you read (409 if stale); '' clears a typed value."""
    return apparatus_read(update_apparatus(session, apparatus_id, data, actor=user))


@router.delete("/{apparatus_id}", status_code=204, response_class=Response)
def delete(apparatus_id: int, session: SessionDep, user: Manager) -> Response:
    """Remove an item entered by mistake; an item a test used is retired instead (409)."""
    delete_apparatus(session, apparatus_id, actor=user)
    return Response(status_code=204)
