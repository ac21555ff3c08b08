"""A small lab for the test-page tests: staff, two clients, a planned falling-head test with
its permeameter, and instruments in the register (one overdue for calibration)."""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from datetime import date, timedelta
from typing import Any

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session

from service.accounts.models import User
from service.apparatus.models import Apparatus
from service.common import ApparatusKind, OrganisationKind, Role
from service.lab_tests.models import PermeabilityTest, TestApparatus
from service.samples.models import Sample
from tests.auth_helpers import sign_in_cookie
from tests.factories import make_organisation, make_project, make_sample, make_test, make_user

PASSWORD = "correct horse 42"  # tests.factories.make_user's default
HTMX = {"HX-Request": "true"}
_serial = itertools.count(1)


def make_item(session: Session, kind: ApparatusKind, **fields: Any) -> Apparatus:
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
    sample: Sample
    test: PermeabilityTest
    permeameter: Apparatus
    spaced_permeameter: Apparatus
    overdue_thermometer: Apparatus
    thermometer: Apparatus

    @property
    def test_id(self) -> int:
        assert self.test.id is not None
        return self.test.id

    def sign_in(self, user: User) -> dict[str, str]:
        """Cookie session for `user` on the client; returns the CSRF header."""
        self.client.cookies.clear()
        return sign_in_cookie(self.session, self.client, user)

    def url(self, tail: str = "") -> str:
        return f"/tests/{self.test_id}{tail}"

    def fresh(self) -> None:
        """End the arranging session's read transaction (SQLite WAL keeps a snapshot per
        transaction) so the next read sees what the app committed."""
        self.session.commit()
        self.session.expire_all()

    def reload(self) -> PermeabilityTest:
        self.fresh()
        test = self.session.get(PermeabilityTest, self.test_id)
        assert test is not None
        return test


@pytest.fixture
def lab(session: Session, web_client: TestClient) -> Lab:
    lab_org = make_organisation(session, kind=OrganisationKind.LAB, name="Test Soils Lab")
    client_org = make_organisation(session, name="Client A (invented)")
    other_org = make_organisation(session, name="Client B (invented)")
    project = make_project(session, client=client_org, number="P-TP-1", name="Liner trial pad")
    sample = make_sample(session, project=project, lab_id="26-0101", due_date=date(2026, 12, 4))
    technician = make_user(session, role=Role.TECHNICIAN, organisation=lab_org)
    # CV2's permeameter: standpipe bore 0.60 cm, a = 0.282743 cm² (domain-reference §10 CV2).
    permeameter = make_item(
        session,
        ApparatusKind.RIGID_WALL_PERMEAMETER,
        identifier="PERM-CV2",
        standpipe_area_text="0.282743 cm**2",
        standpipe_area_m2=2.82743e-5,
    )
    # CV1's permeameter: manometer taps 15.0 cm apart (domain-reference §10 CV1).
    spaced = make_item(
        session,
        ApparatusKind.RIGID_WALL_PERMEAMETER,
        identifier="PERM-TAPS",
        port_spacing_text="15.0 cm",
        port_spacing_m=0.15,
        # and a standpipe, so it can also run the falling-head test it is picked for here
        standpipe_area_text="0.50 cm**2",
        standpipe_area_m2=5.0e-5,
    )
    overdue = make_item(
        session,
        ApparatusKind.THERMOMETER,
        identifier="THERM-OLD",
        calibrated_on=date.today() - timedelta(days=400),
        calibration_due=date.today() - timedelta(days=1),
    )
    thermometer = make_item(session, ApparatusKind.THERMOMETER, identifier="THERM-OK")
    make_item(session, ApparatusKind.BALANCE, identifier="BAL-01")
    test = make_test(
        session,
        sample=sample,
        method="falling_head",
        technician_id=technician.id,
        due_date=sample.due_date,
    )
    session.add(TestApparatus(test_id=test.id or 0, apparatus_id=permeameter.id or 0))
    result = Lab(
        session=session,
        client=web_client,
        technician=technician,
        other_technician=make_user(session, role=Role.TECHNICIAN, organisation=lab_org),
        reviewer=make_user(session, role=Role.REVIEWER, organisation=lab_org),
        manager=make_user(session, role=Role.LAB_MANAGER, organisation=lab_org),
        client_user=make_user(session, role=Role.CLIENT, organisation=client_org),
        stranger=make_user(session, role=Role.CLIENT, organisation=other_org),
        sample=sample,
        test=test,
        permeameter=permeameter,
        spaced_permeameter=spaced,
        overdue_thermometer=overdue,
        thermometer=thermometer,
    )
    session.commit()
    return result
