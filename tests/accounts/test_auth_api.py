"""/api/v1/auth through HTTP: tokens, cookie sessions with CSRF, sign-out, password change.

Sources: RFC 6750 (bearer tokens; an invalid token answers 401), RFC 6585 §4 (429 Too Many
Requests), RFC 6265 §4.1.2 (HttpOnly and Secure cookie attributes), OWASP Session Management
Cheat Sheet (a new session identifier at every sign-in; SameSite), OWASP CSRF Prevention
Cheat Sheet (synchronizer token on every state-changing request)."""

from __future__ import annotations

import sqlalchemy as sa
from fastapi.testclient import TestClient
from sqlmodel import Session, select

from service.accounts.models import AccessToken, Organisation, SignInThrottle, User
from service.audit.service import history
from service.deps import CSRF_HEADER, SESSION_COOKIE
from tests.accounts.conftest import PASSWORD
from tests.auth_helpers import bearer, sign_in_cookie
from tests.factories import make_user

TOKENS = "/api/v1/auth/tokens"
SESSION = "/api/v1/auth/session"
ME = "/api/v1/auth/me"
SIGN_OUT = "/api/v1/auth/sign-out"
PASSWORD_URL = "/api/v1/auth/password"


def _token(client: TestClient, email: str, password: str = PASSWORD, label: str = "") -> str:
    response = client.post(TOKENS, json={"email": email, "password": password, "label": label})
    assert response.status_code == 201, response.text
    return str(response.json()["token"])


def _bearer(raw: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {raw}"}


def _reload(session: Session, user: User) -> User:
    session.expire_all()
    fresh = session.get(User, user.id)
    assert fresh is not None
    return fresh


def test_token_is_issued_once_and_authenticates(client: TestClient, technician: User) -> None:
    response = client.post(
        TOKENS, json={"email": technician.email, "password": PASSWORD, "label": "tablet 2"}
    )
    assert response.status_code == 201
    body = response.json()
    assert body["label"] == "tablet 2"
    assert body["kind"] == "api"
    me = client.get(ME, headers=_bearer(body["token"]))
    assert me.status_code == 200
    assert me.json()["user"]["email"] == technician.email
    assert me.json()["authenticated_by"] == "api"
    assert "password_hash" not in me.json()["user"]


def test_wrong_password_answers_401_like_an_unknown_email_and_is_counted(
    client: TestClient, session: Session, technician: User
) -> None:
    wrong = client.post(TOKENS, json={"email": technician.email, "password": "not the one"})
    unknown = client.post(TOKENS, json={"email": "nobody@lab.example", "password": PASSWORD})
    assert wrong.status_code == unknown.status_code == 401
    assert wrong.json() == unknown.json()
    # Both are counted, each against its email address, although the requests were refused.
    session.commit()
    assert len(session.exec(select(SignInThrottle)).all()) == 2


def test_lock_out_answers_429_until_an_admin_unlocks(
    client: TestClient, session: Session, technician: User, admin: User
) -> None:
    for _ in range(4):
        # Clear each back-off wait so that the fifth failure is reached at once.
        client.post(TOKENS, json={"email": technician.email, "password": "not the one"})
        session.execute(sa.update(SignInThrottle).values(wait_until=None))
        session.commit()
    locked = client.post(TOKENS, json={"email": technician.email, "password": "not the one"})
    assert locked.status_code == 429
    assert locked.json()["code"] == "too_many_attempts"
    assert "try again after" in locked.json()["detail"]
    assert locked.json()["retry_after_seconds"] == 15 * 60
    # The right password does not get through while locked.
    right = client.post(TOKENS, json={"email": technician.email, "password": PASSWORD})
    assert right.status_code == 429

    unlock = client.post(f"/api/v1/users/{technician.id}/unlock", headers=bearer(session, admin))
    assert unlock.status_code == 200
    assert unlock.json()["failed_sign_ins"] == 0
    assert unlock.json()["locked_until"] is None
    assert client.post(TOKENS, json={"email": technician.email, "password": PASSWORD}).is_success


def test_revoked_token_answers_401(client: TestClient, technician: User) -> None:
    raw = _token(client, technician.email)
    listed = client.get(TOKENS, headers=_bearer(raw)).json()
    (mine,) = listed
    assert mine["current"] is True
    assert "token" not in mine
    assert "token_hash" not in mine
    revoked = client.delete(f"{TOKENS}/{mine['id']}", headers=_bearer(raw))
    assert revoked.status_code == 204
    assert client.get(ME, headers=_bearer(raw)).status_code == 401


def test_revoking_writes_an_audit_event(
    client: TestClient, session: Session, technician: User
) -> None:
    raw = _token(client, technician.email)
    (mine,) = client.get(TOKENS, headers=_bearer(raw)).json()
    client.delete(f"{TOKENS}/{mine['id']}", headers=_bearer(raw))
    fields = {e.field: e for e in history(session, "access_token", mine["id"])}
    assert fields["kind"].new_value == "api"
    assert fields["revoked_at"].actor_id == technician.id


def test_others_tokens_are_not_found_except_for_an_admin(
    client: TestClient, session: Session, technician: User, admin: User, lab: Organisation
) -> None:
    other = make_user(session, organisation=lab, email="other@lab.example")
    session.commit()
    raw = _token(client, technician.email)
    (token,) = client.get(TOKENS, headers=_bearer(raw)).json()
    as_other = client.delete(f"{TOKENS}/{token['id']}", headers=bearer(session, other))
    assert as_other.status_code == 404
    as_admin = client.delete(f"{TOKENS}/{token['id']}", headers=bearer(session, admin))
    assert as_admin.status_code == 204
    assert client.get(ME, headers=_bearer(raw)).status_code == 401


def test_session_sign_in_sets_a_protected_cookie_and_returns_the_csrf_token(
    client: TestClient, technician: User
) -> None:
    response = client.post(SESSION, json={"email": technician.email, "password": PASSWORD})
    assert response.status_code == 200
    cookie = response.headers["set-cookie"]
    assert cookie.startswith(f"{SESSION_COOKIE}=")
    assert "HttpOnly" in cookie
    assert "SameSite=lax" in cookie
    assert "Secure" not in cookie  # plain http here
    assert "Max-Age=43200" in cookie  # settings.session_hours default: 12 h
    me = client.get(ME)
    assert me.status_code == 200
    assert me.json()["authenticated_by"] == "session"
    assert me.json()["csrf_token"] == response.json()["csrf_token"]


def test_session_cookie_is_secure_over_https(engine, technician: User) -> None:
    from service.main import create_app

    with TestClient(create_app(), base_url="https://testserver") as https_client:
        response = https_client.post(
            SESSION, json={"email": technician.email, "password": PASSWORD}
        )
    assert response.status_code == 200
    assert "Secure" in response.headers["set-cookie"]


def test_each_sign_in_replaces_the_session(
    client: TestClient, session: Session, technician: User
) -> None:
    first = client.post(SESSION, json={"email": technician.email, "password": PASSWORD})
    second = client.post(SESSION, json={"email": technician.email, "password": PASSWORD})
    assert first.json()["csrf_token"] != second.json()["csrf_token"]
    sessions = session.exec(
        select(AccessToken).where(
            AccessToken.user_id == technician.id, AccessToken.kind == "session"
        )
    ).all()
    assert len(sessions) == 2
    assert sum(s.revoked_at is None for s in sessions) == 1


def test_cookie_write_needs_the_csrf_header(client: TestClient, technician: User) -> None:
    signed_in = client.post(SESSION, json={"email": technician.email, "password": PASSWORD})
    csrf = {CSRF_HEADER: signed_in.json()["csrf_token"]}
    refused = client.post(SIGN_OUT)
    assert refused.status_code == 403
    assert "CSRF" in refused.json()["detail"]
    wrong = client.post(SIGN_OUT, headers={CSRF_HEADER: "forged"})
    assert wrong.status_code == 403
    assert client.get(ME).status_code == 200  # still signed in
    assert client.post(SIGN_OUT, headers=csrf).status_code == 204


def test_sign_out_revokes_the_session_and_clears_the_cookie(
    client: TestClient, session: Session, technician: User
) -> None:
    csrf = sign_in_cookie(session, client, technician)
    cookie = client.cookies.get(SESSION_COOKIE)
    response = client.post(SIGN_OUT, headers=csrf)
    assert response.status_code == 204
    assert 'seepline_session=""' in response.headers["set-cookie"]
    # Replaying the old cookie does not work either: the session itself is revoked.
    client.cookies.set(SESSION_COOKIE, cookie)
    assert client.get(ME).status_code == 401


def test_sign_out_revokes_a_bearer_token(client: TestClient, technician: User) -> None:
    raw = _token(client, technician.email)
    assert client.post(SIGN_OUT, headers=_bearer(raw)).status_code == 204
    assert client.get(ME, headers=_bearer(raw)).status_code == 401


def test_password_change_revokes_other_sessions_and_keeps_this_one(
    client: TestClient, session: Session, technician: User, engine
) -> None:
    from service.main import create_app

    api_token = _token(client, technician.email)
    with TestClient(create_app()) as other_browser:
        other_browser.post(SESSION, json={"email": technician.email, "password": PASSWORD})
        csrf = sign_in_cookie(session, client, technician)
        response = client.post(
            PASSWORD_URL,
            json={"current_password": PASSWORD, "new_password": "a brand new phrase 7"},
            headers=csrf,
        )
        assert response.status_code == 200
        assert response.json() == {"revoked_tokens": 2}
        assert other_browser.get(ME).status_code == 401
    assert client.get(ME, headers=_bearer(api_token)).status_code == 401
    assert client.get(ME).status_code == 200
    old = client.post(TOKENS, json={"email": technician.email, "password": PASSWORD})
    assert old.status_code == 401
    _token(client, technician.email, password="a brand new phrase 7")
    assert technician.id is not None
    events = [e for e in history(session, "app_user", technician.id) if e.field == "password"]
    assert len(events) == 1
    assert "phrase" not in (events[0].new_value or "")


def test_wrong_current_password_is_refused_and_counted(
    client: TestClient, session: Session, technician: User
) -> None:
    response = client.post(
        PASSWORD_URL,
        json={"current_password": "not the one", "new_password": "a brand new phrase 7"},
        headers=bearer(session, technician),
    )
    assert response.status_code == 403
    assert "current_password" in response.json()["detail"]
    assert _reload(session, technician).failed_sign_ins == 1


def test_short_new_password_is_refused_naming_the_field(
    client: TestClient, session: Session, technician: User
) -> None:
    response = client.post(
        PASSWORD_URL,
        json={"current_password": PASSWORD, "new_password": "short"},
        headers=bearer(session, technician),
    )
    assert response.status_code == 422
    (problem,) = response.json()["errors"]
    assert problem["loc"] == ["body", "new_password"]
    assert "10 characters" in problem["msg"]


def test_missing_field_is_a_422_naming_it(client: TestClient) -> None:
    response = client.post(TOKENS, json={"password": PASSWORD})
    assert response.status_code == 422
    assert [p["loc"] for p in response.json()["errors"]] == [["body", "email"]]


def test_anonymous_requests_answer_401(client: TestClient) -> None:
    assert client.get(ME).status_code == 401
    assert client.get(TOKENS).status_code == 401
    body = {"current_password": PASSWORD, "new_password": "a brand new phrase 7"}
    assert client.post(PASSWORD_URL, json=body).status_code == 401
