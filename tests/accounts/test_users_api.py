"""/api/v1/users and /api/v1/organisations: admin only, paginated, audited, version-checked.

Sources: RFC 9110 §15.5.2 / §15.5.4 (401 when no credentials, 403 when the credentials do
not allow it), §15.5.10 (409 Conflict for a request that conflicts with the resource's
current state, as with a stale version: optimistic concurrency, common practice, no source)."""

from __future__ import annotations

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session

from service.accounts.models import Organisation, User
from service.audit.service import history
from service.common import OrganisationKind, Role
from service.paging import MAX_LIMIT
from tests.accounts.conftest import PASSWORD
from tests.auth_helpers import bearer
from tests.factories import make_organisation, make_user

USERS = "/api/v1/users"
ORGANISATIONS = "/api/v1/organisations"

ADMIN_ONLY = [
    ("get", USERS, None),
    ("post", USERS, {}),
    ("get", f"{USERS}/1", None),
    ("patch", f"{USERS}/1", {"version": 1}),
    ("post", f"{USERS}/1/unlock", None),
    ("post", ORGANISATIONS, {}),
]


def _new_user(organisation: Organisation, **fields: object) -> dict[str, object]:
    return {
        "organisation_id": organisation.id,
        "email": "new.person@lab.example",
        "full_name": "New Person",
        "role": "technician",
        "password": "initial phrase 2026",
        **fields,
    }


@pytest.mark.parametrize(("method", "url", "body"), ADMIN_ONLY)
@pytest.mark.parametrize("role", [Role.TECHNICIAN, Role.LAB_MANAGER, Role.CLIENT])
def test_admin_endpoints_refuse_other_roles(
    client: TestClient, session: Session, method: str, url: str, body: object, role: Role
) -> None:
    headers = bearer(session, make_user(session, role=role))
    response = client.request(method, url, json=body, headers=headers)
    assert response.status_code == 403
    assert "admin" in response.json()["detail"]


@pytest.mark.parametrize(("method", "url", "body"), ADMIN_ONLY)
def test_admin_endpoints_refuse_anonymous(
    client: TestClient, method: str, url: str, body: object
) -> None:
    assert client.request(method, url, json=body).status_code == 401


def test_list_is_paginated_with_total(
    client: TestClient, session: Session, admin: User, lab: Organisation
) -> None:
    for n in range(4):
        make_user(session, organisation=lab, email=f"person{n}@lab.example")
    headers = bearer(session, admin)
    response = client.get(USERS, params={"limit": 2, "offset": 1}, headers=headers)
    assert response.status_code == 200
    body = response.json()
    assert body["total"] == 5  # four plus the admin
    assert body["limit"] == 2
    assert body["offset"] == 1
    # Ordered by email: admin@, person0@, person1@, ...
    assert [u["email"] for u in body["items"]] == ["person0@lab.example", "person1@lab.example"]
    assert all("password_hash" not in u for u in body["items"])
    too_big = client.get(USERS, params={"limit": MAX_LIMIT + 1}, headers=headers)
    assert too_big.status_code == 422
    assert too_big.json()["errors"][0]["loc"] == ["query", "limit"]


def test_list_filters_by_role(client: TestClient, session: Session, admin: User) -> None:
    make_user(session, role=Role.CLIENT)
    response = client.get(USERS, params={"role": "client"}, headers=bearer(session, admin))
    assert [u["role"] for u in response.json()["items"]] == ["client"]


def test_create_user_signs_in_and_is_audited(
    client: TestClient, session: Session, admin: User, lab: Organisation
) -> None:
    response = client.post(
        USERS, json=_new_user(lab, display_units="us"), headers=bearer(session, admin)
    )
    assert response.status_code == 201
    created = response.json()
    assert created["role"] == "technician"
    assert created["display_units"] == "us"
    assert created["version"] == 1
    assert "password_hash" not in created
    signed_in = client.post(
        "/api/v1/auth/tokens",
        json={"email": "new.person@lab.example", "password": "initial phrase 2026"},
    )
    assert signed_in.status_code == 201
    events = {e.field: e for e in history(session, "app_user", created["id"])}
    assert events["email"].new_value == "new.person@lab.example"
    assert events["role"].actor_id == admin.id
    assert "password_hash" not in events


@pytest.mark.parametrize(
    ("fields", "field", "words"),
    [
        ({"email": "not-an-address"}, "email", "not an email address"),
        ({"password": "short"}, "password", "10 characters"),
        ({"role": "client"}, "role", "client users belong to client organisations"),
        ({"role": "janitor"}, "role", "technician"),
        ({"organisation_id": 9999}, "organisation_id", "no organisation has id 9999"),
        ({"full_name": "   "}, "full_name", "at least 1 character"),
    ],
)
def test_create_user_refusals_name_the_field(
    client: TestClient,
    session: Session,
    admin: User,
    lab: Organisation,
    fields: dict[str, object],
    field: str,
    words: str,
) -> None:
    response = client.post(USERS, json=_new_user(lab, **fields), headers=bearer(session, admin))
    assert response.status_code == 422
    (problem,) = response.json()["errors"]
    assert problem["loc"] == ["body", field]
    assert words in problem["msg"]


def test_duplicate_email_is_a_conflict(
    client: TestClient, session: Session, admin: User, lab: Organisation
) -> None:
    response = client.post(
        USERS, json=_new_user(lab, email="Admin@Lab.example"), headers=bearer(session, admin)
    )
    assert response.status_code == 409
    assert "admin@lab.example" in response.json()["detail"]


def test_update_bumps_the_version_and_audits_old_and_new(
    client: TestClient, session: Session, admin: User, technician: User
) -> None:
    response = client.patch(
        f"{USERS}/{technician.id}",
        json={"version": 1, "role": "reviewer", "full_name": "Renamed Person"},
        headers=bearer(session, admin),
    )
    assert response.status_code == 200
    assert response.json()["role"] == "reviewer"
    assert response.json()["version"] == 2
    events = {e.field: e for e in history(session, "app_user", technician.id) if e.old_value}
    assert (events["role"].old_value, events["role"].new_value) == ("technician", "reviewer")
    assert events["full_name"].new_value == "Renamed Person"
    assert events["role"].actor_id == admin.id


def test_stale_version_answers_409_with_both_versions(
    client: TestClient, session: Session, admin: User, technician: User
) -> None:
    headers = bearer(session, admin)
    url = f"{USERS}/{technician.id}"
    assert client.patch(url, json={"version": 1, "full_name": "First"}, headers=headers).is_success
    stale = client.patch(url, json={"version": 1, "full_name": "Second"}, headers=headers)
    assert stale.status_code == 409
    body = stale.json()
    assert body["code"] == "stale_version"
    assert body["yours"]["version"] == 1
    assert body["current"]["version"] == 2
    assert body["yours"] == {"full_name": "Second", "version": 1}
    assert body["current"]["full_name"] == "First"
    assert "password_hash" not in body["current"]
    assert client.get(url, headers=headers).json()["full_name"] == "First"


def test_null_is_refused_naming_the_field(
    client: TestClient, session: Session, admin: User, technician: User
) -> None:
    response = client.patch(
        f"{USERS}/{technician.id}",
        json={"version": 1, "role": None},
        headers=bearer(session, admin),
    )
    assert response.status_code == 422
    assert response.json()["errors"][0]["loc"] == ["body", "role"]


def test_version_is_required(
    client: TestClient, session: Session, admin: User, technician: User
) -> None:
    response = client.patch(
        f"{USERS}/{technician.id}", json={"full_name": "X"}, headers=bearer(session, admin)
    )
    assert response.status_code == 422
    assert response.json()["errors"][0]["loc"] == ["body", "version"]


def test_deactivating_a_user_revokes_their_tokens(
    client: TestClient, session: Session, admin: User, technician: User
) -> None:
    their_headers = bearer(session, technician)
    assert client.get("/api/v1/auth/me", headers=their_headers).status_code == 200
    response = client.patch(
        f"{USERS}/{technician.id}",
        json={"version": 1, "is_active": False},
        headers=bearer(session, admin),
    )
    assert response.status_code == 200
    assert client.get("/api/v1/auth/me", headers=their_headers).status_code == 401
    refused = client.post(
        "/api/v1/auth/tokens", json={"email": technician.email, "password": PASSWORD}
    )
    assert refused.status_code == 401


def test_the_last_admin_cannot_be_demoted(
    client: TestClient, session: Session, admin: User
) -> None:
    response = client.patch(
        f"{USERS}/{admin.id}",
        json={"version": 1, "role": "lab_manager"},
        headers=bearer(session, admin),
    )
    assert response.status_code == 409
    assert "last active admin" in response.json()["detail"]


def test_unknown_user_is_404(client: TestClient, session: Session, admin: User) -> None:
    response = client.get(f"{USERS}/424242", headers=bearer(session, admin))
    assert response.status_code == 404
    assert response.json()["detail"] == "user 424242 not found"


def test_lab_staff_list_organisations_clients_may_not(
    client: TestClient, session: Session, technician: User
) -> None:
    make_organisation(session, name="Client Org")
    listed = client.get(
        ORGANISATIONS, params={"kind": "client"}, headers=bearer(session, technician)
    )
    assert listed.status_code == 200
    assert [o["name"] for o in listed.json()["items"]] == ["Client Org"]
    assert listed.json()["total"] == 1
    as_client = client.get(
        ORGANISATIONS, headers=bearer(session, make_user(session, role=Role.CLIENT))
    )
    assert as_client.status_code == 403


def test_admin_creates_an_organisation_audited(
    client: TestClient, session: Session, admin: User
) -> None:
    headers = bearer(session, admin)
    body = {"name": "Example Dam Authority", "kind": "client", "contact_email": "x@dam.example"}
    response = client.post(ORGANISATIONS, json=body, headers=headers)
    assert response.status_code == 201
    created = response.json()
    assert created["kind"] == OrganisationKind.CLIENT
    events = {e.field: e for e in history(session, "organisation", created["id"])}
    assert events["name"].new_value == "Example Dam Authority"
    assert events["name"].actor_id == admin.id
    again = client.post(
        ORGANISATIONS, json={**body, "name": "example dam authority"}, headers=headers
    )
    assert again.status_code == 409
    bad_kind = client.post(ORGANISATIONS, json={**body, "kind": "vendor"}, headers=headers)
    assert bad_kind.status_code == 422
    assert bad_kind.json()["errors"][0]["loc"] == ["body", "kind"]
