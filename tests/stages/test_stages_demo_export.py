"""The demo holds one flexible-wall test through every stage, and export.json carries each
test's stages (null where not recorded, values as typed beside SI)."""

from __future__ import annotations

import pytest
from sqlmodel import Session, select

from service.accounts.models import User
from service.certificates.models import Certificate, CertificateTest
from service.common import Role
from service.demo import load_demo
from service.exchange.exports import project_json
from service.lab_tests.models import PermeabilityTest
from service.samples.models import Sample
from service.stages.models import TestStage
from tests.certificates.test_certificates import pdf_text

STAGE_KEYS = {"setup", "saturation", "consolidation", "permeation", "post_test"}


def test_the_demo_holds_a_flexible_wall_test_through_every_stage(session: Session) -> None:
    load_demo(session)
    session.commit()
    rows = session.exec(select(TestStage)).all()
    by_test: dict[int, set[str]] = {}
    for row in rows:
        by_test.setdefault(row.test_id, set()).add(row.stage)
    complete = [t for t, names in by_test.items() if names == STAGE_KEYS]
    assert len(complete) == 1
    test = session.get(PermeabilityTest, complete[0])
    assert test is not None
    assert test.state == "issued"
    permeation = next(r for r in rows if r.test_id == test.id and r.stage == "permeation")
    # The trials are the permeation intervals: the test's k20 is the same figure (to the
    # 6 significant digits the intervals were written with).
    assert test.result_k_ref_m_per_s == pytest.approx(permeation.outcome["k_ref_m_per_s"], rel=1e-4)


def test_export_carries_stages_per_test(session: Session) -> None:
    load_demo(session)
    session.commit()
    manager = session.exec(select(User).where(User.role == Role.LAB_MANAGER)).first()
    assert manager is not None
    row = session.exec(select(TestStage).where(TestStage.stage == "permeation")).first()
    assert row is not None
    test = session.get(PermeabilityTest, row.test_id)
    assert test is not None
    sample = session.get(Sample, test.sample_id)
    assert sample is not None
    document = project_json(session, sample.project_id, user=manager)
    tests = [t for s in document["samples"] for t in s["tests"]]
    assert all(set(t["stages"]) == STAGE_KEYS for t in tests)
    staged = next(t for t in tests if t["id"] == test.id)
    reading = staged["stages"]["permeation"]["typed"]["readings"][1]
    assert reading["headwater_pressure"] == "445 kPa"
    # 445 kPa is 445 000 Pa (SI Brochure, 9th ed., table 8).
    assert staged["stages"]["permeation"]["si"]["readings"][1]["headwater_pressure"] == 445_000
    plain = next(t for t in tests if t["id"] != test.id)
    assert plain["stages"]["setup"] is None


def test_the_certificate_shows_the_stages_summary(session: Session) -> None:
    load_demo(session)
    session.commit()
    row = session.exec(select(TestStage).where(TestStage.stage == "permeation")).first()
    assert row is not None
    link = session.exec(
        select(CertificateTest).where(CertificateTest.test_id == row.test_id)
    ).first()
    assert link is not None
    certificate = session.get(Certificate, link.certificate_id)
    assert certificate is not None
    assert certificate.pdf is not None
    text = pdf_text(certificate.pdf)
    assert "Stages of the flexible-wall test" in text
    assert "End of consolidation" in text
    assert "Degree of saturation" in text
    # The stage summary's k20 in plain powers of ten, as the certificate prints it.
    assert f"{row.outcome['k_ref_m_per_s']:.2E} m/s" in text
