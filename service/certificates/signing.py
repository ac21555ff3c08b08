"""The lab's Ed25519 signing key: loading (or creating it once outside production), signing,
verifying, and the history of every key the lab has used.

The configured key is trusted. Another key is trusted only through a trusted key's signature
over its statement (`key_statement`): the endorsement its successor made when it was
retired, or the introduction its predecessor made when it took over. A row written into the
key table by someone without a trusted private key is therefore never trusted."""

from __future__ import annotations

import base64
import hashlib
import os
from dataclasses import dataclass
from datetime import UTC, datetime
from functools import lru_cache
from pathlib import Path
from typing import Any

from cryptography.exceptions import InvalidSignature
from cryptography.hazmat.primitives import serialization
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey, Ed25519PublicKey
from sqlmodel import Session, col, select

from service.certificates.models import PublishedKey
from service.config import VAR_DIR, get_settings

ALGORITHM = "Ed25519"
DEFAULT_KEY_FILE = "signing_key.pem"


class SigningKeyMissing(RuntimeError):
    """Production was started without a readable signing key."""


@dataclass(frozen=True)
class SigningKey:
    private_key: Ed25519PrivateKey
    key_id: str
    path: Path

    @property
    def public_key(self) -> Ed25519PublicKey:
        return self.private_key.public_key()

    def public_pem(self) -> str:
        return self.public_key.public_bytes(
            serialization.Encoding.PEM, serialization.PublicFormat.SubjectPublicKeyInfo
        ).decode()

    def sign(self, data: bytes) -> str:
        """Base64 of the Ed25519 signature of `data`."""
        return base64.b64encode(self.private_key.sign(data)).decode()


def key_id_of(public_key: Ed25519PublicKey) -> str:
    """First 16 hex digits of the SHA-256 of the raw public key: short, stable, checkable."""
    raw = public_key.public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw)
    return hashlib.sha256(raw).hexdigest()[:16]


def _key_path() -> Path:
    configured = get_settings().signing_key_path.strip()
    return Path(configured) if configured else VAR_DIR / DEFAULT_KEY_FILE


def private_pem(private_key: Ed25519PrivateKey) -> bytes:
    return private_key.private_bytes(
        serialization.Encoding.PEM,
        serialization.PrivateFormat.PKCS8,
        serialization.NoEncryption(),
    )


def _create_key_file(path: Path) -> None:
    """Write a new key with owner-only permissions; if another process won the race, keep its."""
    path.parent.mkdir(parents=True, exist_ok=True)
    pem = private_pem(Ed25519PrivateKey.generate())
    # Written whole to a private temporary file, then linked into place: a reader never sees
    # a half-written key, and a concurrent creator's key wins if it linked first.
    temporary = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    descriptor = os.open(temporary, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600)
    with os.fdopen(descriptor, "wb") as handle:
        handle.write(pem)
    try:
        os.link(temporary, path)
    except FileExistsError:
        pass
    finally:
        temporary.unlink()


def key_path() -> Path:
    return _key_path()


@lru_cache
def load_signing_key() -> SigningKey:
    """The configured key; outside production a missing key is generated once into ./var/."""
    settings = get_settings()
    path = _key_path()
    if not path.exists():
        if settings.environment == "production":
            raise SigningKeyMissing(
                f"No certificate signing key at '{path}'. Production needs SIGNING_KEY_PATH "
                "pointing at an Ed25519 private key in PKCS#8 PEM, for example made with: "
                "openssl genpkey -algorithm ed25519 -out signing_key.pem"
            )
        _create_key_file(path)
    try:
        loaded = serialization.load_pem_private_key(path.read_bytes(), password=None)
    except (ValueError, TypeError) as exc:
        raise SigningKeyMissing(
            f"The signing key at '{path}' is not an unencrypted PEM private key: {exc}"
        ) from exc
    if not isinstance(loaded, Ed25519PrivateKey):
        raise SigningKeyMissing(
            f"The signing key at '{path}' is a {type(loaded).__name__}; an Ed25519 key is needed"
        )
    return SigningKey(private_key=loaded, key_id=key_id_of(loaded.public_key()), path=path)


def verify_signature(public_key: Ed25519PublicKey, data: bytes, signature_b64: str) -> bool:
    try:
        public_key.verify(base64.b64decode(signature_b64, validate=True), data)
    except (InvalidSignature, ValueError):
        return False
    return True


def sha256_hex(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


# --- key history -----------------------------------------------------------------------------


def timestamp(moment: datetime) -> str:
    """A time as signed statements write it: ISO 8601 in UTC with the offset, microseconds."""
    return moment.astimezone(UTC).isoformat(timespec="microseconds")


def raw_public(public_key: Ed25519PublicKey) -> str:
    """Base64 of the raw 32-byte public key."""
    raw = public_key.public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw)
    return base64.b64encode(raw).decode()


def public_key_from(raw_b64: str) -> Ed25519PublicKey:
    return Ed25519PublicKey.from_public_bytes(base64.b64decode(raw_b64, validate=True))


def public_pem(public_key: Ed25519PublicKey) -> str:
    return public_key.public_bytes(
        serialization.Encoding.PEM, serialization.PublicFormat.SubjectPublicKeyInfo
    ).decode()


def key_statement(row: PublishedKey, *, with_end: bool) -> bytes:
    """What an endorsement (`with_end`) or an introduction signs, as UTF-8 lines:

    seepline signing key 1
    key <key_id>
    public <base64 raw public key>
    valid_from <ISO 8601 UTC>
    valid_until <ISO 8601 UTC, or - in an introduction>
    """
    until = timestamp(row.valid_until) if with_end and row.valid_until else "-"
    return (
        "seepline signing key 1\n"
        f"key {row.key_id}\n"
        f"public {row.public_key}\n"
        f"valid_from {timestamp(row.valid_from)}\n"
        f"valid_until {until}\n"
    ).encode()


@dataclass(frozen=True)
class TrustedKey:
    key_id: str
    public_key: Ed25519PublicKey
    valid_from: datetime | None
    valid_until: datetime | None
    current: bool
    vouched_by: str

    def valid_at(self, moment: datetime) -> bool:
        if self.valid_from is not None and moment < self.valid_from:
            return False
        return self.valid_until is None or moment < self.valid_until


def register_key(session: Session, key: SigningKey, now: datetime) -> PublishedKey:
    """Record the configured key in the history if it is new there.

    The first key ever recorded is taken as valid from the start of the records; a key that
    replaces others without `seepline rotate-signing-key` closes them, unendorsed (they are no
    longer trusted: the rotation command is the way to keep them)."""
    row = session.get(PublishedKey, key.key_id)
    if row is not None:
        return row
    others = session.exec(select(PublishedKey)).all()
    start = now if others else datetime(2000, 1, 1, tzinfo=UTC)
    for other in others:
        if other.valid_until is None:
            other.valid_until = now
            session.add(other)
    row = PublishedKey(key_id=key.key_id, public_key=raw_public(key.public_key), valid_from=start)
    session.add(row)
    session.flush()
    return row


def trusted_keys(session: Session) -> dict[str, TrustedKey]:
    """Every key a trusted signature vouches for, with the period it may have signed in."""
    current = load_signing_key()
    rows = {row.key_id: row for row in session.exec(select(PublishedKey)).all()}
    trusted = {current.key_id: TrustedKey(current.key_id, current.public_key, None, None, True, "")}
    changed = True
    while changed:
        changed = False
        for row in rows.values():
            if row.key_id in trusted:
                continue
            found = _vouched(row, trusted)
            if found is not None:
                trusted[row.key_id] = found
                changed = True
    return trusted


def _vouched(row: PublishedKey, trusted: dict[str, TrustedKey]) -> TrustedKey | None:
    try:
        public_key = public_key_from(row.public_key)
    except ValueError:
        return None
    if key_id_of(public_key) != row.key_id:
        return None
    endorser = trusted.get(row.endorsed_by)
    if endorser is not None and verify_signature(
        endorser.public_key, key_statement(row, with_end=True), row.endorsement
    ):
        return TrustedKey(
            row.key_id, public_key, row.valid_from, row.valid_until, False, row.endorsed_by
        )
    introducer = trusted.get(row.introduced_by)
    if introducer is not None and verify_signature(
        introducer.public_key, key_statement(row, with_end=False), row.introduction
    ):
        return TrustedKey(
            row.key_id, public_key, row.valid_from, row.valid_until, False, row.introduced_by
        )
    return None


def key_check(
    keys: dict[str, TrustedKey], key_id: str, signed_at: datetime, data: bytes, signature: str
) -> str:
    """Empty if `signature` over `data` verifies with key `key_id` as valid at `signed_at`;
    else what is wrong, in words for the verification page."""
    key = keys.get(key_id)
    if key is None:
        return f"it was signed with key {key_id}, which is not among the laboratory's keys"
    if not key.valid_at(signed_at):
        return f"it was signed with key {key_id} outside the period that key was in use"
    if not verify_signature(key.public_key, data, signature):
        return "the signature does not verify"
    return ""


def rotate_signing_key(
    session: Session, *, now: datetime, new_private: Ed25519PrivateKey | None = None
) -> tuple[SigningKey, SigningKey]:
    """Retire the configured key and introduce a new one, each vouching for the other.

    Writes only the database; the caller puts the new key file in place after commit."""
    old = load_signing_key()
    old_row = register_key(session, old, now)
    private = new_private or Ed25519PrivateKey.generate()
    new = SigningKey(private_key=private, key_id=key_id_of(private.public_key()), path=old.path)
    if new.key_id == old.key_id or session.get(PublishedKey, new.key_id) is not None:
        raise ValueError(f"key {new.key_id} was used before; a new key is needed")
    old_row.valid_until = now
    old_row.endorsed_by = new.key_id
    old_row.endorsement = new.sign(key_statement(old_row, with_end=True))
    new_row = PublishedKey(key_id=new.key_id, public_key=raw_public(new.public_key), valid_from=now)
    new_row.introduced_by = old.key_id
    new_row.introduction = old.sign(key_statement(new_row, with_end=False))
    session.add(old_row)
    session.add(new_row)
    session.flush()
    return old, new


def published_keys(session: Session) -> list[dict[str, Any]]:
    """Every trusted key with its validity period and the signature vouching for it, oldest
    first (a row no trusted signature vouches for is not the lab's and is left out)."""
    trusted = trusted_keys(session)
    current = load_signing_key()
    listed: list[dict[str, Any]] = []
    rows = session.exec(select(PublishedKey).order_by(col(PublishedKey.valid_from))).all()
    for row in rows:
        if row.key_id not in trusted:
            continue
        listed.append(
            {
                "key_id": row.key_id,
                "algorithm": row.algorithm,
                "public_key_pem": public_pem(public_key_from(row.public_key)),
                "public_key_raw_base64": row.public_key,
                "valid_from": timestamp(row.valid_from),
                "valid_until": timestamp(row.valid_until) if row.valid_until else None,
                "current": row.key_id == current.key_id,
                "endorsed_by": row.endorsed_by or None,
                "endorsement": row.endorsement or None,
                "introduced_by": row.introduced_by or None,
                "introduction": row.introduction or None,
            }
        )
    if current.key_id not in {entry["key_id"] for entry in listed}:
        listed.append(
            {
                "key_id": current.key_id,
                "algorithm": ALGORITHM,
                "public_key_pem": current.public_pem(),
                "public_key_raw_base64": raw_public(current.public_key),
                "valid_from": None,
                "valid_until": None,
                "current": True,
            }
        )
    return listed
