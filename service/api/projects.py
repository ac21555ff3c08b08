"""Projects and their locations: /api/v1/projects."""

from __future__ import annotations

from fastapi import APIRouter

from service.api.paging import Paging
from service.deps import CurrentUser, Manager, Reception, SessionDep
from service.paging import Page
from service.projects.service import (
    LocationCreate,
    LocationRead,
    ProjectCreate,
    ProjectRead,
    ProjectUpdate,
    add_location,
    create_project,
    get_project,
    list_locations,
    list_projects,
    update_project,
)

router = APIRouter(prefix="/api/v1/projects", tags=["projects"])


@router.post("", status_code=201, response_model=ProjectRead)
def create(data: ProjectCreate, session: SessionDep, user: Manager) -> ProjectRead:
    """Open a project for a client (lab managers and admins). The number is unique per
    client; the specification limit on k20 is typed with its unit ('1e-9 m/s')."""
    return ProjectRead.model_validate(create_project(session, data, actor=user))


@router.get("", response_model=Page[ProjectRead])
def list_all(
    session: SessionDep,
    user: CurrentUser,
    paging: Paging,
    client_id: int | None = None,
    search: str | None = None,
) -> Page[ProjectRead]:
    """Projects you may see (a client sees its own), newest first."""
    rows, total = list_projects(
        session, user=user, client_id=client_id, search=search, **paging.window
    )
    return paging.of(rows, total, ProjectRead.model_validate)


@router.get("/{project_id}", response_model=ProjectRead)
def read(project_id: int, session: SessionDep, user: CurrentUser) -> ProjectRead:
    return ProjectRead.model_validate(get_project(session, project_id, user=user))


@router.patch("/{project_id}", response_model=ProjectRead)
def update(project_id: int, data: ProjectUpdate, session: SessionDep, user: Manager) -> ProjectRead:
    """Edit against the version you read; a stale version answers 409 with both versions."""
    return ProjectRead.model_validate(update_project(session, project_id, data, actor=user))


@router.post("/{project_id}/locations", status_code=201, response_model=LocationRead)
def create_location(
    project_id: int, data: LocationCreate, session: SessionDep, user: Reception
) -> LocationRead:
    """Add a borehole, test pit, borrow source or stockpile; ground level with its unit."""
    return LocationRead.model_validate(add_location(session, project_id, data, actor=user))


@router.get("/{project_id}/locations", response_model=Page[LocationRead])
def list_project_locations(
    project_id: int,
    session: SessionDep,
    user: CurrentUser,
    paging: Paging,
) -> Page[LocationRead]:
    """A project's locations by name."""
    rows, total = list_locations(session, project_id, user=user, **paging.window)
    return paging.of(rows, total, LocationRead.model_validate)
