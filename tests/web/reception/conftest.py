"""Fixtures for the reception, sample and project pages: a lab, two clients, a project."""

from __future__ import annotations

from dataclasses import dataclass

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session, func, select

from service.accounts.models import Organisation, User
from service.common import OrganisationKind, Role
from service.projects.models import Location, Project
from service.samples.models import Sample
from tests.auth_helpers import sign_in_cookie
from tests.factories import make_location, make_organisation, make_project, make_user

HTMX = {"HX-Request": "true"}


@dataclass
class Lab:
    lab: Organisation
    client: Organisation
    other_client: Organisation
    project: Project
    other_project: Project
    bh1: Location
    bh2: Location
    technician: User
    manager: User
    reviewer: User
    client_user: User
    other_client_user: User


@pytest.fixture
def lab(session: Session) -> Lab:
    lab_org = make_organisation(session, kind=OrganisationKind.LAB, name="Test Soils Lab")
    client = make_organisation(session, name="Northfield Dykes Board")
    other = make_organisation(session, name="Other Client Co")
    project = make_project(
        session,
        client=client,
        number="P-100",
        name="East levee raise",
        turnaround_days=10,
        spec_k_max_text="1e-9 m/s",
        spec_k_max_m_per_s=1e-9,
    )
    other_project = make_project(session, client=other, number="Q-7", name="Other work")
    found = Lab(
        lab=lab_org,
        client=client,
        other_client=other,
        project=project,
        other_project=other_project,
        bh1=make_location(session, project=project, name="BH-01"),
        bh2=make_location(session, project=project, name="BH-02"),
        technician=make_user(
            session, role=Role.TECHNICIAN, organisation=lab_org, full_name="Reception Person"
        ),
        manager=make_user(
            session, role=Role.LAB_MANAGER, organisation=lab_org, full_name="Manager Person"
        ),
        reviewer=make_user(
            session, role=Role.REVIEWER, organisation=lab_org, full_name="Reviewer Person"
        ),
        client_user=make_user(session, role=Role.CLIENT, organisation=client),
        other_client_user=make_user(session, role=Role.CLIENT, organisation=other),
    )
    session.commit()
    return found


def sign_in(session: Session, client: TestClient, user: User) -> dict[str, str]:
    """Cookie session for `user`; the CSRF header for writes."""
    return sign_in_cookie(session, client, user)


def sample_count(session: Session) -> int:
    """Samples stored, read in a fresh transaction (an open one would keep its old snapshot)."""
    session.commit()
    return int(session.exec(select(func.count()).select_from(Sample)).one())
