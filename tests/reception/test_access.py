"""A client sees only its own organisation's projects, samples and custody; others are 404."""

from __future__ import annotations

from fastapi.testclient import TestClient

from tests.reception.conftest import Lab, batch_body, receive


def _sample_id(client: TestClient, lab: Lab) -> int:
    return int(receive(client, lab, batch_body()).json()["samples"][0]["id"])


def test_own_client_sees_its_project_sample_and_custody(client: TestClient, lab: Lab) -> None:
    sample_id = _sample_id(client, lab)
    headers = lab.client_headers
    assert client.get(f"/api/v1/projects/{lab.project.id}", headers=headers).status_code == 200
    assert client.get(f"/api/v1/samples/{sample_id}", headers=headers).status_code == 200
    custody = client.get(f"/api/v1/samples/{sample_id}/custody", headers=headers)
    assert custody.status_code == 200
    assert custody.json()["total"] == 2


def test_other_client_gets_404_everywhere(client: TestClient, lab: Lab) -> None:
    sample_id = _sample_id(client, lab)
    headers = lab.other_client_headers
    for url in (
        f"/api/v1/projects/{lab.project.id}",
        f"/api/v1/projects/{lab.project.id}/locations",
        f"/api/v1/samples/{sample_id}",
        f"/api/v1/samples/{sample_id}/custody",
        f"/api/v1/audit/sample/{sample_id}",
    ):
        response = client.get(url, headers=headers)
        assert response.status_code == 404, url
    # Answered exactly as a record that does not exist would be.
    hidden = client.get(f"/api/v1/samples/{sample_id}", headers=headers).json()
    missing = client.get("/api/v1/samples/999999", headers=headers).json()
    assert hidden["detail"] == f"sample {sample_id} not found"
    assert missing["detail"] == "sample 999999 not found"


def test_other_client_lists_and_lookups_are_empty(client: TestClient, lab: Lab) -> None:
    _sample_id(client, lab)
    headers = lab.other_client_headers
    assert client.get("/api/v1/projects", headers=headers).json()["total"] == 0
    assert client.get("/api/v1/samples", headers=headers).json()["total"] == 0
    lookup = client.get("/api/v1/samples/lookup", params={"code": "BH01-U1"}, headers=headers)
    assert lookup.json()["total"] == 0
    own = client.get(
        "/api/v1/samples/lookup", params={"code": "BH01-U1"}, headers=lab.client_headers
    )
    assert own.json()["total"] == 1


def test_clients_cannot_write_custody_or_read_audit(client: TestClient, lab: Lab) -> None:
    sample_id = _sample_id(client, lab)
    response = client.post(
        f"/api/v1/samples/{sample_id}/custody",
        json={"kind": "moved", "place": "Shelf 1"},
        headers=lab.client_headers,
    )
    assert response.status_code == 403
    own_history = client.get(f"/api/v1/audit/sample/{sample_id}", headers=lab.client_headers)
    assert own_history.status_code == 404


def test_anonymous_requests_are_refused(client: TestClient, lab: Lab) -> None:
    assert client.get("/api/v1/samples").status_code == 401
    assert client.get("/api/v1/queue").status_code == 401
