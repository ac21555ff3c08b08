"""Who may see what: lab staff see everything; a client sees only its own organisation's
projects, and anything else answers 404 (never 403, which would confirm it exists)."""

from __future__ import annotations

from typing import Any, TypeVar

from sqlmodel import Session, SQLModel
from sqlmodel.sql.expression import SelectOfScalar

from service.accounts.models import User
from service.common import Role
from service.errors import NotFound
from service.lab_tests.models import PermeabilityTest
from service.projects.models import Project
from service.samples.models import Sample

RowT = TypeVar("RowT", bound=SQLModel)


def is_client(user: User) -> bool:
    return user.role == Role.CLIENT


def get_visible(session: Session, model: type[RowT], row_id: int, user: User, what: str) -> RowT:
    """Fetch a row the user may see, or raise NotFound naming what was asked for."""
    row = session.get(model, row_id)
    if row is None or not can_see(session, user, row):
        raise NotFound(f"{what} {row_id} not found")
    return row


def project_id_of(session: Session, row: Any) -> int | None:
    if isinstance(row, Project):
        return row.id
    if isinstance(row, Sample):
        return row.project_id
    if isinstance(row, PermeabilityTest):
        sample = session.get(Sample, row.sample_id)
        return sample.project_id if sample else None
    project_id = getattr(row, "project_id", None)
    if project_id is not None:
        return int(project_id)
    sample_id = getattr(row, "sample_id", None)
    if sample_id is not None:
        sample = session.get(Sample, sample_id)
        return sample.project_id if sample else None
    test_id = getattr(row, "test_id", None)
    if test_id is not None:
        test = session.get(PermeabilityTest, test_id)
        return project_id_of(session, test) if test else None
    return None


def can_see(session: Session, user: User, row: Any) -> bool:
    if not is_client(user):
        return True
    project_id = project_id_of(session, row)
    if project_id is None:
        return False
    project = session.get(Project, project_id)
    return project is not None and project.client_id == user.organisation_id


def scope_projects(query: SelectOfScalar[Any], user: User) -> SelectOfScalar[Any]:
    """Narrow a query that already involves `Project` to what the user may see."""
    if is_client(user):
        return query.where(Project.client_id == user.organisation_id)
    return query
