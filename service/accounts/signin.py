"""Signing in: the password check with back-off and lock-out, and the sessions and API tokens
it hands out, password change and revocation."""

from __future__ import annotations

from datetime import datetime, timedelta
from functools import lru_cache

from sqlmodel import Session, select

from service.accounts.models import AccessToken, User
from service.accounts.passwords import hash_password, needs_rehash, verify_password
from service.accounts.service import (
    MAX_PASSWORD_LENGTH,
    check_password_strength,
    field_error,
    normalise_email,
    revoke_all_tokens,
    revoke_token,
)
from service.accounts.tokens import issue_token
from service.audit.service import record_change, record_created
from service.common import TokenKind
from service.config import get_settings
from service.db import utcnow
from service.errors import (
    NotAuthenticated,
    PermissionDenied,
    TooManyAttempts,
)

MAX_FAILURES = 5
LOCKOUT = timedelta(minutes=15)
# Back-off before the lock-out: a short wait after the 3rd and 4th failure slows guessing
# without locking out someone who mistyped twice.
BACKOFF = {3: timedelta(seconds=5), 4: timedelta(seconds=30)}
# One message for an unknown email, a wrong password and a disabled account, so that the
# answer never tells whether an email has an account.
REFUSED = "wrong email or password"
MAX_API_TOKEN_DAYS = 366


@lru_cache
def _decoy_hash() -> str:
    return hash_password("decoy password, never a real one")


def _locked(user: User, now: datetime) -> bool:
    return user.locked_until is not None and user.locked_until > now


def _too_many(user: User, now: datetime) -> TooManyAttempts:
    assert user.locked_until is not None
    until = user.locked_until.replace(microsecond=0)
    wait = max(1, int((user.locked_until - now).total_seconds() + 0.999))
    return TooManyAttempts(
        f"too many failed sign-ins: try again after {until.isoformat()} (in {wait} s)",
        detail={"locked_until": until.isoformat(), "retry_after_seconds": wait},
    )


def _count_failure(session: Session, user: User, now: datetime) -> None:
    """One more failed attempt; sets the back-off wait or the lock-out it earns."""
    assert user.id is not None
    user.failed_sign_ins += 1
    if user.failed_sign_ins >= MAX_FAILURES:
        old = user.locked_until
        user.locked_until = now + LOCKOUT
        # The lock-out is a security event worth keeping in the trail (no actor: nobody
        # signed in); the counter itself is bookkeeping and bumps no version.
        record_change(
            session,
            entity="app_user",
            entity_id=user.id,
            field="locked_until",
            old=old,
            new=user.locked_until,
            actor_id=None,
        )
    elif user.failed_sign_ins in BACKOFF:
        user.locked_until = now + BACKOFF[user.failed_sign_ins]
    session.add(user)
    session.flush()


def _reset_failures(session: Session, user: User) -> None:
    if user.failed_sign_ins or user.locked_until is not None:
        user.failed_sign_ins = 0
        user.locked_until = None
        session.add(user)
        session.flush()


def check_credentials(
    session: Session, *, email: str, password: str, now: datetime | None = None
) -> User:
    """The active user with this email and password, or raise.

    Raises NotAuthenticated (one message whatever was wrong) or TooManyAttempts while the
    account waits out a back-off or lock-out. A failure is counted on the user row: the
    caller must commit before letting the error end the request, or the count is lost."""
    now = now or utcnow()
    user = session.exec(
        select(User).where(User.email == normalise_email(email)).with_for_update()
    ).first()
    if user is None or len(password) > MAX_PASSWORD_LENGTH:
        # Spend the same time as a real check, so timing does not tell either.
        verify_password(_decoy_hash(), password[:MAX_PASSWORD_LENGTH])
        raise NotAuthenticated(REFUSED)
    if _locked(user, now):
        raise _too_many(user, now)
    if not verify_password(user.password_hash, password):
        _count_failure(session, user, now)
        if user.failed_sign_ins >= MAX_FAILURES:
            raise _too_many(user, now)
        raise NotAuthenticated(REFUSED)
    if not user.is_active:
        raise NotAuthenticated(REFUSED)
    if needs_rehash(user.password_hash):
        user.password_hash = hash_password(password)
    _reset_failures(session, user)
    return user


def confirm_password(
    session: Session,
    user: User,
    password: str,
    *,
    field: str = "password",
    now: datetime | None = None,
) -> None:
    """Re-authentication of a signed-in user (password change, sign-off).

    Wrong passwords count towards the same lock-out as sign-in; raises PermissionDenied
    naming `field`, or TooManyAttempts. As with check_credentials, commit before the error
    ends the request so the failure is counted."""
    now = now or utcnow()
    if _locked(user, now):
        raise _too_many(user, now)
    if len(password) > MAX_PASSWORD_LENGTH or not verify_password(user.password_hash, password):
        _count_failure(session, user, now)
        if user.failed_sign_ins >= MAX_FAILURES:
            raise _too_many(user, now)
        raise PermissionDenied(f"{field}: the password is wrong")
    _reset_failures(session, user)


def start_session(
    session: Session, user: User, *, replacing: AccessToken | None = None
) -> tuple[str, AccessToken]:
    """A new sign-in session (raw secret for the cookie, and its row). The session it
    replaces, if any, is revoked: every sign-in gets a fresh token."""
    if replacing is not None and replacing.user_id == user.id:
        revoke_token(session, replacing, actor=user)
    lifetime = timedelta(hours=get_settings().session_hours)
    raw, token = issue_token(session, user, kind=TokenKind.SESSION, lifetime=lifetime)
    record_created(session, token, actor_id=user.id)
    return raw, token


def issue_api_token(
    session: Session, user: User, *, label: str, expires_in_days: int | None = None
) -> tuple[str, AccessToken]:
    """A new bearer token for the API; the raw secret is returned once and never stored."""
    lifetime = timedelta(days=expires_in_days) if expires_in_days else None
    raw, token = issue_token(session, user, kind=TokenKind.API, lifetime=lifetime, label=label)
    record_created(session, token, actor_id=user.id)
    return raw, token


def change_password(
    session: Session,
    user: User,
    *,
    current_password: str,
    new_password: str,
    keep: AccessToken | None = None,
) -> int:
    """Set a new password after checking the current one; every other session and API
    token of the user is revoked (a leaked password may have minted them). Returns how many
    were revoked."""
    assert user.id is not None
    confirm_password(session, user, current_password, field="current_password")
    check_password_strength(new_password, field="new_password")
    if new_password == current_password:
        raise field_error("new_password", "must differ from the current password")
    user.password_hash = hash_password(new_password)
    user.version += 1
    session.add(user)
    record_change(
        session,
        entity="app_user",
        entity_id=user.id,
        field="password",
        old=None,
        new="changed",
        actor_id=user.id,
    )
    session.flush()
    return revoke_all_tokens(session, user, actor=user, keep=keep)
