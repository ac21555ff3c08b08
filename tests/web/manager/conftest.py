"""A small lab for the manager's pages: people in every role, a register, and tests taken
through the lifecycle service (the same calls the pages and the API make)."""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import date, timedelta

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session

from service.accounts.models import Organisation, User
from service.apparatus.models import Apparatus
from service.common import ApparatusKind, OrganisationKind, Preparation, Role, TestMethod
from service.db import utcnow
from service.lab_tests import service as lab_tests
from service.lab_tests.models import PermeabilityTest
from service.lab_tests.schemas import (
    SignOffRequest,
    SpecimenWrite,
    TestCreate,
    TrialCreate,
    TrialExclusion,
)
from service.projects.models import Project
from service.samples.models import Sample
from tests.auth_helpers import sign_in_cookie
from tests.factories import make_organisation, make_project, make_sample, make_user

PASSWORD = "correct horse 42"
HTMX = {"HX-Request": "true"}
# The standpipe of the falling-head cell (invented for the tests).
STANDPIPE_M2 = 0.300e-4
SPECIMEN_D_M = 0.0710
SPECIMEN_L_M = 0.0730


@dataclass
class Lab:
    lab: Organisation
    client_org: Organisation
    manager: User
    reviewer: User
    technician: User
    technician_2: User
    admin: User
    client: User
    project: Project
    permeameter: Apparatus
    balance: Apparatus
    caliper: Apparatus
    overdue_timer: Apparatus


@pytest.fixture
def lab(session: Session) -> Lab:
    lab_org = make_organisation(session, kind=OrganisationKind.LAB, name="Test Soils Lab")
    client_org = make_organisation(session, name="Invented Water Board")
    today = utcnow().date()
    items = [
        Apparatus(
            identifier="PRM-T1",
            kind=ApparatusKind.FLEXIBLE_WALL_PERMEAMETER,
            standpipe_area_m2=STANDPIPE_M2,
            standpipe_area_text="0.300 cm^2",
        ),
        Apparatus(
            identifier="BAL-T1",
            kind=ApparatusKind.BALANCE,
            resolution_si=1e-4,
            resolution_text="0.1 g",
            calibrated_on=today - timedelta(days=30),
            calibration_due=today + timedelta(days=300),
        ),
        Apparatus(
            identifier="CAL-T1",
            kind=ApparatusKind.CALIPER,
            resolution_si=0.02e-3,
            resolution_text="0.02 mm",
        ),
        Apparatus(
            identifier="TMR-T1",
            kind=ApparatusKind.TIMER,
            resolution_si=0.1,
            resolution_text="0.1 s",
            calibrated_on=today - timedelta(days=400),
            calibration_due=today - timedelta(days=10),
        ),
    ]
    for item in items:
        session.add(item)
    session.flush()
    lab = Lab(
        lab=lab_org,
        client_org=client_org,
        manager=make_user(
            session, role=Role.LAB_MANAGER, organisation=lab_org, full_name="Mara Manager"
        ),
        reviewer=make_user(
            session, role=Role.REVIEWER, organisation=lab_org, full_name="Rhys Reviewer"
        ),
        technician=make_user(
            session, role=Role.TECHNICIAN, organisation=lab_org, full_name="Tova Technician"
        ),
        technician_2=make_user(
            session, role=Role.TECHNICIAN, organisation=lab_org, full_name="Udo Second"
        ),
        admin=make_user(session, role=Role.ADMIN, organisation=lab_org, full_name="Ada Admin"),
        client=make_user(session, role=Role.CLIENT, organisation=client_org, full_name="Cy Client"),
        project=make_project(
            session,
            client=client_org,
            number="IW-01",
            spec_k_max_text="1e-9 m/s",
            spec_k_max_m_per_s=1e-9,
        ),
        permeameter=items[0],
        balance=items[1],
        caliper=items[2],
        overdue_timer=items[3],
    )
    session.commit()
    return lab


def new_test(
    session: Session,
    lab: Lab,
    *,
    technician: User | None = None,
    due: date | None = None,
    priority: str = "normal",
    lab_id: str | None = None,
    project: Project | None = None,
) -> PermeabilityTest:
    fields = {"lab_id": lab_id} if lab_id else {}
    sample: Sample = make_sample(
        session, project=project or lab.project, due_date=due, priority=priority, **fields
    )
    assert sample.id is not None
    tech = technician if technician is not None else lab.technician
    test = lab_tests.request_test(
        session,
        sample.id,
        TestCreate(
            method=TestMethod.FALLING_HEAD,
            technician_id=tech.id,
            apparatus_ids=[lab.permeameter.id or 0, lab.balance.id or 0, lab.caliper.id or 0],
        ),
        actor=lab.manager,
    )
    session.commit()
    return test


def falling_head_entries(k: float, temperature: str = "20.0 degC") -> dict[str, str]:
    """h2 from h1 for conductivity k: h2 = h1·exp(−k·A·t/(a·L)) (Darcy, falling head)."""
    area = math.pi * SPECIMEN_D_M**2 / 4
    duration = 6 * 3600.0
    h2 = 1.0 * math.exp(-k * area * duration / (STANDPIPE_M2 * SPECIMEN_L_M))
    return {
        "head_initial": "100.0 cm",
        "head_final": f"{h2 * 100:.2f} cm",
        "duration": "6 h",
        "temperature": temperature,
    }


def submitted_test(
    session: Session,
    lab: Lab,
    *,
    performer: User | None = None,
    with_readings: bool = False,
    k_values: tuple[float, ...] = (2.0e-10, 2.1e-10, 1.95e-10),
    excluded: tuple[int, ...] = (),
    **kwargs: object,
) -> PermeabilityTest:
    """A falling-head test with its specimen and a trial per k (three by default), those
    numbered in `excluded` left out, submitted by `performer`."""
    test = new_test(session, lab, **kwargs)  # type: ignore[arg-type]
    assert test.id is not None
    performer = performer or kwargs.get("technician") or lab.technician  # type: ignore[assignment]
    assert performer is not None
    lab_tests.write_specimen(
        session,
        test.id,
        SpecimenWrite(
            preparation=Preparation.INTACT,
            diameter=f"{SPECIMEN_D_M * 1000:.1f} mm",
            length=f"{SPECIMEN_L_M * 1000:.1f} mm",
            wet_mass="570.0 g",
            water_content="22.0 %",
            specific_gravity=2.70,
        ),
        actor=performer,
    )
    for seq, k in enumerate(k_values, start=1):
        written = lab_tests.record_trial(
            session,
            test.id,
            TrialCreate(**falling_head_entries(k)),
            idempotency_key=f"t{test.id}-{seq}",
            actor=performer,
        )
        if seq in excluded:
            lab_tests.exclude_trial(
                session,
                test.id,
                written.trial.id,
                TrialExclusion(version=written.trial.version, reason="Air in the standpipe line."),
                actor=performer,
            )
    if with_readings:
        # ln h falls linearly with t at the slope k·A/(a·L) of the same specimen (Darcy,
        # falling head), for k = 2.05e-10 m/s; readings to 0.001 cm.
        slope = 2.05e-10 * (math.pi * SPECIMEN_D_M**2 / 4) / (STANDPIPE_M2 * SPECIMEN_L_M)
        readings = [
            {"time": f"{t} s", "head": f"{100 * math.exp(-slope * t):.3f} cm"}
            for t in (0, 5400, 10800, 16200, 21600)
        ]
        lab_tests.record_trial(
            session,
            test.id,
            TrialCreate(readings=readings, temperature="20.0 degC"),  # type: ignore[arg-type]
            idempotency_key=f"t{test.id}-readings",
            actor=performer,
        )
    lab_tests.submit_test(session, test.id, SignOffRequest(password=PASSWORD), actor=performer)
    session.commit()
    return test


def signed_in(session: Session, client: TestClient, user: User) -> dict[str, str]:
    return sign_in_cookie(session, client, user)
