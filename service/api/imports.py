"""Imports: a logger's time/head readings (preview the reduction) and sample schedules."""

from __future__ import annotations

from datetime import datetime
from typing import Annotated, Any

from fastapi import APIRouter, File, Form, Header, UploadFile, status
from pydantic import BaseModel

from service.api.problems import field_item
from service.config import get_settings
from service.deps import LabStaff, Reception, SessionDep
from service.exchange.files import Table, read_upload
from service.exchange.imports import (
    ReadingsImport,
    check_schedule,
    parse_readings,
    preview_readings,
    save_readings,
    save_schedule,
)
from service.lab_tests.schemas import TrialWritten
from service.samples.service import ReceivedBatch, SampleRead

router = APIRouter(prefix="/api/v1/imports", tags=["imports"])


class ReadingsPreview(BaseModel):
    test_id: int
    trial: dict[str, Any]
    rows: list[int]
    reduction: dict[str, Any]


class SchedulePreviewRead(BaseModel):
    ok: bool
    rows: list[dict[str, Any]]
    errors: list[dict[str, Any]]


async def _table(file: UploadFile) -> Table:
    return await read_upload(
        file, file.filename or "", limit=get_settings().max_body_bytes, field="file"
    )


async def _readings(
    file: UploadFile, time_column: str, head_column: str, time_unit: str, head_unit: str
) -> ReadingsImport:
    table = await _table(file)
    return parse_readings(
        table,
        time_column=time_column,
        head_column=head_column,
        time_unit=time_unit,
        head_unit=head_unit,
    )


@router.post("/readings/preview", response_model=ReadingsPreview)
async def preview_readings_file(
    file: Annotated[UploadFile, File(description="CSV with a header row")],
    test_id: Annotated[int, Form()],
    time_column: Annotated[str, Form(max_length=100, description="header name or number")],
    head_column: Annotated[str, Form(max_length=100, description="header name or number")],
    time_unit: Annotated[str, Form(max_length=30, description="e.g. s, min, h")],
    head_unit: Annotated[str, Form(max_length=30, description="e.g. cm, mm, m, in")],
    session: SessionDep,
    user: LabStaff,
    temperature: Annotated[str | None, Form(max_length=40, description="e.g. '20.5 degC'")] = None,
) -> dict[str, Any]:
    """Read the chosen columns and reduce them as one falling-head run of the test.

    Stores nothing: `trial` is the run in the contract's shape, ready to be recorded with the
    test's trials endpoint. Refusals name the file's row and column."""
    columns = (time_column, head_column, time_unit, head_unit)
    imported = await _readings(file, *columns)
    return preview_readings(session, test_id, imported, temperature=temperature, user=user)


@router.post("/readings", status_code=status.HTTP_201_CREATED, response_model=TrialWritten)
async def record_readings_file(
    file: Annotated[UploadFile, File(description="CSV with a header row")],
    test_id: Annotated[int, Form()],
    time_column: Annotated[str, Form(max_length=100)],
    head_column: Annotated[str, Form(max_length=100)],
    time_unit: Annotated[str, Form(max_length=30)],
    head_unit: Annotated[str, Form(max_length=30)],
    session: SessionDep,
    user: LabStaff,
    idempotency_key: Annotated[str | None, Header(alias="Idempotency-Key")] = None,
    temperature: Annotated[str | None, Form(max_length=40)] = None,
) -> TrialWritten:
    """Record the imported run as a new trial of the test (as the trials endpoint does:
    `Idempotency-Key` required, a retry answers the first response and stores nothing)."""
    imported = await _readings(file, time_column, head_column, time_unit, head_unit)
    return save_readings(
        session,
        test_id,
        imported,
        temperature=temperature,
        idempotency_key=idempotency_key,
        user=user,
    )


@router.post("/schedules/preview", response_model=SchedulePreviewRead)
async def preview_schedule(
    file: Annotated[UploadFile, File(description="CSV or XLSX, one row per sample")],
    project_id: Annotated[int, Form()],
    session: SessionDep,
    user: Reception,
    received_at: Annotated[datetime | None, Form()] = None,
    delivered_by: Annotated[str, Form(max_length=120)] = "",
) -> dict[str, Any]:
    """Check a schedule row by row without storing anything."""
    table = await _table(file)
    preview = check_schedule(
        session, project_id, table, actor=user, received_at=received_at, delivered_by=delivered_by
    )
    errors = [field_item(problem) for problem in preview.errors]
    return {"ok": preview.ok, "rows": preview.rows, "errors": errors}


@router.post("/schedules", response_model=ReceivedBatch, status_code=status.HTTP_201_CREATED)
async def receive_schedule(
    file: Annotated[UploadFile, File(description="CSV or XLSX, one row per sample")],
    project_id: Annotated[int, Form()],
    session: SessionDep,
    user: Reception,
    received_at: Annotated[datetime | None, Form()] = None,
    delivered_by: Annotated[str, Form(max_length=120)] = "",
) -> ReceivedBatch:
    """Receive every sample of the schedule in one batch; any refused row stores nothing."""
    table = await _table(file)
    samples = save_schedule(
        session, project_id, table, actor=user, received_at=received_at, delivered_by=delivered_by
    )
    return ReceivedBatch(
        project_id=project_id,
        received_at=samples[0].received_at,
        samples=[SampleRead.model_validate(s) for s in samples],
    )
