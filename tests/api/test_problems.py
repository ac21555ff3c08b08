"""Every error of the JSON API is RFC 9457 problem details, in one shape; every list is paged
the same way; a caller who may not see a thing gets 404."""

from __future__ import annotations

from fastapi.testclient import TestClient
from sqlmodel import Session

from service.common import OrganisationKind, Role
from tests.auth_helpers import bearer
from tests.engine.helpers import cv2
from tests.factories import make_organisation, make_project, make_sample, make_user

URL = "/api/v1/reductions"
PROBLEM = "application/problem+json"


def _is_problem(response, status: int) -> dict:
    # RFC 9457 §3: type, title, status, detail (a string), instance; members beside them.
    assert response.status_code == status, response.text
    assert response.headers["content-type"] == PROBLEM
    body = response.json()
    assert {"type", "title", "status", "detail", "instance"} <= set(body)
    assert body["status"] == status
    assert isinstance(body["detail"], str)
    return body


def test_a_refused_field_is_named_by_label_with_its_path(client: TestClient) -> None:
    payload = cv2()
    payload["trials"][0]["head_final"] = "120 cm"  # above the head at start
    body = _is_problem(client.post(URL, json=payload), 422)
    (item,) = body["errors"]
    assert item["loc"] == ["body", "trials", 0, "head_final"]
    assert item["field"] == "trials[0].head_final"
    assert item["label"] == "Trial 1 · Head at end"
    assert item["msg"] == (
        "Trial 1 · Head at end: must be below the head at start (100.0 cm): the head did not fall"
    )
    assert item["value"] == "120 cm"
    assert item["accepted"]


def test_a_huge_rejected_value_is_not_echoed_back(client: TestClient, session: Session) -> None:
    # A multi-megabyte string in one field: the refusal names it and shows 200 characters.
    # Signed in: an anonymous caller's body is capped far below this (service/security.py).
    lab = make_organisation(session, kind=OrganisationKind.LAB)
    technician = make_user(session, role=Role.TECHNICIAN, organisation=lab)
    session.commit()
    payload = cv2()
    payload["trials"][0]["duration"] = "9" * 4_900_000
    response = client.post(URL, json=payload, headers=bearer(session, technician))
    body = _is_problem(response, 422)
    assert len(response.content) < 5_000
    values = [item["value"] for item in body["errors"]]
    assert any(isinstance(v, str) and len(v) == 200 and v.endswith("…") for v in values), values


def test_pydantic_words_come_without_their_prefix(client: TestClient) -> None:
    body = _is_problem(client.post(URL, json={"method": "constant_head"}), 422)
    assert all("Value error" not in item["msg"] for item in body["errors"])
    assert any(item["loc"] == ["body", "trials"] for item in body["errors"])


def test_not_found_and_unknown_routes_share_the_shape(client: TestClient) -> None:
    body = _is_problem(client.get("/api/v1/no-such-thing"), 404)
    assert body["code"] == "not_found"
    _is_problem(client.get("/api/v1/auth/tokens"), 401)


def test_a_client_asking_for_another_organisations_samples_gets_404(
    session: Session, client: TestClient
) -> None:
    mine = make_organisation(session)
    theirs = make_organisation(session)
    project = make_project(session, client=theirs)
    make_sample(session, project=project)
    headers = bearer(session, make_user(session, role=Role.CLIENT, organisation=mine))
    for url in (
        f"/api/v1/samples?project_id={project.id}",
        f"/api/v1/samples?client_id={theirs.id}",
        f"/api/v1/certificates?project_id={project.id}",
    ):
        _is_problem(client.get(url, headers=headers), 404)
    own = client.get(f"/api/v1/samples?client_id={mine.id}", headers=headers)
    assert own.json() == {"items": [], "total": 0, "limit": 50, "offset": 0}


def test_every_list_is_one_page_shape(session: Session, client: TestClient) -> None:
    headers = bearer(session, make_user(session, role=Role.LAB_MANAGER))
    for url in ("/api/v1/certificates", "/api/v1/samples", "/api/v1/projects"):
        body = client.get(url, headers=headers).json()
        assert set(body) == {"items", "total", "limit", "offset"}, url
