"""Fixtures of the portal and account page tests: a client's project whose samples stand in
every state a client can see, and a second client organisation that must see none of it."""

from __future__ import annotations

from dataclasses import dataclass

import pytest
from sqlmodel import Session

from service.accounts.models import User
from service.certificates.models import Certificate
from service.certificates.service import issue_sample_certificate
from service.common import Role, TestState
from service.lab_tests.models import PermeabilityTest
from service.projects.models import Location, Project
from service.samples.models import Sample
from tests.certificates.arrange import World, add_approved_test, build_world
from tests.factories import make_project, make_sample, make_user

# Figures stored on tests a client must never see (a running test sent back keeps its last
# submitted result; a submitted one may still be sent back). Distinctive on purpose.
RUNNING_K = 3.21e-7
SUBMITTED_K = 6.54e-8


@dataclass
class Portal:
    world: World
    certified: PermeabilityTest
    certificate: Certificate
    approved: PermeabilityTest
    approved_sample: Sample
    running: PermeabilityTest
    submitted: PermeabilityTest
    received: Sample
    second_location: Location
    other_client: User
    other_project: Project


def _stored_result_like(test: PermeabilityTest, source: PermeabilityTest, k: float) -> None:
    """Give `test` a stored result (as a sent-back or submitted test has) with k = `k`."""
    assert source.result is not None
    result = dict(source.result)
    result["result"] = {**result["result"], "k_ref_m_per_s": k}
    test.result = result
    test.result_k_ref_m_per_s = k


@pytest.fixture
def portal(session: Session) -> Portal:
    world = build_world(session)
    assert world.sample.id is not None
    certificate = issue_sample_certificate(session, world.sample.id, actor=world.reviewer)
    second = Location(project_id=world.project.id or 0, name="TP-03", kind="test_pit")
    session.add(second)
    session.flush()
    approved_sample = make_sample(
        session,
        project=world.project,
        lab_id="26-0108",
        location_id=second.id,
        client_sample_id="TP-03/B1",
        depth_top_m=1.2,
        depth_top_text="1.20 m",
        depth_bottom_m=1.6,
        depth_bottom_text="1.60 m",
    )
    # A faster specimen than the limit allows: heads chosen so k20 exceeds 1e-9 m/s.
    approved = add_approved_test(
        session,
        sample=approved_sample,
        technician=world.technician,
        reviewer=world.reviewer,
        permeameter=world.permeameter,
        heads=((125.0, 100.0), (125.0, 100.2), (124.0, 99.4)),
    )
    running_sample = make_sample(
        session, project=world.project, lab_id="26-0109", location_id=world.location.id
    )
    running = add_approved_test(
        session,
        sample=running_sample,
        technician=world.technician,
        reviewer=world.reviewer,
        permeameter=world.permeameter,
    )
    running.state = TestState.RUNNING
    running.sent_back_reason = "Trial 3 temperature looks mistyped."
    _stored_result_like(running, world.test, RUNNING_K)
    submitted_sample = make_sample(
        session, project=world.project, lab_id="26-0110", location_id=world.location.id
    )
    submitted = add_approved_test(
        session,
        sample=submitted_sample,
        technician=world.technician,
        reviewer=world.reviewer,
        permeameter=world.permeameter,
    )
    submitted.state = TestState.SUBMITTED
    _stored_result_like(submitted, world.test, SUBMITTED_K)
    session.add_all([running, submitted])
    received = make_sample(
        session, project=world.project, lab_id="26-0111", location_id=world.location.id
    )
    other_client = make_user(session, role=Role.CLIENT, full_name="Other Client")
    other_org_project = make_project(
        session,
        client=session.get(type(world.client_org), other_client.organisation_id),
        number="OT-1",
    )
    session.commit()
    session.refresh(world.test)
    return Portal(
        world=world,
        certified=world.test,
        certificate=certificate,
        approved=approved,
        approved_sample=approved_sample,
        running=running,
        submitted=submitted,
        received=received,
        second_location=second,
        other_client=other_client,
        other_project=other_org_project,
    )
