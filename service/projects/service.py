"""Project and location rules: who may create them, unique numbers, typed limits, versions."""

from __future__ import annotations

from typing import Any

from pydantic import BaseModel, ConfigDict, Field, field_validator
from sqlmodel import Session, col, func, select

from service.access import get_visible, is_client, scope_projects
from service.accounts.models import Organisation, User
from service.audit.service import apply_changes, record_created
from service.common import LocationKind, OrganisationKind, Role
from service.errors import Conflict, NotFound, invalid, require_version
from service.paging import contains_pattern, paginate
from service.projects.models import Location, Project
from service.quantities import CONDUCTIVITY, LENGTH, typed
from service.samples.models import Sample
from service.text import Identifier

# --- schemas -------------------------------------------------------------------------------


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", str_strip_whitespace=True)


class ProjectCreate(_Strict):
    client_id: int = Field(description="the client organisation")
    number: str = Field(min_length=1, max_length=40, description="unique per client")
    name: str = Field(min_length=1, max_length=200)
    site: str = Field(default="", max_length=300)
    turnaround_days: int = Field(default=10, gt=0, le=365)
    retention_days: int = Field(default=90, ge=0, le=3650)
    spec_k_max: str | None = Field(
        default=None,
        max_length=60,
        description="specification limit on k20 with its unit, e.g. '1e-9 m/s' or '1e-7 cm/s'",
    )
    spec_source: str = Field(default="", max_length=200)


class ProjectUpdate(_Strict):
    version: int = Field(ge=1, description="the version you read; a stale one answers 409")
    number: str | None = Field(default=None, min_length=1, max_length=40)
    name: str | None = Field(default=None, min_length=1, max_length=200)
    site: str | None = Field(default=None, max_length=300)
    turnaround_days: int | None = Field(default=None, gt=0, le=365)
    retention_days: int | None = Field(default=None, ge=0, le=3650)
    spec_k_max: str | None = Field(default=None, max_length=60, description="'' removes it")
    spec_source: str | None = Field(default=None, max_length=200)


class ProjectRead(BaseModel):
    model_config = ConfigDict(from_attributes=True)

    id: int
    client_id: int
    number: str
    name: str
    site: str
    turnaround_days: int
    retention_days: int
    spec_k_max_text: str
    spec_k_max_m_per_s: float | None
    spec_source: str
    version: int


class LocationCreate(_Strict):
    name: Identifier = Field(min_length=1, max_length=60, description="e.g. 'BH-03' or 'TP-2'")
    kind: LocationKind
    easting_m: float | None = Field(default=None, allow_inf_nan=False)
    northing_m: float | None = Field(default=None, allow_inf_nan=False)
    coordinate_system: str = Field(default="", max_length=60)
    ground_level: str | None = Field(
        default=None, max_length=40, description="with its unit, e.g. '112.40 m' or '368.8 ft'"
    )

    @field_validator("name")
    @classmethod
    def _name_not_blank(cls, value: str) -> str:
        if not value:
            raise ValueError("a location name is needed")
        return value


class LocationRead(BaseModel):
    model_config = ConfigDict(from_attributes=True)

    id: int
    project_id: int
    name: str
    kind: str
    easting_m: float | None
    northing_m: float | None
    coordinate_system: str
    ground_level_text: str
    ground_level_m: float | None
    version: int


# --- projects ------------------------------------------------------------------------------


def _client_organisation(session: Session, client_id: int) -> Organisation:
    organisation = session.get(Organisation, client_id)
    if organisation is None or organisation.kind != OrganisationKind.CLIENT:
        raise invalid(
            ("client_id",),
            f"no client organisation has id {client_id}",
            value=client_id,
            accepted="the id of a client organisation",
            kind="unknown_client",
        )
    return organisation


def _spec_limit(text: str | None) -> tuple[str, float | None]:
    if text is None or not text.strip():
        return "", None
    return typed(text, CONDUCTIVITY, ("spec_k_max",), positive=True)


def _refuse_duplicate_number(
    session: Session, client_id: int, number: str, project_id: int | None = None
) -> None:
    query = select(Project.id).where(Project.client_id == client_id, Project.number == number)
    if project_id is not None:
        query = query.where(Project.id != project_id)
    if session.exec(query).first() is not None:
        raise Conflict(
            f"this client already has a project numbered '{number}'", detail={"field": "number"}
        )


def create_project(session: Session, data: ProjectCreate, *, actor: User) -> Project:
    """Open a project for a client; the number is unique per client."""
    _client_organisation(session, data.client_id)
    spec_text, spec_si = _spec_limit(data.spec_k_max)
    _refuse_duplicate_number(session, data.client_id, data.number)
    project = Project(
        client_id=data.client_id,
        number=data.number,
        name=data.name,
        site=data.site,
        turnaround_days=data.turnaround_days,
        retention_days=data.retention_days,
        spec_k_max_text=spec_text,
        spec_k_max_m_per_s=spec_si,
        spec_source=data.spec_source,
        created_by_id=actor.id,
    )
    session.add(project)
    session.flush()
    record_created(session, project, actor_id=actor.id)
    return project


def list_projects(
    session: Session,
    *,
    user: User,
    client_id: int | None = None,
    search: str | None = None,
    limit: int,
    offset: int,
) -> tuple[list[Project], int]:
    """Projects the user may see, newest first; `search` matches number, name or site."""
    query = scope_projects(select(Project), user)
    if client_id is not None:
        query = query.where(Project.client_id == client_id)
    if search:
        pattern = contains_pattern(search)
        query = query.where(
            col(Project.number).ilike(pattern, escape="\\")
            | col(Project.name).ilike(pattern, escape="\\")
            | col(Project.site).ilike(pattern, escape="\\")
        )
    query = query.order_by(col(Project.created_at).desc(), col(Project.id).desc())
    return paginate(session, query, limit=limit, offset=offset)


PROJECT_MANAGERS = frozenset({Role.LAB_MANAGER, Role.ADMIN})


def may_manage_projects(user: User) -> bool:
    """Whether `user` opens projects and adds their locations."""
    return user.role in PROJECT_MANAGERS


def projects_with_sample_counts(session: Session, *, user: User) -> list[tuple[Project, int]]:
    """Every project the user may see, by number, with how many samples it has."""
    query: Any = (
        select(Project, func.count(col(Sample.id)))
        .join(Sample, col(Sample.project_id) == Project.id, isouter=True)
        .group_by(col(Project.id))
        .order_by(col(Project.number))
    )
    return [(project, int(count)) for project, count in session.exec(scope_projects(query, user))]


def location_names(session: Session, project_id: int) -> dict[int, str]:
    """The names of a project's locations, by id."""
    rows = session.exec(select(Location).where(Location.project_id == project_id)).all()
    return {loc.id: loc.name for loc in rows if loc.id is not None}


def get_project(session: Session, project_id: int, *, user: User) -> Project:
    return get_visible(session, Project, project_id, user, "project")


def update_project(
    session: Session, project_id: int, data: ProjectUpdate, *, actor: User
) -> Project:
    """Edit a project against the version the editor read; each changed field is audited."""
    project = get_project(session, project_id, user=actor)
    require_version(
        project,
        data.version,
        f"project {project_id}",
        yours=data.model_dump(mode="json", exclude_unset=True, exclude={"version"}),
        current=ProjectRead.model_validate(project).model_dump(mode="json"),
    )
    typed = data.model_dump(exclude_unset=True, exclude={"version", "spec_k_max"})
    # An explicit null means "leave as is" for these fields; none of them may be emptied.
    changes: dict[str, Any] = {name: value for name, value in typed.items() if value is not None}
    if "number" in changes:
        _refuse_duplicate_number(session, project.client_id, changes["number"], project.id)
    if "spec_k_max" in data.model_fields_set:
        text, value = _spec_limit(data.spec_k_max)
        changes["spec_k_max_text"] = text
        changes["spec_k_max_m_per_s"] = value
    apply_changes(session, project, changes, actor_id=actor.id)
    return project


# --- locations -----------------------------------------------------------------------------


def add_location(
    session: Session, project_id: int, data: LocationCreate, *, actor: User
) -> Location:
    """Add a borehole, test pit, borrow source or stockpile to a project; names unique in it."""
    project = get_project(session, project_id, user=actor)
    ground_text, ground_m = "", None
    if data.ground_level:
        ground_text, ground_m = typed(data.ground_level, LENGTH, ("ground_level",))
    duplicate = session.exec(
        select(Location.id).where(Location.project_id == project.id, Location.name == data.name)
    ).first()
    if duplicate is not None:
        raise Conflict(
            f"project {project.number} already has a location '{data.name}'",
            detail={"field": "name"},
        )
    assert project.id is not None
    location = Location(
        project_id=project.id,
        name=data.name,
        kind=data.kind,
        easting_m=data.easting_m,
        northing_m=data.northing_m,
        coordinate_system=data.coordinate_system,
        ground_level_text=ground_text,
        ground_level_m=ground_m,
    )
    session.add(location)
    session.flush()
    record_created(session, location, actor_id=actor.id)
    return location


def list_locations(
    session: Session, project_id: int, *, user: User, limit: int, offset: int
) -> tuple[list[Location], int]:
    project = get_project(session, project_id, user=user)
    query = select(Location).where(Location.project_id == project.id).order_by(col(Location.name))
    return paginate(session, query, limit=limit, offset=offset)


def get_location(session: Session, location_id: int, *, user: User) -> Location:
    location = session.get(Location, location_id)
    if location is None:
        raise NotFound(f"location {location_id} not found")
    project = session.get(Project, location.project_id)
    if project is None or (is_client(user) and project.client_id != user.organisation_id):
        raise NotFound(f"location {location_id} not found")
    return location
