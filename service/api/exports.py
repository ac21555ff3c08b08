"""Exports of a project: results as CSV or XLSX (one row per test) and everything as JSON."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter
from fastapi.responses import Response

from service.deps import CurrentUser, SessionDep
from service.exchange.exports import project_json, project_results, to_csv, to_xlsx

router = APIRouter(prefix="/api/v1/projects", tags=["exports"])

XLSX_TYPE = "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet"


def _attachment(name: str) -> dict[str, str]:
    safe = "".join(ch if ch.isalnum() or ch in "-_." else "_" for ch in name)
    return {"Content-Disposition": f'attachment; filename="{safe}"'}


@router.get(
    "/{project_id}/results.csv",
    response_class=Response,
    responses={200: {"content": {"text/csv": {}}}},
)
def export_results_csv(project_id: int, session: SessionDep, user: CurrentUser) -> Response:
    """One row per test, units in the headers (column list: README, 'Exported columns')."""
    project, rows = project_results(session, project_id, user=user)
    return Response(
        to_csv(rows).encode("utf-8"),
        media_type="text/csv; charset=utf-8",
        headers=_attachment(f"{project.number}-results.csv"),
    )


@router.get(
    "/{project_id}/results.xlsx",
    response_class=Response,
    responses={200: {"content": {XLSX_TYPE: {}}}},
)
def export_results_xlsx(project_id: int, session: SessionDep, user: CurrentUser) -> Response:
    """The same table as the CSV in a workbook, with a second sheet describing the columns."""
    project, rows = project_results(session, project_id, user=user)
    return Response(
        to_xlsx(rows, title=f"{project.number} results"),
        media_type=XLSX_TYPE,
        headers=_attachment(f"{project.number}-results.xlsx"),
    )


@router.get("/{project_id}/export.json")
def export_project_json(project_id: int, session: SessionDep, user: CurrentUser) -> dict[str, Any]:
    """Everything recorded about the project that you may see (clients: certified results)."""
    return project_json(session, project_id, user=user)
