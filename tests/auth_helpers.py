"""Sign a test user in without the sign-in route: bearer headers, or a session cookie + CSRF."""

from __future__ import annotations

from datetime import timedelta

from fastapi.testclient import TestClient
from sqlmodel import Session

from service.accounts.models import User
from service.accounts.tokens import issue_token
from service.common import TokenKind
from service.deps import CSRF_HEADER, SESSION_COOKIE, sign_session_cookie


def bearer(session: Session, user: User) -> dict[str, str]:
    """Authorization headers for `user` (commits so the app sees the token)."""
    raw, _ = issue_token(session, user, kind=TokenKind.API, label="test")
    session.commit()
    return {"Authorization": f"Bearer {raw}"}


def sign_in_cookie(session: Session, client: TestClient, user: User) -> dict[str, str]:
    """Set the session cookie on `client`; returns the CSRF header to send with writes."""
    raw, token = issue_token(session, user, kind=TokenKind.SESSION, lifetime=timedelta(hours=1))
    session.commit()
    client.cookies.set(SESSION_COOKIE, sign_session_cookie(raw))
    return {CSRF_HEADER: token.csrf_token}
