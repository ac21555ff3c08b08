"""Account settings: display units (versioned), password change with its refusals beside the
fields, and the user's own sessions and API tokens."""

from __future__ import annotations

import re

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session, select

from service.accounts.models import AccessToken, User
from service.accounts.passwords import verify_password
from service.common import Role
from service.deps import CSRF_HEADER
from tests.auth_helpers import bearer, sign_in_cookie
from tests.factories import make_user

PASSWORD = "correct horse 42"
HTMX = {"HX-Request": "true"}


def is_full_page(text: str) -> bool:
    return text.lstrip().lower().startswith("<!doctype html>")


def error_beside(text: str, field: str) -> str:
    """The message in the error slot of `field` (empty when there is none)."""
    match = re.search(rf'<p class="field-error[^"]*" id="err-{field}"[^>]*>(.*?)</p>', text, re.S)
    assert match, f"no error slot for {field}"
    return re.sub(r"<[^>]+>", "", match.group(1)).strip()


@pytest.fixture
def user(session: Session) -> User:
    made = make_user(session, role=Role.TECHNICIAN, email="tam@example.test")
    session.commit()
    return made


# ---------- the page ----------


@pytest.mark.parametrize("role", list(Role))
def test_every_signed_in_user_has_the_settings_page(
    session: Session, web_client: TestClient, role: Role
) -> None:
    person = make_user(session, role=role)
    sign_in_cookie(session, web_client, person)
    response = web_client.get("/account")
    assert response.status_code == 200
    assert is_full_page(response.text)
    assert response.headers["vary"] == "HX-Request"
    for label in ("Show figures in", "Current password", "New password", "New password again"):
        assert f">{label}</label>" in response.text


def test_signed_out_visitors_go_to_sign_in(web_client: TestClient) -> None:
    response = web_client.get("/account")
    assert response.status_code == 303
    assert response.headers["location"] == "/sign-in?next=/account"


# ---------- display units ----------


def test_saving_units_answers_htmx_with_the_fragment(
    session: Session, web_client: TestClient, user: User
) -> None:
    csrf = sign_in_cookie(session, web_client, user)
    response = web_client.post(
        "/account/units", data={"units": "us", "version": str(user.version)}, headers=csrf | HTMX
    )
    assert response.status_code == 200
    assert response.headers["vary"] == "HX-Request"
    assert response.text.lstrip().startswith('<section class="panel" id="units-panel"')
    assert "Display units saved" in response.text
    # 1e-9 m/s in ft/day: × 86 400 s/day ÷ 0.3048 m/ft (exact definition of the foot).
    assert f"{1e-9 * 86_400 / 0.3048 / 1e-4:.2f} × 10⁻⁴</span> ft/day" in response.text
    # 4.5 m ÷ 0.3048 = 14.76 ft.
    assert "14.8 ft" in response.text
    session.refresh(user)
    assert user.display_units == "us"
    assert user.version == 2


def test_saving_units_from_a_plain_form_redirects_and_says_so(
    session: Session, web_client: TestClient, user: User
) -> None:
    csrf = sign_in_cookie(session, web_client, user)
    response = web_client.post(
        "/account/units",
        data={"units": "us", "version": str(user.version), "csrf_token": csrf[CSRF_HEADER]},
    )
    assert response.status_code == 303
    assert response.headers["location"] == "/account?saved=units"
    page = web_client.get(response.headers["location"])
    assert "Display units saved" in page.text
    assert "ft/day" in page.text


def test_units_without_the_csrf_token_are_refused(
    session: Session, web_client: TestClient, user: User
) -> None:
    sign_in_cookie(session, web_client, user)
    response = web_client.post("/account/units", data={"units": "us", "version": "1"})
    assert response.status_code == 403
    assert "CSRF" in response.text
    session.refresh(user)
    assert user.display_units == "si"


def test_an_unknown_unit_system_is_refused_beside_the_field(
    session: Session, web_client: TestClient, user: User
) -> None:
    csrf = sign_in_cookie(session, web_client, user)
    response = web_client.post(
        "/account/units", data={"units": "imperial", "version": "1"}, headers=csrf | HTMX
    )
    assert response.status_code == 422
    message = error_beside(response.text, "units")
    assert "&#39;imperial&#39;" in message or "'imperial'" in message
    assert "si (SI)" in message
    assert "us (US customary)" in message


def test_a_stale_version_answers_409_with_both_versions(
    session: Session, web_client: TestClient, user: User
) -> None:
    csrf = sign_in_cookie(session, web_client, user)
    user.display_units = "us"  # changed elsewhere meanwhile
    user.version = 2
    session.add(user)
    session.commit()
    response = web_client.post(
        "/account/units", data={"units": "si", "version": "1"}, headers=csrf | HTMX
    )
    assert response.status_code == 409
    message = error_beside(response.text, "units")
    assert "version 1" in message
    assert "version 2" in message
    assert 'name="version" value="2"' in response.text  # the next try can succeed
    session.refresh(user)
    assert user.display_units == "us"


# ---------- password ----------


def test_a_wrong_current_password_is_refused_beside_it_and_counted(
    session: Session, web_client: TestClient, user: User
) -> None:
    csrf = sign_in_cookie(session, web_client, user)
    response = web_client.post(
        "/account/password",
        data={
            "current_password": "not it at all",
            "new_password": "a brand new password",
            "repeat_password": "a brand new password",
        },
        headers=csrf | HTMX,
    )
    assert response.status_code == 403
    assert response.text.lstrip().startswith('<section class="panel" id="password-panel"')
    assert "not your current password" in error_beside(response.text, "current_password")
    assert error_beside(response.text, "new_password") == ""
    assert 'name="new_password"' in response.text  # the form is still there
    assert "a brand new password" not in response.text  # passwords are never echoed
    session.refresh(user)
    assert user.failed_sign_ins == 1


def test_a_short_new_password_is_refused_beside_it(
    session: Session, web_client: TestClient, user: User
) -> None:
    csrf = sign_in_cookie(session, web_client, user)
    response = web_client.post(
        "/account/password",
        data={"current_password": PASSWORD, "new_password": "short", "repeat_password": "short"},
        headers=csrf | HTMX,
    )
    assert response.status_code == 422
    assert "at least 10 characters" in error_beside(response.text, "new_password").lower()
    assert _password_is(session, user, PASSWORD)  # unchanged


def test_a_mismatched_repeat_is_refused_before_any_check(
    session: Session, web_client: TestClient, user: User
) -> None:
    csrf = sign_in_cookie(session, web_client, user)
    response = web_client.post(
        "/account/password",
        data={
            "current_password": "wrong but not checked",
            "new_password": "a brand new password",
            "repeat_password": "a brand new passwrd",
        },
        headers=csrf | HTMX,
    )
    assert response.status_code == 422
    assert "does not match" in error_beside(response.text, "repeat_password")
    session.refresh(user)
    assert user.failed_sign_ins == 0


def test_missing_fields_are_each_marked_needed(
    session: Session, web_client: TestClient, user: User
) -> None:
    csrf = sign_in_cookie(session, web_client, user)
    response = web_client.post("/account/password", data={}, headers=csrf | HTMX)
    assert response.status_code == 422
    for field in ("current_password", "new_password", "repeat_password"):
        assert error_beside(response.text, field) == "needed"


def test_a_refused_plain_form_comes_back_as_the_whole_page(
    session: Session, web_client: TestClient, user: User
) -> None:
    csrf = sign_in_cookie(session, web_client, user)
    response = web_client.post(
        "/account/password",
        data={
            "current_password": "nope nope nope",
            "new_password": "a brand new password",
            "repeat_password": "a brand new password",
            "csrf_token": csrf[CSRF_HEADER],
        },
    )
    assert response.status_code == 403
    assert is_full_page(response.text)
    assert "not your current password" in error_beside(response.text, "current_password")


def test_password_change_without_csrf_is_refused(
    session: Session, web_client: TestClient, user: User
) -> None:
    sign_in_cookie(session, web_client, user)
    response = web_client.post(
        "/account/password",
        data={
            "current_password": PASSWORD,
            "new_password": "a brand new password",
            "repeat_password": "a brand new password",
        },
    )
    assert response.status_code == 403
    assert _password_is(session, user, PASSWORD)


def test_changing_the_password_keeps_this_session_and_revokes_the_rest(
    session: Session, web_client: TestClient, user: User
) -> None:
    bearer(session, user)  # an API token the change must revoke
    csrf = sign_in_cookie(session, web_client, user)
    response = web_client.post(
        "/account/password",
        data={
            "current_password": PASSWORD,
            "new_password": "a brand new password",
            "repeat_password": "a brand new password",
        },
        headers=csrf | HTMX,
    )
    assert response.status_code == 200
    assert "Password changed" in response.text
    # The token list comes along out of band: only this browser is left.
    assert 'id="tokens-panel"' in response.text
    assert 'hx-swap-oob="true"' in response.text
    assert response.text.count("data-token-id=") == 1
    assert web_client.get("/account").status_code == 200
    session.expire_all()
    assert _password_is(session, user, "a brand new password")


def _password_is(session: Session, user: User, password: str) -> bool:
    session.refresh(user)
    return verify_password(user.password_hash, password)


# ---------- sessions and API tokens ----------


def test_tokens_are_listed_and_one_can_be_revoked(
    session: Session, web_client: TestClient, user: User
) -> None:
    headers = bearer(session, user)
    csrf = sign_in_cookie(session, web_client, user)
    page = web_client.get("/account").text
    ids = [int(i) for i in re.findall(r'data-token-id="(\d+)" data-kind="api"', page)]
    assert len(ids) == 1
    response = web_client.post(f"/account/tokens/{ids[0]}/revoke", headers=csrf | HTMX)
    assert response.status_code == 200
    assert response.text.lstrip().startswith(
        '<section class="panel account-wide" id="tokens-panel"'
    )
    assert "Token revoked" in response.text
    assert 'data-kind="api"' not in response.text
    revoked = session.get(AccessToken, ids[0])
    session.refresh(revoked)
    assert revoked is not None
    assert revoked.revoked_at is not None
    assert web_client.get("/api/v1/auth/me", headers=headers).status_code == 401


def test_the_session_in_use_cannot_be_revoked_here(
    session: Session, web_client: TestClient, user: User
) -> None:
    csrf = sign_in_cookie(session, web_client, user)
    page = web_client.get("/account").text
    current = re.search(r'data-token-id="(\d+)" data-kind="session"', page)
    assert current
    response = web_client.post(f"/account/tokens/{current.group(1)}/revoke", headers=csrf | HTMX)
    assert response.status_code == 409
    assert "Sign out" in response.text
    assert web_client.get("/account").status_code == 200


def test_another_users_token_is_not_found(
    session: Session, web_client: TestClient, user: User
) -> None:
    # Even for an admin: this page is for one's own tokens (the API serves admins).
    admin = make_user(session, role=Role.ADMIN)
    bearer(session, user)
    csrf = sign_in_cookie(session, web_client, admin)
    token = session.exec(select(AccessToken).where(AccessToken.user_id == user.id)).first()
    assert token is not None
    response = web_client.post(f"/account/tokens/{token.id}/revoke", headers=csrf | HTMX)
    assert response.status_code == 404
    session.refresh(token)
    assert token.revoked_at is None


def test_revoking_without_csrf_is_refused(
    session: Session, web_client: TestClient, user: User
) -> None:
    bearer(session, user)
    sign_in_cookie(session, web_client, user)
    token = session.exec(
        select(AccessToken).where(AccessToken.user_id == user.id, AccessToken.kind == "api")
    ).first()
    assert token is not None
    response = web_client.post(f"/account/tokens/{token.id}/revoke")
    assert response.status_code == 403
    session.refresh(token)
    assert token.revoked_at is None
