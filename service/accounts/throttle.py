"""Who failed sign-ins are counted against: an email address or a trusted device, as HMACs
under the secret key (the table never holds the addresses that were tried)."""

from __future__ import annotations

import hashlib
import hmac

from sqlmodel import Session

from service.accounts.models import SignInThrottle
from service.config import get_settings


def _subject(*parts: object) -> str:
    key = get_settings().secret_key.encode()
    return hmac.new(key, ":".join(map(str, parts)).encode(), hashlib.sha256).hexdigest()


def account_subject(email: str) -> str:
    """The subject of an email address (normalised: accounts.service.normalise_email)."""
    return _subject("account", email)


def device_subject(user_id: int, nonce: str) -> str:
    return _subject("device", user_id, nonce)


def clear_failures(session: Session, email: str) -> None:
    """Forget the failed sign-ins counted against `email` (an admin's unlock)."""
    row = session.get(SignInThrottle, account_subject(email))
    if row is not None:
        session.delete(row)
        session.flush()
