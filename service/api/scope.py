"""The laboratory's accredited scope: /api/v1/scope (lab staff read it; admins and lab
managers change it against the version read)."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter

from service.deps import LabStaff, Manager, SessionDep
from service.scope.service import ScopeUpdate, update_scope, view

router = APIRouter(prefix="/api/v1/scope", tags=["scope"])


@router.get("")
def read(session: SessionDep, _user: LabStaff) -> dict[str, Any]:
    """The scope: each standard (listed, in scope, edition, defaults) and each rule with its
    built-in limits beside the laboratory's, and whether the laboratory confirmed them."""
    return view(session)


@router.put("")
def change(data: ScopeUpdate, session: SessionDep, user: Manager) -> dict[str, Any]:
    """Change standards, defaults or rules against the scope `version` you read (409 if it
    changed since); each change makes a new version and is audited. Limits are numbers in
    each limit's SI unit, as the read lists them."""
    update_scope(session, data, actor=user)
    return view(session)
