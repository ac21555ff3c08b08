"""The sample page, its custody and test-request forms, and the printable labels."""

from __future__ import annotations

import re

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session, col, select

from service.audit.service import record_created
from service.common import CustodyKind
from service.custody.models import CustodyEvent
from service.custody.service import record_custody
from service.lab_tests.models import PermeabilityTest
from service.samples.models import Sample
from tests.factories import make_sample, make_test
from tests.web.reception.conftest import HTMX, Lab, sign_in


def plain(html: str) -> str:
    """The page's text without tags (figures are wrapped in spans)."""
    return re.sub(r"<[^>]+>", "", html)


@pytest.fixture
def sample(session: Session, lab: Lab) -> Sample:
    row = make_sample(
        session,
        project=lab.project,
        lab_id="26-0042",
        client_sample_id="U-07",
        location_id=lab.bh1.id,
        depth_top_text="1.50 m",
        depth_top_m=1.5,
        depth_bottom_text="2.00 m",
        depth_bottom_m=2.0,
        storage_place="Cold room A / 2",
        received_by_id=lab.technician.id,
    )
    assert row.id is not None
    record_created(session, row, actor_id=lab.technician.id)
    record_custody(
        session,
        sample_id=row.id,
        kind=CustodyKind.RECEIVED,
        actor_id=lab.technician.id,
        from_holder="Courier Nine",
        to_holder="Reception Person",
        place="reception",
    )
    make_test(session, sample=row, state="approved", result_k_ref_m_per_s=1.84e-9)
    make_test(session, sample=row, series=2, state="issued", result_k_ref_m_per_s=2.31e-9)
    session.commit()
    return row


# --- the page ----------------------------------------------------------------------------------


def test_lab_staff_see_details_tests_custody_and_audit(
    web_client: TestClient, session: Session, lab: Lab, sample: Sample
) -> None:
    sign_in(session, web_client, lab.technician)
    page = web_client.get(f"/samples/{sample.id}")
    assert page.status_code == 200
    assert page.headers["vary"] == "HX-Request"
    text = page.text
    shown = plain(text)
    assert "26-0042" in text
    assert "U-07" in text
    assert "BH-01" in text
    assert "1.50 m – 2.00 m" in text
    assert 'data-state="approved"' in text
    assert 'data-state="issued"' in text
    assert "1.84 × 10⁻⁹ m/s" in shown
    assert "2.31 × 10⁻⁹ m/s" in shown
    tests = session.exec(select(PermeabilityTest).order_by(col(PermeabilityTest.series))).all()
    for test in tests:
        assert f'href="/tests/{test.id}"' in text
    assert 'data-testid="custody"' in text
    assert "Courier Nine" in text
    assert 'data-testid="audit"' in text
    assert "storage place" in text
    assert 'id="custody-form"' in text
    assert 'id="test-request-form"' not in text  # technicians do not request tests


def test_sample_fragment_for_htmx(
    web_client: TestClient, session: Session, lab: Lab, sample: Sample
) -> None:
    sign_in(session, web_client, lab.technician)
    fragment = web_client.get(f"/samples/{sample.id}", headers=HTMX)
    assert fragment.status_code == 200
    assert "<!doctype html>" not in fragment.text
    assert fragment.text.lstrip().startswith('<div id="sample-page"')
    assert "HX-Request" in fragment.headers["vary"]


def test_us_units_show_k20_in_feet_per_day(
    web_client: TestClient, session: Session, lab: Lab, sample: Sample
) -> None:
    lab.technician.display_units = "us"
    session.add(lab.technician)
    session.commit()
    sign_in(session, web_client, lab.technician)
    text = plain(web_client.get(f"/samples/{sample.id}").text)
    # 1 m/s = 86 400 s/day ÷ 0.3048 m/ft = 283 464.6 ft/day (exact definitions of day and foot).
    assert "5.22 × 10⁻⁴ ft/day" in text  # 1.84e-9 m/s × 283 464.6 = 5.216e-4


def test_client_sees_own_sample_without_audit_or_uncertified_results(
    web_client: TestClient, session: Session, lab: Lab, sample: Sample
) -> None:
    sign_in(session, web_client, lab.client_user)
    page = web_client.get(f"/samples/{sample.id}")
    assert page.status_code == 200
    assert 'data-testid="audit"' not in page.text
    assert "2.31 × 10⁻⁹ m/s" in plain(page.text)  # issued: certified
    assert "1.84 × 10⁻⁹" not in plain(page.text)  # approved only: not yet certified
    assert "result not yet certified" in page.text
    assert 'id="custody-form"' not in page.text
    assert "/tests/" not in page.text


def test_client_of_another_organisation_gets_404(
    web_client: TestClient, session: Session, lab: Lab, sample: Sample
) -> None:
    csrf = sign_in(session, web_client, lab.other_client_user)
    assert web_client.get(f"/samples/{sample.id}").status_code == 404
    assert web_client.get(f"/samples/{sample.id}", headers=HTMX).status_code == 404
    refused = web_client.post(
        f"/samples/{sample.id}/custody", data={"kind": "moved"}, headers={**csrf, **HTMX}
    )
    assert refused.status_code == 403  # clients record no custody at all


# --- custody -----------------------------------------------------------------------------------


def test_custody_event_is_recorded_and_the_section_comes_back(
    web_client: TestClient, session: Session, lab: Lab, sample: Sample
) -> None:
    csrf = sign_in(session, web_client, lab.technician)
    data = {"kind": "moved", "place": "Prep bench 2", "note": "for trimming"}
    response = web_client.post(f"/samples/{sample.id}/custody", data=data, headers={**csrf, **HTMX})
    assert response.status_code == 200
    assert response.text.lstrip().startswith('<section class="panel" id="sample-custody"')
    assert "Prep bench 2" in response.text
    assert "Custody event recorded" in response.text
    session.commit()
    kinds = session.exec(select(CustodyEvent.kind).order_by(col(CustodyEvent.seq))).all()
    assert kinds == ["received", "moved"]
    session.expire_all()
    assert session.get(Sample, sample.id).storage_place == "Prep bench 2"


def test_refused_custody_event_keeps_what_was_typed(
    web_client: TestClient, session: Session, lab: Lab, sample: Sample
) -> None:
    csrf = sign_in(session, web_client, lab.technician)
    data = {"kind": "shipped", "from_holder": "Store", "note": "to the client"}
    response = web_client.post(f"/samples/{sample.id}/custody", data=data, headers={**csrf, **HTMX})
    assert response.status_code == 422
    message = re.search(r'id="err-to_holder"[^>]*>(.*?)</p>', response.text, re.S)
    assert message
    assert "who took it" in message.group(1)
    assert 'value="Store"' in response.text
    assert 'value="to the client"' in response.text
    assert '<option value="shipped" selected>' in response.text
    session.commit()
    assert len(session.exec(select(CustodyEvent)).all()) == 1


def test_custody_post_without_csrf_is_refused(
    web_client: TestClient, session: Session, lab: Lab, sample: Sample
) -> None:
    sign_in(session, web_client, lab.technician)
    data = {"kind": "moved", "place": "Bay 1"}
    response = web_client.post(f"/samples/{sample.id}/custody", data=data, headers=HTMX)
    assert response.status_code == 403


# --- requesting a test -------------------------------------------------------------------------


@pytest.mark.parametrize("role", ["manager", "reviewer"])
def test_manager_or_reviewer_requests_a_test_with_the_project_limit(
    web_client: TestClient, session: Session, lab: Lab, sample: Sample, role: str
) -> None:
    csrf = sign_in(session, web_client, getattr(lab, role))
    page = web_client.get(f"/samples/{sample.id}")
    assert 'id="test-request-form"' in page.text
    assert "1e-9 m/s (the project's)" in plain(page.text)
    data = {"method": "constant_head", "standard": "ASTM D5084", "reference_temperature_c": "20"}
    response = web_client.post(f"/samples/{sample.id}/tests", data=data, headers={**csrf, **HTMX})
    assert response.status_code == 200
    assert response.text.lstrip().startswith('<section class="panel" id="sample-tests"')
    session.commit()
    test = session.exec(select(PermeabilityTest).where(PermeabilityTest.series == 3)).one()
    assert (test.method, test.standard, test.state) == ("constant_head", "ASTM D5084", "planned")
    assert test.spec_k_max_m_per_s == 1e-9  # inherited from the project


def test_refused_test_request_keeps_the_choices(
    web_client: TestClient, session: Session, lab: Lab, sample: Sample
) -> None:
    csrf = sign_in(session, web_client, lab.manager)
    data = {"method": "falling_head", "standard": "ISO 17892-11", "reference_temperature_c": "25"}
    response = web_client.post(f"/samples/{sample.id}/tests", data=data, headers={**csrf, **HTMX})
    assert response.status_code == 422
    message = re.search(r'id="err-reference_temperature_c"[^>]*>(.*?)</p>', response.text, re.S)
    assert message
    assert "10, 20, 27" in message.group(1)
    assert 'name="reference_temperature_c" type="text" value="25"' in response.text
    assert '<option value="ISO 17892-11" selected>' in response.text


@pytest.mark.parametrize("role", ["technician", "client_user"])
def test_other_roles_cannot_request_tests(
    web_client: TestClient, session: Session, lab: Lab, sample: Sample, role: str
) -> None:
    csrf = sign_in(session, web_client, getattr(lab, role))
    data = {"method": "falling_head", "reference_temperature_c": "20"}
    response = web_client.post(f"/samples/{sample.id}/tests", data=data, headers={**csrf, **HTMX})
    assert response.status_code == 403


# --- labels ------------------------------------------------------------------------------------


def test_labels_show_lab_id_project_client_id_depth_and_a_qr_code(
    web_client: TestClient, session: Session, lab: Lab, sample: Sample
) -> None:
    other = make_sample(session, project=lab.project, lab_id="26-0043")
    session.commit()
    sign_in(session, web_client, lab.technician)
    page = web_client.get(f"/samples/labels?ids={sample.id},{other.id}")
    assert page.status_code == 200
    labels = page.text.split('<article class="label"')[1:]
    assert len(labels) == 2
    first = labels[0]
    assert '<p class="label__lab-id">26-0042</p>' in first
    assert "P-100" in first
    assert "U-07" in first
    assert "1.50 m – 2.00 m" in first
    # A 7-character ID fits QR version 1 (21 × 21 modules) at error level M (ISO/IEC 18004
    # capacity table: 14 bytes, from memory); with the 4-module quiet zone the box is 29.
    assert re.search(r'<svg viewBox="0 0 29 29" class="qr"', first)
    assert "<script" not in page.text.split("<main")[1]
    fragment = web_client.get(f"/samples/labels?ids={sample.id}", headers=HTMX)
    assert fragment.text.lstrip().startswith('<div class="label-sheet"')


def test_label_css_has_print_rules(web_client: TestClient) -> None:
    css = web_client.get("/static/css/reception.css").text
    assert "@media print" in css
    assert ".label-sheet" in css


@pytest.mark.parametrize("ids", ["", "1,x", "-3"])
def test_bad_label_ids_are_refused_naming_the_field(
    web_client: TestClient, session: Session, lab: Lab, ids: str
) -> None:
    sign_in(session, web_client, lab.technician)
    response = web_client.get(f"/samples/labels?ids={ids}")
    assert response.status_code == 422
    assert "ids:" in response.text
    assert "accepted" in response.text


def test_labels_are_for_lab_staff(
    web_client: TestClient, session: Session, lab: Lab, sample: Sample
) -> None:
    sign_in(session, web_client, lab.client_user)
    assert web_client.get(f"/samples/labels?ids={sample.id}").status_code == 403


def test_labels_of_an_unknown_sample_are_404(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    sign_in(session, web_client, lab.technician)
    assert web_client.get("/samples/labels?ids=987654").status_code == 404
