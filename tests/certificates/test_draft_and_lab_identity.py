"""The draft certificate (watermarked, unnumbered, unsigned, not stored) and the laboratory's
identity as its settings give it, on certificates and pages."""

from __future__ import annotations

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session, func, select

from service.audit.models import AuditEvent
from service.audit.service import history
from service.certificates.models import Certificate
from service.certificates.service import draft_sample_certificate, issue_sample_certificate
from service.common import Role, TestState
from service.errors import InvalidInput, InvalidTransition, PermissionDenied, StaleVersion
from service.laboratory.service import lab_settings, save_lab_settings
from tests.auth_helpers import sign_in_cookie
from tests.certificates.arrange import World
from tests.certificates.test_certificates import pdf_text
from tests.factories import make_user

IDENTITY = {
    "name": "Brackenridge Geotechnical Testing (invented)",
    "address": "2 Mill Lane\nUpper Brackenridge",
    "accreditation_body": "Example Accreditation Service (invented)",
    "accreditation_number": "T-0917",
}


def _count(session: Session, model: type) -> int:
    return int(session.exec(select(func.count()).select_from(model)).one())


def test_draft_is_marked_unnumbered_unsigned_and_stores_nothing(
    session: Session, world: World
) -> None:
    assert world.sample.id is not None
    certificates, audit_rows = _count(session, Certificate), _count(session, AuditEvent)
    pdf = draft_sample_certificate(session, world.sample.id, actor=world.manager)
    text = pdf_text(pdf)
    assert pdf.startswith(b"%PDF")
    assert "DRAFT — not for use" in text
    assert "not signed" in text
    assert "given at issue" in text  # no certificate number
    assert "Verification code" not in text
    assert "26-0107" in text  # the sample's own content is there to check
    assert _count(session, Certificate) == certificates
    assert _count(session, AuditEvent) == audit_rows
    session.refresh(world.test)
    assert world.test.state == TestState.APPROVED  # not marked issued


def test_draft_needs_a_reviewer_and_a_reviewed_test(session: Session, world: World) -> None:
    assert world.sample.id is not None
    with pytest.raises(PermissionDenied):
        draft_sample_certificate(session, world.sample.id, actor=world.technician)
    world.test.state = TestState.RUNNING
    session.add(world.test)
    session.flush()
    with pytest.raises(InvalidTransition):
        draft_sample_certificate(session, world.sample.id, actor=world.manager)


def test_draft_page_route_answers_a_pdf(session: Session, world: World, client: TestClient) -> None:
    sign_in_cookie(session, client, world.manager)
    answer = client.get(f"/tests/{world.test.id}/review/draft.pdf")
    assert answer.status_code == 200
    assert answer.headers["content-type"] == "application/pdf"
    assert answer.headers["cache-control"] == "no-store"
    assert "DRAFT" in pdf_text(answer.content)
    review = client.get(f"/tests/{world.test.id}/review")
    assert 'data-testid="draft-certificate"' in review.text


def test_certificate_and_footer_name_the_lab_from_its_settings(
    session: Session, world: World, client: TestClient
) -> None:
    admin = make_user(session, role=Role.ADMIN, organisation=world.lab)
    save_lab_settings(session, actor=admin, version=None, values=IDENTITY)
    session.commit()
    assert world.sample.id is not None
    certificate = issue_sample_certificate(session, world.sample.id, actor=world.manager)
    session.commit()
    text = pdf_text(certificate.pdf)
    assert IDENTITY["name"] in text
    assert "Upper Brackenridge" in text
    assert "Accredited by Example Accreditation Service (invented), no. T-0917" in text
    assert world.lab.name not in text  # the organisation's name gave way to the settings'
    sign_in_cookie(session, client, world.technician)
    page = client.get("/")
    assert IDENTITY["name"] in page.text
    assert "no. T-0917" in page.text


def test_lab_settings_default_to_the_lab_organisation(session: Session, world: World) -> None:
    settings = lab_settings(session)
    assert settings.id is None
    assert settings.name == world.lab.name


def test_lab_settings_are_audited_versioned_and_admin_only(session: Session, world: World) -> None:
    admin = make_user(session, role=Role.ADMIN, organisation=world.lab)
    with pytest.raises(PermissionDenied):
        save_lab_settings(session, actor=world.manager, version=None, values=IDENTITY)
    saved = save_lab_settings(session, actor=admin, version=None, values=IDENTITY)
    assert saved.id is not None
    save_lab_settings(session, actor=admin, version=1, values={"accreditation_number": "T-1"})
    changes = history(session, "lab_settings", saved.id)
    assert {c.field for c in changes if c.old_value is None} >= set(IDENTITY)  # the creation
    last = changes[-1]
    assert (last.field, last.old_value, last.new_value) == ("accreditation_number", "T-0917", "T-1")
    assert last.actor_id == admin.id
    with pytest.raises(StaleVersion):
        save_lab_settings(session, actor=admin, version=1, values={"name": "Another name"})
    with pytest.raises(InvalidInput) as refused:
        save_lab_settings(session, actor=admin, version=2, values={"name": "   "})
    assert refused.value.problems[0].loc == ("name",)
    with pytest.raises(InvalidInput):
        save_lab_settings(session, actor=admin, version=2, values={"name": "x" * 201})
    with pytest.raises(InvalidInput):  # hostile: a column that is not a setting
        save_lab_settings(session, actor=admin, version=2, values={"id": 5})
