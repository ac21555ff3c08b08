"""The address printed on a certificate and in its QR code: in development the address the
service was actually reached at, in production the configured PUBLIC_BASE_URL (required)."""

from __future__ import annotations

import pytest
from fastapi.testclient import TestClient
from pydantic import ValidationError
from sqlmodel import Session

from service.certificates.models import Certificate
from service.config import Settings, get_settings
from tests.auth_helpers import bearer
from tests.certificates.arrange import World
from tests.certificates.test_certificates import pdf_text

REAL_SECRET = "a-long-random-secret-for-this-test-only"


def _issue_over_http(session: Session, client: TestClient, world: World) -> dict[str, str]:
    response = client.post(
        f"/api/v1/certificates/samples/{world.sample.id}",
        json={"reason": ""},
        headers=bearer(session, world.reviewer),
    )
    assert response.status_code == 201, response.text
    body: dict[str, str] = response.json()
    return body


def test_production_refuses_to_start_without_a_public_address(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    monkeypatch.delenv("PUBLIC_BASE_URL", raising=False)
    with pytest.raises(ValidationError, match="PUBLIC_BASE_URL is unset"):
        Settings(_env_file=None, environment="production", secret_key=REAL_SECRET)
    with pytest.raises(ValidationError, match="is not an address"):
        Settings(
            _env_file=None,
            environment="production",
            secret_key=REAL_SECRET,
            public_base_url="seepline.example-lab.test",
        )
    named = Settings(
        _env_file=None,
        environment="production",
        secret_key=REAL_SECRET,
        public_base_url="https://seepline.example-lab.test/",
    )
    assert named.public_base_url == "https://seepline.example-lab.test"


def test_development_prints_the_address_actually_served(
    session: Session, engine: object, world: World, monkeypatch: pytest.MonkeyPatch
) -> None:
    from service.main import create_app

    monkeypatch.setattr(get_settings(), "public_base_url", "")
    served = "http://bench-7.lab.test:8123"
    with TestClient(create_app(), base_url=served) as client:
        body = _issue_over_http(session, client, world)
    code = body["verification_code"]
    assert body["verify_url"] == f"{served}/verify/{code}"
    certificate = session.get(Certificate, int(body["id"]))
    assert certificate is not None
    text = pdf_text(certificate.pdf).replace("\n", "")
    assert f"{served}/verify/{code}" in text
    assert "127.0.0.1:8000" not in text


def test_a_configured_public_address_wins_over_the_host_asked_for(
    session: Session, engine: object, world: World, monkeypatch: pytest.MonkeyPatch
) -> None:
    from service.main import create_app

    monkeypatch.setattr(get_settings(), "public_base_url", "https://seepline.example-lab.test")
    with TestClient(create_app(), base_url="http://internal-name:8000") as client:
        body = _issue_over_http(session, client, world)
    assert body["verify_url"] == (
        f"https://seepline.example-lab.test/verify/{body['verification_code']}"
    )
