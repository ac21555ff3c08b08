"""Access tokens: random secrets handed to the client once, stored only as SHA-256 hashes."""

from __future__ import annotations

import hashlib
import secrets
from datetime import datetime, timedelta

from sqlmodel import Session, select

from service.accounts.models import AccessToken, User
from service.common import TokenKind
from service.db import utcnow


def token_digest(raw: str) -> str:
    return hashlib.sha256(raw.encode()).hexdigest()


def issue_token(
    session: Session,
    user: User,
    *,
    kind: TokenKind,
    lifetime: timedelta | None = None,
    label: str = "",
) -> tuple[str, AccessToken]:
    """Create a token; returns the raw secret (shown once) and its stored row."""
    assert user.id is not None
    raw = secrets.token_urlsafe(32)
    token = AccessToken(
        user_id=user.id,
        kind=kind,
        token_hash=token_digest(raw),
        label=label,
        csrf_token=secrets.token_urlsafe(24) if kind == TokenKind.SESSION else "",
        expires_at=utcnow() + lifetime if lifetime else None,
    )
    session.add(token)
    session.flush()
    return raw, token


def find_live_token(
    session: Session, raw: str, *, kind: TokenKind, now: datetime | None = None
) -> tuple[AccessToken, User] | None:
    """The unrevoked, unexpired token with this secret and its active user, if any."""
    now = now or utcnow()
    row = session.exec(
        select(AccessToken, User)
        .join(User, User.id == AccessToken.user_id)  # type: ignore[arg-type]
        .where(AccessToken.token_hash == token_digest(raw), AccessToken.kind == kind)
    ).first()
    if row is None:
        return None
    token, user = row
    if token.revoked_at is not None or not user.is_active:
        return None
    if token.expires_at is not None and token.expires_at <= now:
        return None
    return token, user


def revoke(session: Session, token: AccessToken) -> None:
    if token.revoked_at is None:
        token.revoked_at = utcnow()
        session.add(token)
        session.flush()
