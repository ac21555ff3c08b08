"""The stages of a flexible-wall test under /api/v1 (rules in service/stages/)."""

from __future__ import annotations

from typing import Any, Literal

from fastapi import APIRouter

from service.deps import CurrentUser, SessionDep
from service.stages import service as stages
from service.stages.fields import STAGE_IDS
from service.stages.service import StageRead, StagesRead, StageWrite

router = APIRouter(prefix="/api/v1", tags=["stages"])

StageId = Literal[STAGE_IDS]  # type: ignore[valid-type]

_ERRORS: dict[int | str, dict[str, Any]] = {
    403: {"description": "Not allowed for your role or assignment"},
    404: {"description": "No such test (or not one of your organisation's)"},
    409: {"description": "Not a flexible-wall test, wrong state, or a stale version"},
    422: {"description": "A value refused, named by its label, with what is accepted"},
}


def _read(session: SessionDep, test_id: int, user: CurrentUser) -> StagesRead:
    test, rows = stages.read_stages(session, test_id, actor=user)
    return StagesRead(
        test_id=test_id,
        needs_stages=stages.needs_stages(session, test),
        **{name: StageRead.model_validate(row, from_attributes=True) for name, row in rows.items()},
    )


@router.get("/tests/{test_id}/stages", response_model=StagesRead, responses=_ERRORS)
def read_stages(test_id: int, session: SessionDep, user: CurrentUser) -> StagesRead:
    """Set-up, saturation, consolidation, permeation and post-test of a flexible-wall test:
    each as typed beside its SI values, with what the engine made of it (B per check, end of
    consolidation, dimensions at permeation, heads and k per interval, termination checks)."""
    return _read(session, test_id, user)


@router.put("/tests/{test_id}/stages/{stage}", response_model=StagesRead, responses=_ERRORS)
def write_stage(
    test_id: int, stage: StageId, data: StageWrite, session: SessionDep, user: CurrentUser
) -> StagesRead:
    """Record one stage, or replace it against the `version` you read. Values are texts with
    their units ("445 kPa", "1.37 mL", "4 h"); lists of readings go under `groups`."""
    stages.write_stage(session, test_id, stage, data, actor=user)
    return _read(session, test_id, user)
