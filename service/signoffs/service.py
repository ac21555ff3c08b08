"""Sign-off rules: a signature needs the signer's password again and records the hash of
exactly what was signed (the reduction's input hash and the hash of its stored result)."""

from __future__ import annotations

import hashlib
import json
from collections.abc import Sequence
from typing import Any

from sqlmodel import Session, col, select

from service.accounts import signin
from service.accounts.models import User
from service.audit.service import record_created
from service.common import SignOffMeaning
from service.errors import PermissionDenied, TooManyAttempts
from service.lab_tests.models import PermeabilityTest
from service.signoffs.models import SignOff


def _sha256(value: Any) -> str:
    encoded = json.dumps(value, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(encoded.encode()).hexdigest()


def result_hash(result: dict[str, Any] | None) -> str:
    """SHA-256 of the canonical JSON of a stored reduction result."""
    return _sha256(result)


def signed_content(test: PermeabilityTest) -> dict[str, str]:
    """What a sign-off on `test` vouches for: its inputs and the result computed from them."""
    return {"input_hash": test.input_hash, "result_hash": result_hash(test.result)}


def content_hash(test: PermeabilityTest) -> str:
    """The hash stored in a sign-off; recompute it from the test to check a signature."""
    return _sha256(signed_content(test))


def confirm_password(session: Session, user: User, password: str) -> None:
    """Refuse (403) unless `password` is the signer's own: a sign-off is a signature.

    Wrong passwords count towards the sign-in lock-out (429 once locked). The failure count
    is committed before the refusal ends the request, which rolls back everything else; this
    runs before the sign-off changes anything, so nothing else is committed with it."""
    try:
        signin.confirm_password(session, user, password, field="password")
    except (PermissionDenied, TooManyAttempts) as exc:
        session.commit()
        if isinstance(exc, PermissionDenied):
            raise PermissionDenied(
                "password: the password is not correct; nothing was signed or changed",
                detail={"field": "password"},
            ) from exc
        raise


def record_sign_off(
    session: Session,
    test: PermeabilityTest,
    *,
    actor: User,
    meaning: SignOffMeaning,
    note: str = "",
) -> SignOff:
    """Append a sign-off on the test as it stands (flush first so its version is final)."""
    assert test.id is not None
    assert actor.id is not None
    sign_off = SignOff(
        test_id=test.id,
        user_id=actor.id,
        role=actor.role,
        meaning=meaning,
        content_hash=content_hash(test),
        test_version=test.version,
        note=note,
    )
    session.add(sign_off)
    session.flush()
    record_created(session, sign_off, actor_id=actor.id)
    return sign_off


def sign_offs_of(session: Session, test_id: int) -> Sequence[SignOff]:
    return session.exec(
        select(SignOff).where(SignOff.test_id == test_id).order_by(col(SignOff.id))
    ).all()


def performer_ids(session: Session, test: PermeabilityTest) -> set[int]:
    """Everyone who performed the test: its technician and anyone with a 'performed' sign-off."""
    assert test.id is not None
    ids = set(
        session.exec(
            select(SignOff.user_id).where(
                SignOff.test_id == test.id, SignOff.meaning == SignOffMeaning.PERFORMED
            )
        ).all()
    )
    if test.technician_id is not None:
        ids.add(test.technician_id)
    return ids
