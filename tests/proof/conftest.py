"""A lab with something in every state, and a signed-in identity for every role.

The approved test and its rows come from tests/certificates/arrange.py; a running test (one
trial recorded, assigned to the technician) and a submitted test are added beside it on a
second sample of the same client, and a second client organisation with its own user."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session, delete, select

from service.accounts.models import Organisation, User
from service.apparatus.models import Apparatus
from service.audit.service import record_created
from service.certificates.models import Certificate
from service.certificates.service import issue_sample_certificate
from service.common import CustodyKind, Role, TestState
from service.custody.service import record_custody
from service.lab_tests.models import (
    PermeabilityTest,
    SaturationStep,
    Specimen,
    TestApparatus,
    Trial,
)
from service.projects.models import Project
from service.samples.models import Sample
from service.signoffs.models import SignOff
from tests.auth_helpers import bearer
from tests.certificates.arrange import World, build_world
from tests.factories import make_organisation, make_sample, make_user

PASSWORD = "correct horse 42"  # tests.factories.make_user's default
# Identities in the order the access matrix tries them: refusals first, so that a write by an
# allowed identity cannot change what a refused one is told.
IDENTITIES = (
    "anonymous",
    "other_client",
    "client",
    "reception",
    "technician",
    "reviewer",
    "lab_manager",
    "admin",
)


@dataclass
class Proof:
    session: Session
    client: TestClient
    world: World
    users: dict[str, User]
    other_org: Organisation
    running: PermeabilityTest
    submitted: PermeabilityTest
    trial: Trial
    second_sample: Sample
    _headers: dict[str, dict[str, str]] = field(default_factory=dict)
    _certificate: Certificate | None = None

    def headers(self, identity: str) -> dict[str, str]:
        """Bearer headers for an identity of IDENTITIES ({} for anonymous)."""
        if identity == "anonymous":
            return {}
        if identity not in self._headers:
            self._headers[identity] = bearer(self.session, self.users[identity])
        return dict(self._headers[identity])

    @property
    def certificate(self) -> Certificate:
        """A certificate for the approved test's sample, issued on first use (PDF takes time)."""
        if self._certificate is None:
            assert self.world.sample.id is not None
            self._certificate = issue_sample_certificate(
                self.session, self.world.sample.id, actor=self.world.manager
            )
            self.session.commit()
        return self._certificate

    def fresh_version(self, what: str) -> int:
        """The version a row has now (an earlier request may have bumped it)."""
        rows: dict[str, tuple[type[Any], int | None]] = {
            "user": (User, self.world.technician.id),
            "apparatus": (Apparatus, self.world.permeameter.id),
            "project": (Project, self.world.project.id),
            "sample": (Sample, self.world.sample.id),
            "running": (PermeabilityTest, self.running.id),
            "trial": (Trial, self.trial.id),
        }
        model, row_id = rows[what]
        self.session.expire_all()
        row = self.session.get(model, row_id)
        assert row is not None
        return int(row.version)


def _rewind(session: Session, test: PermeabilityTest, state: TestState) -> None:
    """Move an approved test arranged by add_approved_test back to `state`."""
    test.state = state
    test.reviewer_id = None
    test.approved_at = None
    drop = [SignOff.meaning == "approved"]
    if state == TestState.RUNNING:
        test.submitted_at = None
        test.result = None
        test.result_k_ref_m_per_s = None
        test.engine_version = ""
        test.input_hash = ""
        drop = []
    statement = delete(SignOff).where(SignOff.test_id == test.id, *drop)  # type: ignore[arg-type]
    session.exec(statement)  # type: ignore[call-overload]
    session.add(test)
    session.flush()


def clone_test(
    session: Session, source: PermeabilityTest, *, sample: Sample, series: int, trials: int
) -> PermeabilityTest:
    """A copy of `source` (request, specimen, saturation, its first `trials` trials, stored
    result) as another series on `sample`: cheaper than reducing again."""
    assert source.id is not None
    skip = {"id", "sample_id", "series", "version"}
    test = PermeabilityTest(**source.model_dump(exclude=skip), sample_id=sample.id, series=series)
    session.add(test)
    session.flush()
    for model in (TestApparatus, Specimen, SaturationStep, SignOff):
        for row in session.exec(select(model).where(model.test_id == source.id)):
            copied = row.model_dump(exclude={"id", "test_id", "version"})
            session.add(model(**copied, test_id=test.id))
    for trial in session.exec(
        select(Trial).where(Trial.test_id == source.id).order_by(Trial.seq)  # type: ignore[arg-type]
    ).all()[:trials]:
        copied = trial.model_dump(exclude={"id", "test_id", "version", "idempotency_key"})
        session.add(Trial(**copied, test_id=test.id, idempotency_key=f"copy-{test.id}-{trial.seq}"))
    session.flush()
    return test


def build_proof(session: Session, client: TestClient) -> Proof:
    world = build_world(session)
    admin = make_user(session, role=Role.ADMIN, organisation=world.lab)
    reception = make_user(session, role=Role.RECEPTION, organisation=world.lab)
    other_org = make_organisation(session, name="Fernbrook Levee Board (invented)")
    other_client = make_user(session, role=Role.CLIENT, organisation=other_org)
    second = make_sample(session, project=world.project, lab_id="26-0108")
    running = clone_test(session, world.test, sample=second, series=1, trials=1)
    _rewind(session, running, TestState.RUNNING)
    submitted = clone_test(session, world.test, sample=second, series=2, trials=4)
    _rewind(session, submitted, TestState.SUBMITTED)
    trial = session.exec(select(Trial).where(Trial.test_id == running.id)).one()
    # Both chains already hold entries, as in any lab that has received a sample (a chain's
    # very first entry has its own test: see test_chains.py).
    for sample in (world.sample, second):
        assert sample.id is not None
        record_custody(
            session,
            sample_id=sample.id,
            kind=CustodyKind.RECEIVED,
            actor_id=world.technician.id,
            place="Cold room A",
        )
        record_created(session, sample, actor_id=world.technician.id)
    session.commit()
    users = {
        "reception": reception,
        "technician": world.technician,
        "reviewer": world.reviewer,
        "lab_manager": world.manager,
        "admin": admin,
        "client": world.client_user,
        "other_client": other_client,
    }
    return Proof(
        session=session,
        client=client,
        world=world,
        users=users,
        other_org=other_org,
        running=running,
        submitted=submitted,
        trial=trial,
        second_sample=second,
    )


@pytest.fixture
def proof(session: Session, client: TestClient) -> Proof:
    return build_proof(session, client)
