"""The sign-in rules without HTTP: password check, back-off, lock-out, device cookies, rehash,
re-authentication.

Sources: OWASP Authentication Cheat Sheet (one generic message for a wrong user or password;
lock-out after repeated failures with an unlock path), the OWASP "Slow Down Online Guessing
Attacks with Device Cookies" page (a known device is not locked out by others' failures) and
NIST SP 800-63B §5.2.2 (rate limiting failed authentication attempts). The thresholds (5
failures, 15 minutes, 30 s for a known device) are common practice, no source."""

from __future__ import annotations

from datetime import datetime, timedelta
from typing import Any

import pytest
from argon2 import PasswordHasher
from sqlmodel import Session, select

from service.accounts import signin
from service.accounts.models import SignInThrottle, User
from service.accounts.passwords import verify_password
from service.audit.service import history
from service.db import utcnow
from service.errors import NotAuthenticated, PermissionDenied, TooManyAttempts
from tests.accounts.conftest import PASSWORD


def attempt(
    email: str, password: str, *, device: str | None = None, now: datetime | None = None
) -> User:
    """One sign-in through the service, as the routes make it; returns the user."""
    return signin.sign_in(
        email=email, password=password, device=device, then=lambda _s, user: user, now=now
    )


def outcome(email: str, password: str, **kwargs: Any) -> tuple[str, str, Any]:
    """What a caller is told: the error class, its message and its detail ('ok' if let in)."""
    try:
        attempt(email, password, **kwargs)
    except (NotAuthenticated, TooManyAttempts) as exc:
        detail = exc.detail.get("retry_after_seconds") if isinstance(exc.detail, dict) else None
        return type(exc).__name__, exc.message.split(" after ")[0], detail
    return "ok", "", None


def throttle_rows(session: Session) -> int:
    session.commit()  # see what the service committed
    return len(session.exec(select(SignInThrottle)).all())


def test_right_password_returns_the_user_and_clears_failures(
    session: Session, technician: User
) -> None:
    with pytest.raises(NotAuthenticated):
        attempt(technician.email, "not it at all")
    assert throttle_rows(session) == 1
    user = attempt("TECH@lab.example ", PASSWORD)
    assert user.id == technician.id
    assert throttle_rows(session) == 0


def test_wrong_password_and_unknown_email_get_the_same_refusal(technician: User) -> None:
    # OWASP Authentication Cheat Sheet: the message must not tell which part was wrong.
    with pytest.raises(NotAuthenticated) as wrong_password:
        attempt(technician.email, "not it at all")
    with pytest.raises(NotAuthenticated) as unknown_email:
        attempt("nobody@lab.example", PASSWORD)
    assert wrong_password.value.message == unknown_email.value.message == signin.REFUSED


def test_known_and_unknown_emails_are_answered_alike_through_the_lock(technician: User) -> None:
    # The attack run found that a known email earned "too many failed sign-ins" from its 3rd
    # failure while an unknown one was always 401: an account could be told from none.
    now = utcnow()
    answers: dict[str, list[tuple[str, str, Any]]] = {}
    for email in (technician.email, "nobody@lab.example"):
        answers[email] = []
        for step in range(8):
            answers[email].append(outcome(email, "wrong guess", now=now + timedelta(seconds=step)))
    assert answers[technician.email] == answers["nobody@lab.example"]
    kinds = [kind for kind, _message, _wait in answers[technician.email]]
    assert kinds[:3] == ["NotAuthenticated"] * 3
    assert "TooManyAttempts" in kinds  # both are limited, in the same steps


def test_each_account_and_the_decoy_spend_one_password_hash(
    technician: User, monkeypatch: pytest.MonkeyPatch
) -> None:
    # Timing must not tell an account from none (OWASP Authentication Cheat Sheet): an unknown
    # email is checked against a decoy hash, so both answers cost one Argon2 verification.
    calls: list[str] = []
    real = signin.verify_password

    def counting(password_hash: str, password: str) -> bool:
        calls.append(password_hash)
        return real(password_hash, password)

    monkeypatch.setattr(signin, "verify_password", counting)
    with pytest.raises(NotAuthenticated):
        attempt(technician.email, "wrong guess")
    with pytest.raises(NotAuthenticated):
        attempt("nobody@lab.example", "wrong guess")
    assert len(calls) == 2
    assert all(c.startswith("$argon2id$") for c in calls)


def test_fifth_failure_locks_new_devices_for_fifteen_minutes(
    session: Session, technician: User
) -> None:
    now = utcnow()
    for _ in range(4):
        with pytest.raises(NotAuthenticated):
            attempt(technician.email, "wrong", now=now)
        now += timedelta(minutes=1)  # past any back-off
    with pytest.raises(TooManyAttempts) as locked:
        attempt(technician.email, "wrong", now=now)
    assert locked.value.detail["retry_after_seconds"] == 15 * 60
    # A browser that never signed in to the account waits, even with the right password.
    with pytest.raises(TooManyAttempts, match="try again after"):
        attempt(technician.email, PASSWORD, now=now + timedelta(minutes=14))
    user = attempt(technician.email, PASSWORD, now=now + timedelta(minutes=15))
    assert user.id == technician.id
    assert throttle_rows(session) == 0


def test_the_owners_device_signs_in_through_the_lock(admin: User) -> None:
    # The attack run locked the admin out for 15 minutes every 5 attempts, from anywhere. The
    # admin's own browser holds a device cookie from an earlier sign-in and is let through.
    device = signin.device_cookie(admin)
    now = utcnow()
    for _ in range(12):
        with pytest.raises((NotAuthenticated, TooManyAttempts)):
            attempt(admin.email, "attacker guess", now=now)
    with pytest.raises(TooManyAttempts):
        attempt(admin.email, PASSWORD, now=now)  # a new device is locked out
    assert attempt(admin.email, PASSWORD, device=device, now=now).id == admin.id


def test_a_device_that_keeps_failing_waits_only_a_short_back_off(technician: User) -> None:
    device = signin.device_cookie(technician)
    now = utcnow()
    waits = []
    for _ in range(10):
        _kind, _message, wait = outcome(technician.email, "wrong", device=device, now=now)
        waits.append(wait or 0)
        now += timedelta(seconds=wait or 0)
    assert max(waits) <= signin.DEVICE_BACKOFF.total_seconds()
    user = attempt(technician.email, PASSWORD, device=device, now=now + signin.DEVICE_BACKOFF)
    assert user.id == technician.id


def test_another_users_device_cookie_is_no_way_past_the_lock(admin: User, technician: User) -> None:
    now = utcnow()
    for _ in range(5):
        with pytest.raises((NotAuthenticated, TooManyAttempts)):
            attempt(admin.email, "wrong", now=now)
    with pytest.raises(TooManyAttempts):
        attempt(admin.email, PASSWORD, device=signin.device_cookie(technician), now=now)
    with pytest.raises(TooManyAttempts):
        attempt(admin.email, PASSWORD, device="forged." + "x" * 40, now=now)


def test_third_failure_earns_a_short_wait(technician: User) -> None:
    now = utcnow()
    for _ in range(3):
        with pytest.raises(NotAuthenticated):
            attempt(technician.email, "wrong", now=now)
    with pytest.raises(TooManyAttempts):
        attempt(technician.email, PASSWORD, now=now + timedelta(seconds=4))
    attempt(technician.email, PASSWORD, now=now + timedelta(seconds=5))


def test_old_failures_are_forgotten(technician: User) -> None:
    now = utcnow()
    for _ in range(4):
        with pytest.raises(NotAuthenticated):
            attempt("nobody@lab.example", "wrong", now=now)
        now += timedelta(minutes=1)
    later = now + signin.FORGET_AFTER
    assert outcome("nobody@lab.example", "wrong", now=later)[0] == "NotAuthenticated"
    assert outcome("nobody@lab.example", "wrong", now=later)[0] == "NotAuthenticated"


def test_disabled_account_is_refused_with_the_same_message(
    session: Session, technician: User
) -> None:
    technician.is_active = False
    session.add(technician)
    session.commit()
    with pytest.raises(NotAuthenticated, match=signin.REFUSED):
        attempt(technician.email, PASSWORD)


def test_hash_with_old_work_factors_is_replaced_on_sign_in(
    session: Session, technician: User
) -> None:
    old_hash = PasswordHasher(time_cost=2, memory_cost=128).hash(PASSWORD)
    technician.password_hash = old_hash
    session.add(technician)
    session.commit()
    attempt(technician.email, PASSWORD)
    session.refresh(technician)
    assert technician.password_hash != old_hash
    assert verify_password(technician.password_hash, PASSWORD)


def test_re_authentication_lock_out_is_written_to_the_audit_trail(
    session: Session, technician: User
) -> None:
    technician.failed_sign_ins = 4
    with pytest.raises(TooManyAttempts):
        signin.confirm_password(session, technician, "wrong")
    assert technician.id is not None
    events = history(session, "app_user", technician.id)
    assert [e.field for e in events] == ["locked_until"]


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
