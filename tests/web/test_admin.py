"""The admin's pages: users (list, create, role, deactivate, reset password) and the
laboratory's settings. The rules are accounts.service's; here the pages are checked to
apply them, to keep what was typed on a refusal and to be the admin's alone."""

from __future__ import annotations

import re

from fastapi.testclient import TestClient
from sqlmodel import Session, select

from service.accounts.models import AccessToken, User
from service.accounts.passwords import verify_password
from service.common import OrganisationKind, Role
from service.laboratory.models import LabSettings
from tests.auth_helpers import sign_in_cookie
from tests.factories import make_organisation, make_user


def _message(html: str, name: str) -> str:
    found = re.search(rf'id="err-{name}"[^>]*>(.*?)</p>', html, re.S)
    return re.sub(r"<[^>]+>", "", found.group(1)) if found else ""


def _setup(session: Session) -> tuple[User, User]:
    lab = make_organisation(session, kind=OrganisationKind.LAB, name="Pellworth Soils (invented)")
    admin = make_user(session, role=Role.ADMIN, organisation=lab, full_name="Admin Person")
    technician = make_user(session, role=Role.TECHNICIAN, organisation=lab, full_name="Tech One")
    session.commit()
    return admin, technician


def test_only_the_admin_sees_the_pages(web_client: TestClient, session: Session) -> None:
    _admin, technician = _setup(session)
    sign_in_cookie(session, web_client, technician)
    for path in ("/admin/users", f"/admin/users/{technician.id}", "/admin/lab"):
        assert web_client.get(path).status_code == 403


def test_create_a_reception_account_and_refusals_keep_what_was_typed(
    web_client: TestClient, session: Session
) -> None:
    admin, _ = _setup(session)
    csrf = sign_in_cookie(session, web_client, admin)
    listed = web_client.get("/admin/users")
    assert listed.status_code == 200
    assert "Tech One" in listed.text
    form = {
        "organisation_id": str(admin.organisation_id),
        "role": "reception",
        "full_name": "Desk Person",
        "email": "desk@pellworth.example",
        "password": "short",
    }
    refused = web_client.post("/admin/users", data=form, headers=csrf)
    assert refused.status_code == 422
    assert "10" in _message(refused.text, "password")  # the policy's minimum length
    assert 'value="desk@pellworth.example"' in refused.text
    assert "short" not in re.findall(r'name="password"[^>]*', refused.text)[0]
    hostile = web_client.post(
        "/admin/users", data=form | {"role": "superuser", "password": "x" * 12}, headers=csrf
    )
    assert hostile.status_code == 422
    assert "is not a role" in _message(hostile.text, "role")
    made = web_client.post(
        "/admin/users", data=form | {"password": "a desk that receives 42"}, headers=csrf
    )
    assert made.status_code == 303
    person = session.exec(select(User).where(User.email == "desk@pellworth.example")).one()
    assert person.role == Role.RECEPTION
    assert made.headers["location"] == f"/admin/users/{person.id}?flash=user-created"


def test_change_role_deactivate_and_reset_password(
    web_client: TestClient, session: Session
) -> None:
    admin, technician = _setup(session)
    sign_in_cookie(session, web_client, technician)  # a live session to be ended
    csrf = sign_in_cookie(session, web_client, admin)
    page = web_client.get(f"/admin/users/{technician.id}")
    assert page.status_code == 200
    saved = web_client.post(
        f"/admin/users/{technician.id}",
        data={"full_name": "Tech One", "role": "reviewer", "is_active": "no", "version": "1"},
        headers=csrf,
    )
    assert saved.status_code == 303
    session.rollback()  # a fresh snapshot: the pages wrote in their own transactions
    session.expire_all()
    person = session.get(User, technician.id)
    assert person is not None
    assert (person.role, person.is_active) == (Role.REVIEWER, False)
    live = session.exec(
        select(AccessToken).where(
            AccessToken.user_id == technician.id,
            AccessToken.revoked_at == None,  # noqa: E711
        )
    ).all()
    assert live == []
    stale = web_client.post(
        f"/admin/users/{technician.id}",
        data={"full_name": "Tech One", "role": "technician", "is_active": "yes", "version": "1"},
        headers=csrf,
    )
    assert stale.status_code == 409
    mismatch = web_client.post(
        f"/admin/users/{technician.id}/password",
        data={
            "new_password": "bright lantern 2026",
            "repeat_password": "bright lantern 2027",
            "version": str(person.version),
        },
        headers=csrf,
    )
    assert mismatch.status_code == 422
    assert "Differs from the new password" in _message(mismatch.text, "repeat_password")
    reset = web_client.post(
        f"/admin/users/{technician.id}/password",
        data={
            "new_password": "bright lantern 2026",
            "repeat_password": "bright lantern 2026",
            "version": str(person.version),
        },
        headers=csrf,
    )
    assert reset.status_code == 303, reset.text
    assert reset.headers["location"].endswith("flash=password-reset"), reset.headers["location"]
    session.rollback()  # a fresh snapshot: the pages wrote in their own transactions
    session.expire_all()
    person = session.get(User, technician.id)
    assert person is not None
    assert verify_password(person.password_hash, "bright lantern 2026")


def test_the_last_admin_cannot_demote_themselves(web_client: TestClient, session: Session) -> None:
    admin, _ = _setup(session)
    csrf = sign_in_cookie(session, web_client, admin)
    refused = web_client.post(
        f"/admin/users/{admin.id}",
        data={
            "full_name": "Admin Person",
            "role": "lab_manager",
            "is_active": "yes",
            "version": "1",
        },
        headers=csrf,
    )
    assert refused.status_code == 409
    assert "last active admin" in refused.text


def test_lab_page_saves_and_refuses_a_blank_name(web_client: TestClient, session: Session) -> None:
    admin, _ = _setup(session)
    csrf = sign_in_cookie(session, web_client, admin)
    first = web_client.get("/admin/lab")
    assert 'value="Pellworth Soils (invented)"' in first.text  # the organisation's, until saved
    blank = web_client.post(
        "/admin/lab", data={"name": " ", "address": "1 Road", "version": ""}, headers=csrf
    )
    assert blank.status_code == 422
    assert _message(blank.text, "name")
    assert "1 Road" in blank.text  # kept
    saved = web_client.post(
        "/admin/lab",
        data={
            "name": "Pellworth Soil Testing",
            "address": "1 Road",
            "accreditation_body": "Example Body (invented)",
            "accreditation_number": "N-5",
            "version": "",
        },
        headers=csrf,
    )
    assert saved.status_code == 303
    settings = session.exec(select(LabSettings)).one()
    assert settings.accreditation_number == "N-5"
    footer = web_client.get("/admin/lab").text
    assert "Pellworth Soil Testing · Accredited by Example Body (invented), no. N-5" in footer
