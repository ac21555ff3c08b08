"""Compaction series of a project: /api/v1/projects/{id}/series and /api/v1/series (lab staff
edit them; a client reads its own projects' series, with certified results only)."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Response

from service.deps import CurrentUser, LabStaff, SessionDep
from service.series.service import (
    CurvePointCreate,
    CurvePointRead,
    MemberCreate,
    MemberRead,
    SeriesCreate,
    SeriesRead,
    SeriesUpdate,
    add_curve_point,
    add_member,
    create_series,
    project_series,
    remove_curve_point,
    remove_member,
    series_json,
    series_results,
    update_series,
)

router = APIRouter(prefix="/api/v1", tags=["compaction series"])


@router.post("/projects/{project_id}/series", status_code=201, response_model=SeriesRead)
def create(project_id: int, data: SeriesCreate, session: SessionDep, user: LabStaff) -> SeriesRead:
    """Open a compaction series: several specimens of one material compacted at different
    water contents and dry densities. The limit on k20 is the project's unless typed."""
    return SeriesRead.model_validate(create_series(session, project_id, data, actor=user))


@router.get("/projects/{project_id}/series", response_model=list[SeriesRead])
def list_all(project_id: int, session: SessionDep, user: CurrentUser) -> list[SeriesRead]:
    """A project's compaction series by name."""
    return [SeriesRead.model_validate(s) for s in project_series(session, project_id, user=user)]


@router.get("/series/{series_id}")
def read(series_id: int, session: SessionDep, user: CurrentUser) -> dict[str, Any]:
    """The series with its members (typed values beside SI, k20, degree of saturation, whether
    each meets the limit), the compaction curve and the acceptable zone drawn from the data
    (after Daniel & Benson 1990). A client sees k20 of certified tests only."""
    return series_json(series_results(session, series_id, user=user))


@router.patch("/series/{series_id}", response_model=SeriesRead)
def update(series_id: int, data: SeriesUpdate, session: SessionDep, user: LabStaff) -> SeriesRead:
    """Edit against the version you read (409 if stale); '' clears a typed limit."""
    return SeriesRead.model_validate(update_series(session, series_id, data, actor=user))


@router.post("/series/{series_id}/members", status_code=201, response_model=MemberRead)
def create_member(
    series_id: int, data: MemberCreate, session: SessionDep, user: LabStaff
) -> MemberRead:
    """Add a test of the project with its moulding water content ('16.5 %') and dry density
    ('1.78 g/cm**3')."""
    return MemberRead.model_validate(add_member(session, series_id, data, actor=user))


@router.delete("/series/{series_id}/members/{member_id}", status_code=204, response_class=Response)
def delete_member(series_id: int, member_id: int, session: SessionDep, user: LabStaff) -> Response:
    """Take a specimen out of the series; its test is untouched."""
    remove_member(session, series_id, member_id, actor=user)
    return Response(status_code=204)


@router.post("/series/{series_id}/curve-points", status_code=201, response_model=CurvePointRead)
def create_curve_point(
    series_id: int, data: CurvePointCreate, session: SessionDep, user: LabStaff
) -> CurvePointRead:
    """Add a point of the material's compaction test (water content, dry density)."""
    return CurvePointRead.model_validate(add_curve_point(session, series_id, data, actor=user))


@router.delete(
    "/series/{series_id}/curve-points/{point_id}", status_code=204, response_class=Response
)
def delete_curve_point(
    series_id: int, point_id: int, session: SessionDep, user: LabStaff
) -> Response:
    """Remove a compaction-curve point typed by mistake."""
    remove_curve_point(session, series_id, point_id, actor=user)
    return Response(status_code=204)
