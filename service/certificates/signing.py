"""The lab's Ed25519 signing key: loading (or creating it once outside production), signing
certificate PDFs and verifying a signature with the published public key."""

from __future__ import annotations

import base64
import hashlib
import os
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

from cryptography.exceptions import InvalidSignature
from cryptography.hazmat.primitives import serialization
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey, Ed25519PublicKey

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


def _create_key_file(path: Path) -> None:
    """Write a new key with owner-only permissions; if another process won the race, keep its."""
    path.parent.mkdir(parents=True, exist_ok=True)
    pem = Ed25519PrivateKey.generate().private_bytes(
        serialization.Encoding.PEM,
        serialization.PrivateFormat.PKCS8,
        serialization.NoEncryption(),
    )
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
