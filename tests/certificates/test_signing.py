"""The signing key: configured path, generation outside production, refusal in production."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest
from cryptography.hazmat.primitives import serialization
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey
from cryptography.hazmat.primitives.asymmetric.rsa import generate_private_key

from service.certificates import signing
from service.config import Settings


@pytest.fixture
def fresh_key_cache() -> Iterator[None]:
    signing.load_signing_key.cache_clear()
    yield
    signing.load_signing_key.cache_clear()


def use_settings(monkeypatch: pytest.MonkeyPatch, **fields: object) -> None:
    settings = Settings(
        secret_key="a-test-secret-of-enough-length",
        public_base_url="https://seepline.example-lab.test",
        **fields,  # type: ignore[arg-type]
    )
    monkeypatch.setattr(signing, "get_settings", lambda: settings)


@pytest.mark.usefixtures("fresh_key_cache")
def test_production_refuses_to_start_without_a_key(
    monkeypatch: pytest.MonkeyPatch, tmp_path: Path
) -> None:
    use_settings(
        monkeypatch, environment="production", signing_key_path=str(tmp_path / "missing.pem")
    )
    with pytest.raises(signing.SigningKeyMissing, match="SIGNING_KEY_PATH"):
        signing.load_signing_key()
    assert not (tmp_path / "missing.pem").exists()


@pytest.mark.usefixtures("fresh_key_cache")
def test_development_generates_a_key_once(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    path = tmp_path / "var" / "key.pem"
    use_settings(monkeypatch, environment="development", signing_key_path=str(path))
    first = signing.load_signing_key()
    assert path.exists()
    assert path.stat().st_mode & 0o077 == 0
    signing.load_signing_key.cache_clear()
    assert signing.load_signing_key().key_id == first.key_id


@pytest.mark.usefixtures("fresh_key_cache")
def test_a_configured_key_is_used_and_signs_verifiably(
    monkeypatch: pytest.MonkeyPatch, tmp_path: Path
) -> None:
    private = Ed25519PrivateKey.generate()
    path = tmp_path / "lab.pem"
    path.write_bytes(
        private.private_bytes(
            serialization.Encoding.PEM,
            serialization.PrivateFormat.PKCS8,
            serialization.NoEncryption(),
        )
    )
    use_settings(monkeypatch, environment="production", signing_key_path=str(path))
    key = signing.load_signing_key()
    assert key.key_id == signing.key_id_of(private.public_key())
    signature = key.sign(b"%PDF-1.7 example")
    assert signing.verify_signature(private.public_key(), b"%PDF-1.7 example", signature)
    assert not signing.verify_signature(private.public_key(), b"%PDF-1.7 exampl3", signature)
    assert not signing.verify_signature(private.public_key(), b"x", "not base64!")


@pytest.mark.usefixtures("fresh_key_cache")
def test_a_key_of_the_wrong_kind_is_refused(
    monkeypatch: pytest.MonkeyPatch, tmp_path: Path
) -> None:
    path = tmp_path / "rsa.pem"
    path.write_bytes(
        generate_private_key(public_exponent=65537, key_size=2048).private_bytes(
            serialization.Encoding.PEM,
            serialization.PrivateFormat.PKCS8,
            serialization.NoEncryption(),
        )
    )
    use_settings(monkeypatch, environment="production", signing_key_path=str(path))
    with pytest.raises(signing.SigningKeyMissing, match="Ed25519"):
        signing.load_signing_key()
