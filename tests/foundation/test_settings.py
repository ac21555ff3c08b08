"""Settings refuse placeholder secrets in production and make one up in development."""

from __future__ import annotations

from pathlib import Path

import pytest
from pydantic import ValidationError

from service import config
from service.config import Settings


@pytest.mark.parametrize("placeholder", ["", "changeme", "secret", "short"])
def test_production_refuses_placeholder_secret(placeholder: str) -> None:
    with pytest.raises(ValidationError, match="SECRET_KEY"):
        Settings(environment="production", secret_key=placeholder, _env_file=None)


def test_production_accepts_a_real_secret() -> None:
    settings = Settings(
        environment="production",
        secret_key="x" * 40,
        public_base_url="https://seepline.example-lab.test",
        _env_file=None,
    )
    assert settings.secret_key == "x" * 40


def test_development_generates_a_secret_once(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(config, "VAR_DIR", tmp_path / "var")
    first = Settings(environment="development", secret_key="", _env_file=None)
    second = Settings(environment="development", secret_key="", _env_file=None)
    assert len(first.secret_key) >= 32
    assert first.secret_key == second.secret_key
    assert (tmp_path / "var" / "secret_key").read_text() == first.secret_key
