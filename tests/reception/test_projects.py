"""Projects and locations: who creates them, typed limits, unique numbers, versions, history."""

from __future__ import annotations

import pytest
from fastapi.testclient import TestClient

from tests.reception.conftest import Lab


def _create(client: TestClient, lab: Lab, **fields: object) -> object:
    body = {
        "client_id": lab.client_org.id,
        "number": "C1-002",
        "name": "Cell 4 liner",
        "site": "North cell",
        "turnaround_days": 15,
        **fields,
    }
    return client.post("/api/v1/projects", json=body, headers=lab.manager_headers)


def test_create_stores_the_limit_as_typed_and_in_m_per_s(client: TestClient, lab: Lab) -> None:
    response = _create(client, lab, spec_k_max="1e-7 cm/s")
    assert response.status_code == 201, response.text
    project = response.json()
    # 1 cm/s = 0.01 m/s (SI prefix centi = 1e-2, BIPM SI Brochure), so 1e-7 cm/s = 1e-9 m/s.
    assert project["spec_k_max_text"] == "1e-7 cm/s"
    assert project["spec_k_max_m_per_s"] == pytest.approx(1e-9, rel=1e-12)
    assert project["version"] == 1


@pytest.mark.parametrize(
    ("typed", "reason"),
    [("1e-9 m", "not a hydraulic conductivity"), ("fast", "does not start with a number")],
)
def test_limit_of_the_wrong_kind_is_refused_naming_the_field(
    client: TestClient, lab: Lab, typed: str, reason: str
) -> None:
    response = _create(client, lab, spec_k_max=typed)
    assert response.status_code == 422
    problem = response.json()["errors"][0]
    assert problem["loc"] == ["body", "spec_k_max"]
    assert problem["label"] == "Specification limit on k"
    assert reason in problem["msg"]
    assert problem["value"] == typed
    assert "m/s" in problem["accepted"]


def test_number_is_unique_per_client(client: TestClient, lab: Lab) -> None:
    assert _create(client, lab, number="C1-001").status_code == 409  # the fixture's project
    assert _create(client, lab, number="C1-002").status_code == 201


def test_unknown_client_is_refused(client: TestClient, lab: Lab) -> None:
    response = _create(client, lab, client_id=lab.lab.id)  # the lab is not a client
    assert response.status_code == 422
    assert response.json()["errors"][0]["loc"] == ["body", "client_id"]


@pytest.mark.parametrize("who", ["technician_headers", "client_headers"])
def test_only_managers_create_projects(client: TestClient, lab: Lab, who: str) -> None:
    body = {"client_id": lab.client_org.id, "number": "X-1", "name": "x"}
    response = client.post("/api/v1/projects", json=body, headers=getattr(lab, who))
    assert response.status_code == 403


def test_stale_version_answers_409_with_both_versions(client: TestClient, lab: Lab) -> None:
    project = _create(client, lab).json()
    url = f"/api/v1/projects/{project['id']}"
    first = client.patch(
        url, json={"version": 1, "turnaround_days": 20}, headers=lab.manager_headers
    )
    assert first.status_code == 200
    assert first.json()["version"] == 2
    stale = client.patch(url, json={"version": 1, "name": "Renamed"}, headers=lab.manager_headers)
    assert stale.status_code == 409
    body = stale.json()
    assert body["code"] == "stale_version"
    assert body["yours"]["version"] == 1
    assert body["current"]["version"] == 2
    assert body["current"]["turnaround_days"] == 20
    assert client.get(url, headers=lab.manager_headers).json()["name"] == "Cell 4 liner"


def test_update_is_audited_with_who_and_old_and_new(client: TestClient, lab: Lab) -> None:
    project = _create(client, lab).json()
    url = f"/api/v1/projects/{project['id']}"
    client.patch(url, json={"version": 1, "spec_k_max": "1e-9 m/s"}, headers=lab.manager_headers)
    history = client.get(f"/api/v1/audit/project/{project['id']}", headers=lab.technician_headers)
    assert history.status_code == 200
    events = history.json()["items"]
    created = {e["field"]: e["new_value"] for e in events if e["old_value"] is None}
    assert created["number"] == "C1-002"
    changed = [e for e in events if e["field"] == "spec_k_max_text" and e["new_value"]]
    assert changed[-1]["new_value"] == "1e-9 m/s"
    assert {e["actor_id"] for e in events} == {lab.manager.id}


def test_unknown_audit_entity_is_refused(client: TestClient, lab: Lab) -> None:
    response = client.get("/api/v1/audit/banana/1", headers=lab.manager_headers)
    assert response.status_code == 422
    assert response.json()["errors"][0]["loc"] == ["path", "entity"]


def test_project_list_filters_and_pages(client: TestClient, lab: Lab) -> None:
    for number in ("C1-010", "C1-011", "C1-012"):
        _create(client, lab, number=number, name=f"Dam {number}")
    page = client.get(
        "/api/v1/projects", params={"search": "dam", "limit": 2}, headers=lab.manager_headers
    ).json()
    assert page["total"] == 3
    assert len(page["items"]) == 2
    rest = client.get(
        "/api/v1/projects",
        params={"search": "dam", "limit": 2, "offset": 2},
        headers=lab.manager_headers,
    ).json()
    assert len(rest["items"]) == 1
    everything = client.get(
        "/api/v1/projects", params={"client_id": lab.client_org.id}, headers=lab.manager_headers
    ).json()
    assert everything["total"] == 4


def test_locations_with_ground_level_as_typed(client: TestClient, lab: Lab) -> None:
    url = f"/api/v1/projects/{lab.project.id}/locations"
    body = {
        "name": "TP-02",
        "kind": "test_pit",
        "easting_m": 512034.5,
        "northing_m": 181220.0,
        "coordinate_system": "local grid",
        "ground_level": "100 ft",
    }
    response = client.post(url, json=body, headers=lab.technician_headers)
    assert response.status_code == 201, response.text
    # 1 ft = 0.3048 m exactly (International Yard and Pound Agreement, 1959).
    assert response.json()["ground_level_m"] == pytest.approx(30.48, rel=1e-12)
    assert client.post(url, json=body, headers=lab.technician_headers).status_code == 409
    wrong = client.post(
        url, json={**body, "name": "TP-03", "ground_level": "3 s"}, headers=lab.technician_headers
    )
    assert wrong.status_code == 422
    assert wrong.json()["errors"][0]["loc"] == ["body", "ground_level"]
    listed = client.get(url, headers=lab.client_headers).json()
    assert [loc["name"] for loc in listed["items"]] == ["BH-01", "TP-02"]
    assert listed["total"] == 2
