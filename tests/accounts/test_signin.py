"""The sign-in rules without HTTP: password check, back-off, lock-out, rehash, re-authentication.

Sources: OWASP Authentication Cheat Sheet (one generic message for a wrong user or password;
lock-out after repeated failures with an unlock path) and NIST SP 800-63B §5.2.2 (rate
limiting failed authentication attempts). The thresholds (5 failures, 15 minutes) are
common practice, no source."""

from __future__ import annotations

from datetime import timedelta

import pytest
from argon2 import PasswordHasher
from sqlmodel import Session

from service.accounts import signin
from service.accounts.models import User
from service.accounts.passwords import verify_password
from service.audit.service import history
from service.db import utcnow
from service.errors import NotAuthenticated, PermissionDenied, TooManyAttempts
from tests.accounts.conftest import PASSWORD


def test_right_password_returns_the_user_and_clears_failures(
    session: Session, technician: User
) -> None:
    technician.failed_sign_ins = 2
    user = signin.check_credentials(session, email="TECH@lab.example ", password=PASSWORD)
    assert user.id == technician.id
    assert user.failed_sign_ins == 0
    assert user.locked_until is None


def test_wrong_password_and_unknown_email_get_the_same_refusal(
    session: Session, technician: User
) -> None:
    # OWASP Authentication Cheat Sheet: the message must not tell which part was wrong.
    with pytest.raises(NotAuthenticated) as wrong_password:
        signin.check_credentials(session, email=technician.email, password="not it at all")
    with pytest.raises(NotAuthenticated) as unknown_email:
        signin.check_credentials(session, email="nobody@lab.example", password=PASSWORD)
    assert wrong_password.value.message == unknown_email.value.message == signin.REFUSED
    assert technician.failed_sign_ins == 1


def test_fifth_failure_locks_for_fifteen_minutes_then_sign_in_works_again(
    session: Session, technician: User
) -> None:
    now = utcnow()
    for attempt in range(1, 5):
        with pytest.raises(NotAuthenticated):
            signin.check_credentials(session, email=technician.email, password="wrong", now=now)
        assert technician.failed_sign_ins == attempt
        now += timedelta(minutes=1)  # past any back-off
    with pytest.raises(TooManyAttempts) as locked:
        signin.check_credentials(session, email=technician.email, password="wrong", now=now)
    assert technician.locked_until == now + timedelta(minutes=15)
    assert locked.value.detail["retry_after_seconds"] == 15 * 60
    # While locked even the right password is refused, without being checked.
    with pytest.raises(TooManyAttempts, match="try again after"):
        signin.check_credentials(
            session, email=technician.email, password=PASSWORD, now=now + timedelta(minutes=14)
        )
    user = signin.check_credentials(
        session, email=technician.email, password=PASSWORD, now=now + timedelta(minutes=15)
    )
    assert user.failed_sign_ins == 0
    assert user.locked_until is None


def test_third_failure_earns_a_short_wait(session: Session, technician: User) -> None:
    now = utcnow()
    for _ in range(3):
        with pytest.raises(NotAuthenticated):
            signin.check_credentials(session, email=technician.email, password="wrong", now=now)
    with pytest.raises(TooManyAttempts):
        signin.check_credentials(
            session, email=technician.email, password=PASSWORD, now=now + timedelta(seconds=4)
        )
    signin.check_credentials(
        session, email=technician.email, password=PASSWORD, now=now + timedelta(seconds=5)
    )


def test_lock_out_is_written_to_the_audit_trail(session: Session, technician: User) -> None:
    technician.failed_sign_ins = 4
    with pytest.raises(TooManyAttempts):
        signin.check_credentials(session, email=technician.email, password="wrong")
    assert technician.id is not None
    events = history(session, "app_user", technician.id)
    assert [e.field for e in events] == ["locked_until"]


def test_disabled_account_is_refused_with_the_same_message(
    session: Session, technician: User
) -> None:
    technician.is_active = False
    with pytest.raises(NotAuthenticated, match=signin.REFUSED):
        signin.check_credentials(session, email=technician.email, password=PASSWORD)


def test_hash_with_old_work_factors_is_replaced_on_sign_in(
    session: Session, technician: User
) -> None:
    old_hash = PasswordHasher(time_cost=2, memory_cost=128).hash(PASSWORD)
    technician.password_hash = old_hash
    signin.check_credentials(session, email=technician.email, password=PASSWORD)
    assert technician.password_hash != old_hash
    assert verify_password(technician.password_hash, PASSWORD)


def test_confirm_password_counts_wrong_passwords_towards_the_lock_out(
    session: Session, technician: User
) -> None:
    with pytest.raises(PermissionDenied, match="signature_password: the password is wrong"):
        signin.confirm_password(session, technician, "wrong", field="signature_password")
    assert technician.failed_sign_ins == 1
    technician.failed_sign_ins = 4
    with pytest.raises(TooManyAttempts):
        signin.confirm_password(session, technician, "wrong")
    with pytest.raises(TooManyAttempts):
        signin.confirm_password(session, technician, PASSWORD)


def test_sign_in_with_a_fresh_session_revokes_the_one_it_replaces(
    session: Session, technician: User
) -> None:
    _, first = signin.start_session(session, technician)
    _, second = signin.start_session(session, technician, replacing=first)
    assert first.revoked_at is not None
    assert second.revoked_at is None
    assert second.csrf_token
    assert second.csrf_token != first.csrf_token
