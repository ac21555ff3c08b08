"""Fixtures for the accounts tests: a lab with an admin and a technician."""

from __future__ import annotations

import pytest
from sqlmodel import Session

from service.accounts.models import Organisation, User
from service.common import OrganisationKind, Role
from tests.factories import make_organisation, make_user

PASSWORD = "correct horse 42"  # tests/factories.make_user's default


@pytest.fixture
def lab(session: Session) -> Organisation:
    organisation = make_organisation(session, kind=OrganisationKind.LAB, name="Test Lab")
    session.commit()
    return organisation


@pytest.fixture
def admin(session: Session, lab: Organisation) -> User:
    user = make_user(session, role=Role.ADMIN, organisation=lab, email="admin@lab.example")
    session.commit()
    return user


@pytest.fixture
def technician(session: Session, lab: Organisation) -> User:
    user = make_user(session, role=Role.TECHNICIAN, organisation=lab, email="tech@lab.example")
    session.commit()
    return user
