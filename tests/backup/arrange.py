"""Fill a database the way a lab's would be: the demo scenario (custody and audit chains,
tests in every state, issued and superseded certificates) and one certificate issued here."""

from __future__ import annotations

from sqlmodel import Session, col, select

from service.accounts.models import User
from service.certificates.models import Certificate
from service.certificates.service import issue_sample_certificate
from service.common import Role, TestState
from service.demo import load_demo
from service.lab_tests.models import PermeabilityTest


def populate(session: Session) -> Certificate:
    """Load the demo and issue the certificate of one sample whose test is approved."""
    assert load_demo(session)
    reviewer = session.exec(select(User).where(User.role == Role.REVIEWER)).first()
    approved = session.exec(
        select(PermeabilityTest)
        .where(PermeabilityTest.state == TestState.APPROVED)
        .order_by(col(PermeabilityTest.id))
    ).first()
    assert reviewer is not None
    assert approved is not None
    certificate = issue_sample_certificate(session, approved.sample_id, actor=reviewer)
    session.flush()
    return certificate
