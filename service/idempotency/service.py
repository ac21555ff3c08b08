"""Idempotent writes: the first answer to a client-generated key is stored and replayed.

A tablet on a flaky connection retries a write it never saw answered; the retry must find
the first answer (same status, same body) rather than write again. Keys are scoped (a trial
key belongs to one test), so the stored key is a hash of scope and key."""

from __future__ import annotations

import hashlib
import json
import re
from typing import Any

from sqlmodel import Session

from service.errors import Conflict, invalid
from service.idempotency.models import IdempotencyRecord

HEADER = "Idempotency-Key"
_KEY = re.compile(r"^[A-Za-z0-9._:\-]{1,64}$")


def check_key(key: str | None) -> str:
    """The key as sent, or a 422 naming the header and what it accepts."""
    if key is None or not _KEY.match(key):
        raise invalid(
            ("header", HEADER),
            "a client-generated key is required" if key is None else "is not a usable key",
            value=key,
            accepted="1 to 64 letters, digits or . _ : - (a UUID is a good choice)",
            kind="missing" if key is None else "value_error",
            label=f"{HEADER} header",
        )
    return key


def fingerprint(body: Any) -> str:
    """SHA-256 of a request body's canonical JSON: the same request gives the same hash."""
    encoded = json.dumps(body, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(encoded.encode()).hexdigest()


def _stored_key(scope: str, key: str) -> str:
    return hashlib.sha256(f"{scope}\n{key}".encode()).hexdigest()


def find_replay(
    session: Session, *, scope: str, key: str, user_id: int, request_hash: str
) -> IdempotencyRecord | None:
    """The stored first answer for this key, or None if the key is new.

    A key reused with a different body, or by someone else, is a conflict (409): replaying
    an answer to a different request would hide that the new one was never stored."""
    record = session.get(IdempotencyRecord, _stored_key(scope, key))
    if record is None:
        return None
    if record.user_id != user_id or record.request_hash != request_hash:
        raise Conflict(
            f"{HEADER} {key!r} was already used for a different request; "
            "send a new key for a new write",
            detail={"idempotency_key": key},
        )
    return record


def remember(
    session: Session,
    *,
    scope: str,
    key: str,
    user_id: int,
    request_hash: str,
    status_code: int,
    response: dict[str, Any],
) -> IdempotencyRecord:
    """Store the answer given to the first request with this key."""
    record = IdempotencyRecord(
        key=_stored_key(scope, key),
        user_id=user_id,
        request_hash=request_hash,
        status_code=status_code,
        response=response,
    )
    session.add(record)
    session.flush()
    return record
