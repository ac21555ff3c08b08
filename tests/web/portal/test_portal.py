"""The client portal: its own organisation's projects only, statuses, k20 of approved and
certified tests only, compliance, the depth plot, downloads and verification links."""

from __future__ import annotations

import re

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session

from service.common import Role
from service.web.display import sci
from tests.auth_helpers import sign_in_cookie
from tests.certificates.arrange import HEADS_CM, expected_k_method_c
from tests.factories import make_user
from tests.web.portal.conftest import RUNNING_K, SUBMITTED_K, Portal

HTMX = {"HX-Request": "true", "HX-Target": "portal-samples"}


def is_full_page(text: str) -> bool:
    return text.lstrip().lower().startswith("<!doctype html>")


def as_client(session: Session, web_client: TestClient, portal: Portal) -> None:
    sign_in_cookie(session, web_client, portal.world.client_user)


def row_of(text: str, lab_id: str) -> str:
    """The table row of one sample."""
    match = re.search(rf'<tr data-lab-id="{lab_id}">(.*?)</tr>', text, re.S)
    assert match, f"no row for {lab_id}"
    return match.group(1)


def plotted_points(text: str) -> int:
    """Data points of the depth plot (legend markers are outside the series groups)."""
    series = re.findall(r'<g class="series"[^>]*>((?:<g class="point".*?</g>)*)</g>', text)
    return sum(group.count('class="point"') for group in series)


def project_url(portal: Portal) -> str:
    return f"/portal/projects/{portal.world.project.id}"


# ---------- pages, fragments, Vary ----------


def test_portal_home_lists_only_the_clients_projects(
    session: Session, web_client: TestClient, portal: Portal
) -> None:
    as_client(session, web_client, portal)
    response = web_client.get("/portal")
    assert response.status_code == 200
    assert is_full_page(response.text)
    assert response.headers["vary"] == "HX-Request"
    assert f'href="{project_url(portal)}"' in response.text
    assert portal.world.project.number in response.text
    assert "OT-1" not in response.text


def test_project_page_is_a_full_page_and_its_table_a_fragment(
    session: Session, web_client: TestClient, portal: Portal
) -> None:
    as_client(session, web_client, portal)
    page = web_client.get(project_url(portal))
    assert page.status_code == 200
    assert is_full_page(page.text)
    assert page.headers["vary"] == "HX-Request"
    assert 'id="portal-samples"' in page.text
    fragment = web_client.get(f"{project_url(portal)}?status=certified", headers=HTMX)
    assert fragment.status_code == 200
    assert fragment.headers["vary"] == "HX-Request"
    assert fragment.text.lstrip().startswith('<div id="portal-samples"')
    assert "<html" not in fragment.text
    # The filter keeps only the certified sample.
    assert re.findall(r'data-lab-id="([^"]+)"', fragment.text) == ["26-0107"]


def test_location_filter_narrows_the_table(
    session: Session, web_client: TestClient, portal: Portal
) -> None:
    as_client(session, web_client, portal)
    response = web_client.get(f"{project_url(portal)}?location=TP-03", headers=HTMX)
    assert re.findall(r'data-lab-id="([^"]+)"', response.text) == ["26-0108"]


def test_an_unknown_filter_value_is_refused_naming_it_and_the_accepted_ones(
    session: Session, web_client: TestClient, portal: Portal
) -> None:
    as_client(session, web_client, portal)
    response = web_client.get(f"{project_url(portal)}?status=lost", headers=HTMX)
    assert response.status_code == 422
    assert "status: &#39;lost&#39; is not a status here" in response.text
    assert "received, in_testing, awaiting_review, approved, certified" in response.text
    # Everything is still listed, so the page stays useful.
    assert len(re.findall(r'data-lab-id="', response.text)) == 5


# ---------- who may see it ----------


def other_org_urls(portal: Portal) -> list[str]:
    project_id = portal.world.project.id
    return [
        f"/portal/projects/{project_id}",
        f"/portal/projects/{project_id}?status=certified",
        f"/api/v1/projects/{project_id}/results.csv",
        f"/api/v1/projects/{project_id}/results.xlsx",
        f"/api/v1/certificates/{portal.certificate.id}/pdf",
        "/portal/projects/999999",
    ]


def test_a_client_of_another_organisation_gets_404_on_every_portal_url(
    session: Session, web_client: TestClient, portal: Portal
) -> None:
    sign_in_cookie(session, web_client, portal.other_client)
    for url in other_org_urls(portal):
        for headers in ({}, HTMX):
            response = web_client.get(url, headers=headers)
            assert response.status_code == 404, url
            assert portal.world.project.name not in response.text
            assert "26-0107" not in response.text
    # Their own project still opens.
    own = web_client.get(f"/portal/projects/{portal.other_project.id}")
    assert own.status_code == 200


@pytest.mark.parametrize("role", [Role.TECHNICIAN, Role.REVIEWER, Role.LAB_MANAGER, Role.ADMIN])
def test_lab_staff_are_refused_the_portal(
    session: Session, web_client: TestClient, portal: Portal, role: Role
) -> None:
    staff = make_user(session, role=role, organisation=portal.world.lab)
    sign_in_cookie(session, web_client, staff)
    for url in ("/portal", project_url(portal)):
        response = web_client.get(url)
        assert response.status_code == 403, url
        assert "client" in response.text


def test_signed_out_visitors_are_sent_to_sign_in(web_client: TestClient, portal: Portal) -> None:
    response = web_client.get(project_url(portal))
    assert response.status_code == 303
    assert response.headers["location"] == f"/sign-in?next={project_url(portal)}"


# ---------- what the client sees ----------


def test_each_sample_shows_its_status_in_words(
    session: Session, web_client: TestClient, portal: Portal
) -> None:
    as_client(session, web_client, portal)
    text = web_client.get(project_url(portal)).text
    expected = {
        "26-0107": ("certified", "Certified"),
        "26-0108": ("approved", "Approved"),
        "26-0109": ("in_testing", "In testing"),
        "26-0110": ("awaiting_review", "Awaiting review"),
        "26-0111": ("received", "Received"),
    }
    for lab_id, (key, words) in expected.items():
        row = row_of(text, lab_id)
        assert f'data-status="{key}"' in row
        assert f"</svg>{words}</span>" in row  # the word beside its shape


def test_a_client_never_sees_running_or_submitted_numbers(
    session: Session, web_client: TestClient, portal: Portal
) -> None:
    as_client(session, web_client, portal)
    for units in ("si", "us"):
        portal.world.client_user.display_units = units
        session.add(portal.world.client_user)
        session.commit()
        text = web_client.get(project_url(portal)).text
        for k in (RUNNING_K, SUBMITTED_K):
            assert str(sci(k)) not in text
            assert str(sci(k * 86_400 / 0.3048)) not in text
        for lab_id in ("26-0109", "26-0110", "26-0111"):
            row = row_of(text, lab_id)
            assert "m/s" not in row
            assert "ft/day" not in row
            assert "no approved result yet" in row
        # Nor in the plot: only the certified and the approved point are drawn.
        assert plotted_points(text) == 2


def test_k20_matches_the_hand_calculation(
    session: Session, web_client: TestClient, portal: Portal
) -> None:
    # k = a_in·a_out·L / ((a_in + a_out)·A·t) · ln(h1/h2), ASTM D5084 Method C (falling
    # headwater, rising tailwater); all trials at 20.0 °C so k20 = k. Equation from memory.
    expected = sum(expected_k_method_c(h1, h2) for h1, h2 in HEADS_CM) / len(HEADS_CM)
    as_client(session, web_client, portal)
    row = row_of(web_client.get(project_url(portal)).text, "26-0107")
    shown = re.search(r'<span class="portal-k"><span class="sci">([\d.]+) × 10⁻¹⁰</span> m/s', row)
    assert shown, row
    assert float(shown.group(1)) * 1e-10 == pytest.approx(expected, rel=5e-3)


def test_approved_results_are_marked_not_yet_certified(
    session: Session, web_client: TestClient, portal: Portal
) -> None:
    as_client(session, web_client, portal)
    text = web_client.get(project_url(portal)).text
    approved = row_of(text, "26-0108")
    certified = row_of(text, "26-0107")
    assert "Not yet certified" in approved
    assert "m/s" in approved
    assert "Not yet certified" not in certified
    assert "not issued yet" in approved
    assert portal.certificate.number in certified


def test_compliance_with_the_limit_is_shown_with_the_cautions(
    session: Session, web_client: TestClient, portal: Portal
) -> None:
    # Limit 1e-9 m/s (the arrangement's specification): the certified k20 ≈ 8.0e-10 m/s is
    # within it; the approved one, ln(125/100) over ln(125/113.9) times larger, is not.
    as_client(session, web_client, portal)
    text = web_client.get(project_url(portal)).text
    assert 'data-compliance="complies"' in row_of(text, "26-0107")
    assert 'data-compliance="does_not_comply"' in row_of(text, "26-0108")
    assert "Exceeds the limit" in row_of(text, "26-0108")
    assert "licensed engineer" in text
    assert "field can differ" in text
    assert "not a finding that the works or the site comply" in text


def test_the_plot_has_a_series_per_location_and_a_log_axis(
    session: Session, web_client: TestClient, portal: Portal
) -> None:
    as_client(session, web_client, portal)
    text = web_client.get(project_url(portal)).text
    assert 'data-testid="k-depth-plot"' in text
    assert 'data-location="BH-07"' in text
    assert 'data-location="TP-03 (not yet certified)"' in text
    assert "log scale" in text
    assert "Depth below ground level (m)" in text


def test_downloads_and_verification_links(
    session: Session, web_client: TestClient, portal: Portal
) -> None:
    as_client(session, web_client, portal)
    text = web_client.get(project_url(portal)).text
    project_id = portal.world.project.id
    for href in (
        f"/api/v1/projects/{project_id}/results.csv",
        f"/api/v1/projects/{project_id}/results.xlsx",
        f"/api/v1/certificates/{portal.certificate.id}/pdf",
        f"/verify/{portal.certificate.verification_code}",
    ):
        assert f'href="{href}"' in text
        response = web_client.get(href)  # the browser's cookie is enough for every download
        assert response.status_code == 200, href
    csv = web_client.get(f"/api/v1/projects/{project_id}/results.csv").text
    assert "26-0107" in csv
    assert "26-0108" not in csv  # exports hold certified results only
    pdf = web_client.get(f"/api/v1/certificates/{portal.certificate.id}/pdf")
    assert pdf.content.startswith(b"%PDF-")


def test_a_superseded_certificate_is_marked_and_the_current_one_linked(
    session: Session, web_client: TestClient, portal: Portal
) -> None:
    from service.certificates.service import issue_sample_certificate
    from service.common import TestState
    from tests.certificates.arrange import add_approved_test

    world = portal.world
    world.test.state = TestState.ISSUED
    add_approved_test(
        session,
        sample=world.sample,
        technician=world.technician,
        reviewer=world.reviewer,
        permeameter=world.permeameter,
        length_text="72.30 mm",
        revision=2,
        supersedes=world.test,
        correction_reason="Specimen length mistyped.",
    )
    assert world.sample.id is not None
    second = issue_sample_certificate(session, world.sample.id, actor=world.manager)
    session.commit()
    as_client(session, web_client, portal)
    text = web_client.get(project_url(portal)).text
    old = re.search(rf'<tr data-certificate="{second.number}-1".*?</tr>', text, re.S)
    new = re.search(rf'<tr data-certificate="{second.number}-2".*?</tr>', text, re.S)
    assert old
    assert new
    assert 'data-certificate-state="superseded"' in old.group(0)
    assert "by rev. 2" in old.group(0)
    assert 'data-certificate-state="issued"' in new.group(0)
    row = row_of(text, "26-0107")
    assert f"/verify/{second.verification_code}" in row
    assert f"/verify/{portal.certificate.verification_code}" not in row


# ---------- units ----------


def test_us_units_convert_with_the_published_factors(
    session: Session, web_client: TestClient, portal: Portal
) -> None:
    # 1 ft = 0.3048 m exactly (international foot, 1959); 1 day = 86 400 s.
    as_client(session, web_client, portal)
    si = web_client.get(project_url(portal)).text
    assert "4.5 m to 4.95 m" in row_of(si, "26-0107")
    portal.world.client_user.display_units = "us"
    session.add(portal.world.client_user)
    session.commit()
    us = web_client.get(project_url(portal)).text
    row = row_of(us, "26-0107")
    assert f"{4.5 / 0.3048:.3g} ft to {4.95 / 0.3048:.3g} ft" in row  # 14.8 ft to 16.2 ft
    k_ft_day = portal.certified.result_k_ref_m_per_s * 86_400 / 0.3048  # type: ignore[operator]
    assert f"{k_ft_day / 1e-4:.2f} × 10⁻⁴</span> ft/day" in row
    # The limit, 1e-9 m/s = 2.83e-4 ft/day.
    assert "2.83 × 10⁻⁴</span> ft/day" in us
