"""Signing in: the password check and its limits, the sessions and API tokens it hands out,
re-authentication, password change and revocation.

Limits on failed sign-ins (OWASP Authentication Cheat Sheet; "device cookies" after the
OWASP Blocking Brute Force Attacks page; NIST SP 800-63B §5.2.2):

- Per email address, known or not: a short wait after the 3rd and 4th failure, then a
  15-minute lock after the 5th. Unknown addresses are counted exactly like known ones, answer
  the same words and status, and spend the same time (a decoy password hash), so no answer
  tells whether an address has an account.
- A browser or script that signed in to the account before holds a device cookie. Its attempts
  are counted on the device, not on the address: it never meets the account's lock, only a
  short wait after repeated failures of its own. So nobody can lock the owner out of their
  usual devices by failing on purpose (the admin included).
- Failures are recorded in their own short transaction here, and the password is checked
  outside any transaction, so a route never commits or rolls back to keep the count.
"""

from __future__ import annotations

import secrets
from collections.abc import Callable
from datetime import datetime, timedelta
from functools import lru_cache
from typing import TypeVar

import sqlalchemy as sa
from itsdangerous import BadSignature, URLSafeTimedSerializer
from sqlmodel import Session, select

from service.accounts.models import AccessToken, SignInThrottle, User
from service.accounts.password_policy import MAX_PASSWORD_LENGTH
from service.accounts.passwords import hash_password, needs_rehash, verify_password
from service.accounts.service import (
    check_password_strength,
    field_error,
    normalise_email,
    revoke_all_tokens,
    revoke_token,
    set_password,
)
from service.accounts.throttle import account_subject, device_subject
from service.accounts.tokens import issue_token
from service.audit.service import record_change, record_created
from service.common import TokenKind
from service.config import get_settings
from service.db import session_scope, utcnow
from service.errors import (
    NotAuthenticated,
    PermissionDenied,
    TooManyAttempts,
)
from service.text import control_character

T = TypeVar("T")

MAX_FAILURES = 5
LOCKOUT = timedelta(minutes=15)
# Back-off before the lock-out: a short wait after the 3rd and 4th failure slows guessing
# without locking out someone who mistyped twice.
BACKOFF = {3: timedelta(seconds=5), 4: timedelta(seconds=30)}
# A trusted device never waits longer than this, however often it fails.
DEVICE_BACKOFF = timedelta(seconds=30)
# Failures older than this are forgotten (an unknown address never signs in to reset them).
FORGET_AFTER = LOCKOUT
DEVICE_COOKIE = "seepline_device"
DEVICE_COOKIE_DAYS = 400
# One message for an unknown email, a wrong password and a disabled account, so that the
# answer never tells whether an email has an account.
REFUSED = "wrong email or password"
MAX_API_TOKEN_DAYS = 366


@lru_cache
def _decoy_hash() -> str:
    return hash_password("decoy password, never a real one")


# --- device cookies ---------------------------------------------------------------------------


def _device_serializer() -> URLSafeTimedSerializer:
    return URLSafeTimedSerializer(get_settings().secret_key, salt="seepline-device")


def device_cookie(user: User) -> str:
    """A new signed device cookie for `user`, set after a successful sign-in."""
    return _device_serializer().dumps([user.id, secrets.token_urlsafe(16)])


def read_device_cookie(value: str | None) -> tuple[int, str] | None:
    """(user id, device nonce) of a genuine, unexpired device cookie, else None."""
    if not value:
        return None
    try:
        loaded = _device_serializer().loads(value, max_age=DEVICE_COOKIE_DAYS * 86400)
    except BadSignature:
        return None
    if (
        isinstance(loaded, list)
        and len(loaded) == 2
        and isinstance(loaded[0], int)
        and isinstance(loaded[1], str)
    ):
        return loaded[0], loaded[1]
    return None


# --- failure records ----------------------------------------------------------------------------


def _wait(count: int, *, trusted: bool) -> timedelta | None:
    if trusted:
        return DEVICE_BACKOFF if count >= MAX_FAILURES else BACKOFF.get(count)
    return LOCKOUT if count >= MAX_FAILURES else BACKOFF.get(count)


def _too_many(wait_until: datetime, now: datetime) -> TooManyAttempts:
    until = wait_until.replace(microsecond=0)
    wait = max(1, int((wait_until - now).total_seconds() + 0.999))
    return TooManyAttempts(
        f"too many failed sign-ins: try again after {until.isoformat()} (in {wait} s)",
        detail={"locked_until": until.isoformat(), "retry_after_seconds": wait},
    )


def _record_failure(subject: str, *, trusted: bool, now: datetime) -> datetime | None:
    """Count one failure of `subject` in its own transaction; returns the wait it earns."""
    for attempt in range(2):
        try:
            with session_scope(write=True) as session:
                row = session.exec(
                    select(SignInThrottle)
                    .where(SignInThrottle.subject == subject)
                    .with_for_update()
                ).first()
                if row is None:
                    row = SignInThrottle(subject=subject, last_failure_at=now)
                elif row.last_failure_at <= now - FORGET_AFTER:
                    row.failures = 0
                row.failures += 1
                row.last_failure_at = now
                wait = _wait(row.failures, trusted=trusted)
                row.wait_until = now + wait if wait else None
                session.add(row)
                return row.wait_until
        except sa.exc.IntegrityError:
            if attempt:  # two first failures of one subject at once: count again on the row
                raise
    return None


def _current_wait(session: Session, subject: str, now: datetime) -> datetime | None:
    row = session.get(SignInThrottle, subject)
    if row is None or row.wait_until is None or row.wait_until <= now:
        return None
    return row.wait_until


# --- signing in -----------------------------------------------------------------------------


def sign_in(
    *,
    email: str,
    password: str,
    device: str | None,
    then: Callable[[Session, User], T],
    now: datetime | None = None,
) -> T:
    """Check the email and password and, if they are right, run `then(session, user)` in the
    transaction that clears the failure count; returns what `then` returns.

    `device` is the request's device cookie. Raises NotAuthenticated (one message whatever
    was wrong) or TooManyAttempts while the email address, or the trusted device, waits."""
    now = now or utcnow()
    email = normalise_email(email)
    with session_scope() as session:
        # An address with a control character has no account (and PostgreSQL refuses NUL).
        known = control_character(email) is None
        user = session.exec(select(User).where(User.email == email)).first() if known else None
        user_id = user.id if user is not None else None
        device_of = read_device_cookie(device)
        trusted = device_of is not None and user_id is not None and device_of[0] == user_id
        subject = device_subject(*device_of) if trusted and device_of else account_subject(email)
        waiting = _current_wait(session, subject, now)
        password_hash = user.password_hash if user is not None else _decoy_hash()
        active = user is not None and user.is_active
    if waiting is not None:
        raise _too_many(waiting, now)
    # The slow hash runs outside any transaction; an unknown email spends the same time.
    right = verify_password(password_hash, password[:MAX_PASSWORD_LENGTH])
    if not (right and active and user_id is not None and len(password) <= MAX_PASSWORD_LENGTH):
        wait_until = _record_failure(subject, trusted=trusted, now=now)
        if wait_until is not None and wait_until - now >= LOCKOUT:
            raise _too_many(wait_until, now)
        raise NotAuthenticated(REFUSED)
    with session_scope(write=True) as session:
        for cleared in {subject, account_subject(email)}:
            row = session.get(SignInThrottle, cleared)
            if row is not None:
                session.delete(row)
        signed_in = session.get(User, user_id)
        assert signed_in is not None
        if needs_rehash(signed_in.password_hash):
            signed_in.password_hash = hash_password(password)
            session.add(signed_in)
        session.flush()
        return then(session, signed_in)


# --- re-authentication of a signed-in user ----------------------------------------------------


def _locked(user: User, now: datetime) -> bool:
    return user.locked_until is not None and user.locked_until > now


def _count_failure(session: Session, user: User, now: datetime) -> None:
    """One more failed re-authentication; sets the back-off wait or the lock-out it earns."""
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
    # Kept although the request fails: re-authentication comes before any other write of the
    # request, so this commits the count alone.
    session.commit()


def _reset_failures(session: Session, user: User) -> None:
    if user.failed_sign_ins or user.locked_until is not None:
        user.failed_sign_ins = 0
        user.locked_until = None
        session.add(user)
        session.flush()


def confirm_password(
    session: Session,
    user: User,
    password: str,
    *,
    field: str = "password",
    now: datetime | None = None,
) -> None:
    """Re-authentication of a signed-in user (password change, sign-off).

    Wrong passwords count towards a lock-out of re-authentication (on the user row; the
    count is committed at once, so call this before the request writes anything else);
    raises PermissionDenied naming `field`, or TooManyAttempts."""
    now = now or utcnow()
    if _locked(user, now):
        assert user.locked_until is not None
        raise _too_many(user.locked_until, now)
    if len(password) > MAX_PASSWORD_LENGTH or not verify_password(user.password_hash, password):
        _count_failure(session, user, now)
        if user.failed_sign_ins >= MAX_FAILURES:
            assert user.locked_until is not None
            raise _too_many(user.locked_until, now)
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
    check_password_strength(
        new_password, field="new_password", email=user.email, full_name=user.full_name
    )
    if new_password == current_password:
        raise field_error("new_password", "must differ from the current password")
    set_password(session, user, new_password, actor=user)
    return revoke_all_tokens(session, user, actor=user, keep=keep)
