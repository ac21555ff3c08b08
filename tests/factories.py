"""Small typed factories: each makes one row with sensible defaults and flushes it."""

from __future__ import annotations

import itertools
from datetime import UTC, datetime
from typing import Any

from sqlmodel import Session

from service.accounts.models import Organisation, User
from service.accounts.service import create_user
from service.common import OrganisationKind, Role
from service.lab_tests.models import PermeabilityTest
from service.projects.models import Location, Project
from service.samples.models import Sample

_serial = itertools.count(1)


def _next() -> int:
    return next(_serial)


def make_organisation(
    session: Session, *, kind: OrganisationKind = OrganisationKind.CLIENT, **fields: Any
) -> Organisation:
    organisation = Organisation(
        name=fields.pop("name", f"Organisation {_next()}"), kind=kind, **fields
    )
    session.add(organisation)
    session.flush()
    return organisation


def make_user(
    session: Session,
    *,
    role: Role = Role.TECHNICIAN,
    organisation: Organisation | None = None,
    password: str = "correct horse 42",
    **fields: Any,
) -> User:
    if organisation is None:
        kind = OrganisationKind.CLIENT if role == Role.CLIENT else OrganisationKind.LAB
        organisation = make_organisation(session, kind=kind)
    return create_user(
        session,
        organisation=organisation,
        email=fields.pop("email", f"user{_next()}@example.test"),
        full_name=fields.pop("full_name", "Test Person"),
        role=role,
        password=password,
    )


def make_project(session: Session, *, client: Organisation | None = None, **fields: Any) -> Project:
    client = client or make_organisation(session)
    assert client.id is not None
    project = Project(
        client_id=client.id,
        number=fields.pop("number", f"P-{_next()}"),
        name=fields.pop("name", "Test project"),
        **fields,
    )
    session.add(project)
    session.flush()
    return project


def make_location(session: Session, *, project: Project | None = None, **fields: Any) -> Location:
    project = project or make_project(session)
    assert project.id is not None
    location = Location(
        project_id=project.id,
        name=fields.pop("name", f"BH-{_next():02d}"),
        kind=fields.pop("kind", "borehole"),
        **fields,
    )
    session.add(location)
    session.flush()
    return location


def make_sample(session: Session, *, project: Project | None = None, **fields: Any) -> Sample:
    project = project or make_project(session)
    assert project.id is not None
    sample = Sample(
        lab_id=fields.pop("lab_id", f"99-{_next():04d}"),
        project_id=project.id,
        sample_type=fields.pop("sample_type", "tube"),
        received_at=fields.pop("received_at", datetime(2026, 11, 2, 9, tzinfo=UTC)),
        **fields,
    )
    session.add(sample)
    session.flush()
    return sample


def make_test(session: Session, *, sample: Sample | None = None, **fields: Any) -> PermeabilityTest:
    sample = sample or make_sample(session)
    assert sample.id is not None
    test = PermeabilityTest(
        sample_id=sample.id, method=fields.pop("method", "falling_head"), **fields
    )
    session.add(test)
    session.flush()
    return test
