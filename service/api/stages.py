"""The stages of a flexible-wall test under /api/v1 (rules in service/stages/)."""

from __future__ import annotations

import functools
from typing import Annotated, Any, Literal

import anyio
from fastapi import APIRouter, File, UploadFile

from service.deps import CurrentUser, LabStaff, SessionDep
from service.exchange.files import read_upload
from service.stages import loggers
from service.stages import service as stages
from service.stages.fields import STAGE_IDS
from service.stages.loggers import MappingRead, MappingWrite
from service.stages.service import StageRead, StagesRead, StageWrite

router = APIRouter(prefix="/api/v1", tags=["stages"])

StageId = Literal[STAGE_IDS]  # type: ignore[valid-type]
LoggerStage = Literal["consolidation", "permeation"]

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


@router.put(
    "/apparatus/{apparatus_id}/logger-mappings/{stage}",
    response_model=MappingRead,
    responses=_ERRORS,
)
def save_logger_mapping(
    apparatus_id: int, stage: LoggerStage, data: MappingWrite, session: SessionDep, user: LabStaff
) -> MappingRead:
    """How this apparatus's logger files are read for a stage, set once: the time column
    (`unit` for an elapsed time, or `datetime_format`) and a column and unit per quantity
    (consolidation: volume_change; permeation: headwater_reading, tailwater_reading,
    headwater_pressure, tailwater_pressure, temperature)."""
    row = loggers.save_mapping(session, apparatus_id, stage, data, actor=user)
    return MappingRead.model_validate(row, from_attributes=True)


@router.post("/tests/{test_id}/stages/{stage}/logger", response_model=StagesRead, responses=_ERRORS)
async def import_logger_file(
    test_id: int,
    stage: LoggerStage,
    file: Annotated[UploadFile, File(description="CSV or XLSX logger file with a header row")],
    session: SessionDep,
    user: CurrentUser,
) -> StagesRead:
    """Take a logger file's rows as the stage's readings, read with the permeameter's
    mapping. Every refused cell is named by row and column; nothing is stored unless every
    row reads."""
    table = await read_upload(file, file.filename or "", limit=loggers.LOGGER_LIMIT, field="file")
    await anyio.to_thread.run_sync(
        functools.partial(loggers.import_readings, session, test_id, stage, table, actor=user)
    )
    return await anyio.to_thread.run_sync(_read, session, test_id, user)
