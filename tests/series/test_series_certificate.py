"""The project summary certificate carries a compaction-series section: the specimens with
their moulding state as typed, k20 of the certified tests only, the acceptable zone in words
and the caution deferring design use to local codes and licensed practice."""

from __future__ import annotations

import io

from pypdf import PdfReader
from sqlmodel import Session

from service.certificates.service import issue_project_certificate, issue_sample_certificate
from service.series.service import MemberCreate, SeriesCreate, add_member, create_series
from tests.certificates.arrange import World, build_world
from tests.certificates.test_certificates import written
from tests.factories import make_sample, make_test


def pdf_text(pdf: bytes) -> str:
    return "\n".join(page.extract_text() for page in PdfReader(io.BytesIO(pdf)).pages)


def test_project_summary_shows_the_series(session: Session) -> None:
    world: World = build_world(session)
    assert world.project.id is not None
    assert world.sample.id is not None
    issue_sample_certificate(session, world.sample.id, actor=world.manager)
    # approved but not certified: listed without its k20
    pending = make_test(
        session,
        sample=make_sample(session, project=world.project, lab_id="26-0990"),
        state="approved",
        result_k_ref_m_per_s=4e-9,
    )
    series = create_series(
        session, world.project.id, SeriesCreate(name="Borrow A"), actor=world.manager
    )
    assert series.id is not None
    for test_id, label, w, rho in (
        (world.test.id, "S1", "18.0 %", "1.760 g/cm**3"),
        (pending.id, "S2", "12.0 %", "1.700 g/cm**3"),
    ):
        assert test_id is not None
        data = MemberCreate(test_id=test_id, label=label, water_content=w, dry_density=rho)
        add_member(session, series.id, data, actor=world.manager)
    summary = issue_project_certificate(session, world.project.id, actor=world.manager)
    session.commit()
    text = pdf_text(summary.pdf)
    assert "Compaction series: Borrow A" in text
    assert "1.760 g/cm**3" in text
    # S of S1 by hand: 0.18 × 2.70 × 1760/(2700 − 1760) = 0.9100 (tests/engine/test_series.py D)
    assert "91.0" in text
    assert world.test.result is not None
    assert written(world.test.result["result"]["k_ref_m_per_s"]) in text
    assert written(4.0e-9) not in text  # the uncertified test's k20 is not on the certificate
    assert "licensed practice" in text
