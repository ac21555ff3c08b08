"""A small lab for the lifecycle tests: staff, two clients, a project, a sample, apparatus."""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from datetime import date, timedelta
from typing import Any

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session

from service.accounts.models import Organisation, User
from service.apparatus.models import Apparatus
from service.common import ApparatusKind, OrganisationKind, Role
from service.projects.models import Project
from service.samples.models import Sample
from tests.auth_helpers import bearer
from tests.factories import make_organisation, make_project, make_sample, make_user

PASSWORD = "correct horse 42"  # tests.factories.make_user's default
_serial = itertools.count(1)


@dataclass
class Lab:
    session: Session
    client: TestClient
    technician: User
    other_technician: User
    reviewer: User
    manager: User
    client_user: User
    stranger: User
    project: Project
    sample: Sample
    headers: dict[str, dict[str, str]]

    def as_(self, user: User) -> dict[str, str]:
        assert user.email is not None
        if user.email not in self.headers:
            self.headers[user.email] = bearer(self.session, user)
        return self.headers[user.email]


def make_apparatus(session: Session, kind: ApparatusKind, **fields: Any) -> Apparatus:
    item = Apparatus(
        identifier=fields.pop("identifier", f"{kind.value[:4].upper()}-{next(_serial):02d}"),
        kind=kind,
        calibrated_on=fields.pop("calibrated_on", date.today() - timedelta(days=100)),
        calibration_due=fields.pop("calibration_due", date.today() + timedelta(days=200)),
        **fields,
    )
    session.add(item)
    session.flush()
    return item


@pytest.fixture
def lab(session: Session, client: TestClient) -> Lab:
    lab_org = make_organisation(session, kind=OrganisationKind.LAB, name="Test Soils Lab")
    client_org: Organisation = make_organisation(session, name="Client A (invented)")
    other_org = make_organisation(session, name="Client B (invented)")
    project = make_project(
        session, client=client_org, spec_k_max_text="1e-7 m/s", spec_k_max_m_per_s=1e-7
    )
    sample = make_sample(session, project=project, due_date=date(2026, 11, 20))
    result = Lab(
        session=session,
        client=client,
        technician=make_user(session, role=Role.TECHNICIAN, organisation=lab_org),
        other_technician=make_user(session, role=Role.TECHNICIAN, organisation=lab_org),
        reviewer=make_user(session, role=Role.REVIEWER, organisation=lab_org),
        manager=make_user(session, role=Role.LAB_MANAGER, organisation=lab_org),
        client_user=make_user(session, role=Role.CLIENT, organisation=client_org),
        stranger=make_user(session, role=Role.CLIENT, organisation=other_org),
        project=project,
        sample=sample,
        headers={},
    )
    session.commit()
    return result
