"""The project list, a project's page, and the lab manager's project and location forms."""

from __future__ import annotations

import re

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session, select

from service.projects.models import Location, Project
from tests.factories import make_sample, make_test
from tests.web.reception.conftest import HTMX, Lab, sign_in


def plain(html: str) -> str:
    return re.sub(r"<[^>]+>", "", html)


def message_for(html: str, name: str) -> str:
    found = re.search(rf'id="err-{name}"[^>]*>(.*?)</p>', html, re.S)
    return plain(found.group(1)) if found else ""


# --- the list ----------------------------------------------------------------------------------


def test_list_page_and_search_fragment(web_client: TestClient, session: Session, lab: Lab) -> None:
    sign_in(session, web_client, lab.technician)
    page = web_client.get("/projects")
    assert page.status_code == 200
    assert page.headers["vary"] == "HX-Request"
    assert "P-100 · East levee raise" in page.text
    assert "Q-7 · Other work" in page.text
    assert "Northfield Dykes Board" in page.text
    assert 'id="project-create"' not in page.text  # technicians do not open projects
    fragment = web_client.get("/projects?q=levee", headers=HTMX)
    assert fragment.status_code == 200
    assert fragment.text.lstrip().startswith('<section class="panel" id="project-list"')
    assert "P-100" in fragment.text
    assert "Q-7" not in fragment.text


def test_clients_use_their_home_page_not_the_list(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    sign_in(session, web_client, lab.client_user)
    assert web_client.get("/projects").status_code == 403


# --- opening a project -------------------------------------------------------------------------


def project_form(lab: Lab, **changes: str) -> dict[str, str]:
    data = {
        "client_id": str(lab.client.id),
        "number": "P-200",
        "name": "Clay liner trial pad",
        "site": "North cell",
        "turnaround_days": "15",
        "spec_k_max": "1e-7 cm/s",
    }
    data.update(changes)
    return data


def test_manager_opens_a_project_and_is_sent_to_it(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    csrf = sign_in(session, web_client, lab.manager)
    assert 'id="project-create"' in web_client.get("/projects").text
    response = web_client.post("/projects", data=project_form(lab), headers={**csrf, **HTMX})
    assert response.status_code == 200
    session.commit()
    project = session.exec(select(Project).where(Project.number == "P-200")).one()
    assert response.headers["hx-redirect"] == f"/projects/{project.id}"
    # 1e-7 cm/s = 1e-9 m/s (1 cm = 0.01 m).
    assert project.spec_k_max_m_per_s == pytest.approx(1e-9, rel=1e-12)
    assert project.turnaround_days == 15


def test_refused_project_keeps_everything_typed(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    csrf = sign_in(session, web_client, lab.manager)
    data = project_form(lab, name="", spec_k_max="1e-9 m", turnaround_days="0")
    response = web_client.post("/projects", data=data, headers={**csrf, **HTMX})
    assert response.status_code == 422
    assert response.text.lstrip().startswith('<section class="panel" id="project-create"')
    assert message_for(response.text, "name")
    assert message_for(response.text, "turnaround_days")
    assert 'value="P-200"' in response.text
    assert 'value="North cell"' in response.text
    assert 'value="1e-9 m"' in response.text
    assert 'value="0"' in response.text
    assert f'<option value="{lab.client.id}" selected>' in response.text


def test_a_wrong_unit_on_the_limit_is_named_beside_it(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    csrf = sign_in(session, web_client, lab.manager)
    data = project_form(lab, spec_k_max="1e-9 m")
    response = web_client.post("/projects", data=data, headers={**csrf, **HTMX})
    assert response.status_code == 422
    assert "1e-9 m" in message_for(response.text, "spec_k_max")


def test_duplicate_number_is_a_conflict_beside_the_number(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    csrf = sign_in(session, web_client, lab.manager)
    data = project_form(lab, number="P-100")
    response = web_client.post("/projects", data=data, headers={**csrf, **HTMX})
    assert response.status_code == 409
    assert "P-100" in message_for(response.text, "number")


def test_project_form_without_javascript_redirects(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    csrf = sign_in(session, web_client, lab.manager)
    data = {**project_form(lab), "csrf_token": csrf["X-CSRF-Token"]}
    response = web_client.post("/projects", data=data)
    assert response.status_code == 303
    assert response.headers["location"].startswith("/projects/")


@pytest.mark.parametrize("role", ["technician", "reviewer", "client_user"])
def test_only_managers_open_projects(
    web_client: TestClient, session: Session, lab: Lab, role: str
) -> None:
    csrf = sign_in(session, web_client, getattr(lab, role))
    response = web_client.post("/projects", data=project_form(lab), headers={**csrf, **HTMX})
    assert response.status_code == 403


def test_project_post_without_csrf_is_refused(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    sign_in(session, web_client, lab.manager)
    assert web_client.post("/projects", data=project_form(lab), headers=HTMX).status_code == 403


# --- a project's page --------------------------------------------------------------------------


def test_project_page_lists_samples_states_k20_locations_and_exports(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    sample = make_sample(session, project=lab.project, lab_id="26-0101", location_id=lab.bh2.id)
    make_test(session, sample=sample, state="submitted", result_k_ref_m_per_s=3.2e-10)
    session.commit()
    sign_in(session, web_client, lab.technician)
    page = web_client.get(f"/projects/{lab.project.id}")
    assert page.status_code == 200
    text = page.text
    assert f'href="/samples/{sample.id}">26-0101</a>' in text
    assert 'data-state="submitted"' in text
    assert "3.20 × 10⁻¹⁰ m/s" in plain(text)
    assert "BH-01" in text
    assert "BH-02" in text
    pid = lab.project.id
    for link in ("results.csv", "results.xlsx", "export.json"):
        assert f'href="/api/v1/projects/{pid}/{link}"' in text
    assert f'href="/reception?project_id={pid}"' in text
    assert 'action="/projects/' not in text  # technicians add no locations
    fragment = web_client.get(f"/projects/{pid}", headers=HTMX)
    assert fragment.text.lstrip().startswith('<div id="project-page"')


def test_client_sees_own_project_with_certified_results_only(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    sample = make_sample(session, project=lab.project, lab_id="26-0102")
    make_test(session, sample=sample, state="approved", result_k_ref_m_per_s=3.2e-10)
    session.commit()
    sign_in(session, web_client, lab.client_user)
    page = web_client.get(f"/projects/{lab.project.id}")
    assert page.status_code == 200
    assert "26-0102" in page.text
    assert "3.20 × 10⁻¹⁰" not in plain(page.text)
    assert "/reception" not in page.text.split("<main")[1]


def test_client_of_another_organisation_gets_404(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    sign_in(session, web_client, lab.other_client_user)
    assert web_client.get(f"/projects/{lab.project.id}").status_code == 404
    assert web_client.get(f"/projects/{lab.project.id}", headers=HTMX).status_code == 404


# --- locations ---------------------------------------------------------------------------------


def location_form(**changes: str) -> dict[str, str]:
    data = {
        "name": "TP-3",
        "kind": "test_pit",
        "easting_m": "512034.5",
        "northing_m": "6203311.2",
        "coordinate_system": "local grid",
        "ground_level": "368.8",
        "ground_level_unit": "ft",
    }
    data.update(changes)
    return data


def test_manager_adds_a_location(web_client: TestClient, session: Session, lab: Lab) -> None:
    csrf = sign_in(session, web_client, lab.manager)
    url = f"/projects/{lab.project.id}/locations"
    response = web_client.post(url, data=location_form(), headers={**csrf, **HTMX})
    assert response.status_code == 200
    assert response.text.lstrip().startswith('<section class="panel" id="project-locations"')
    assert "TP-3" in response.text
    assert "Location added" in response.text
    session.commit()
    location = session.exec(select(Location).where(Location.name == "TP-3")).one()
    # 368.8 ft × 0.3048 m/ft = 112.41 m (international foot, exact).
    assert location.ground_level_m == pytest.approx(368.8 * 0.3048, rel=1e-12)
    assert location.ground_level_text == "368.8 ft"


def test_refused_location_keeps_what_was_typed(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    csrf = sign_in(session, web_client, lab.manager)
    url = f"/projects/{lab.project.id}/locations"
    data = location_form(easting_m="east", ground_level="high")
    response = web_client.post(url, data=data, headers={**csrf, **HTMX})
    assert response.status_code == 422
    assert "east" in message_for(response.text, "easting_m")
    assert 'value="east"' in response.text
    assert 'value="high"' in response.text
    assert 'value="TP-3"' in response.text


def test_duplicate_location_is_a_conflict(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    csrf = sign_in(session, web_client, lab.manager)
    url = f"/projects/{lab.project.id}/locations"
    response = web_client.post(url, data=location_form(name="BH-01"), headers={**csrf, **HTMX})
    assert response.status_code == 409
    assert "BH-01" in message_for(response.text, "name")


@pytest.mark.parametrize("role", ["technician", "client_user"])
def test_only_managers_add_locations(
    web_client: TestClient, session: Session, lab: Lab, role: str
) -> None:
    csrf = sign_in(session, web_client, getattr(lab, role))
    url = f"/projects/{lab.project.id}/locations"
    assert web_client.post(url, data=location_form(), headers={**csrf, **HTMX}).status_code == 403
