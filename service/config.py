"""Settings: the one place that reads the environment (and an optional .env file)."""

from __future__ import annotations

import secrets
from contextvars import ContextVar
from functools import lru_cache
from pathlib import Path
from typing import Literal
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from pydantic import Field, field_validator, model_validator
from pydantic_settings import BaseSettings, SettingsConfigDict

PLACEHOLDER_SECRETS = frozenset({"", "changeme", "change-me", "secret", "dev", "development"})
VAR_DIR = Path("var")


class Settings(BaseSettings):
    """Service settings; environment variables override the optional `.env` file."""

    model_config = SettingsConfigDict(env_file=".env", env_file_encoding="utf-8", extra="ignore")

    environment: Literal["development", "test", "production"] = "development"
    database_url: str = Field(default_factory=lambda: f"sqlite:///{VAR_DIR / 'seepline.db'}")
    secret_key: str = ""
    host: str = "127.0.0.1"
    port: int = Field(default=8000, ge=1, le=65535)
    # The laboratory's time zone (IANA name, e.g. Europe/Berlin): times on pages are shown in
    # it; stored times stay UTC.
    lab_timezone: str = "UTC"
    # The address clients reach the service at, printed on certificates and in their QR
    # codes. Empty (development, test): the address each request was served at; production
    # refuses to start without it.
    public_base_url: str = ""
    # Argon2 work factors: the library defaults in production, cheaper in tests.
    argon2_time_cost: int = Field(default=3, ge=1)
    argon2_memory_cost_kib: int = Field(default=65536, ge=8)
    session_hours: int = Field(default=12, ge=1)
    max_body_bytes: int = Field(default=5 * 1024 * 1024, ge=1024)
    # POST /api/v1/reductions without a token or session: the largest body accepted.
    anonymous_reduction_max_bytes: int = Field(default=256 * 1024, ge=1024)
    # Addresses (or networks, comma-separated) of the reverse proxy whose X-Forwarded-For and
    # X-Forwarded-Proto are believed. Empty: none are; '*' (any address) is refused in
    # production, as any client could then choose its own address.
    forwarded_allow_ips: str = ""
    # Ed25519 key (PKCS#8 PEM) that signs issued certificates. Empty: ./var/signing_key.pem,
    # generated once in development and test; production refuses to start without one.
    signing_key_path: str = ""
    # A signed checkpoint of the custody and audit logs is made when the last one is older
    # than this and some log moved since (also at every certificate issue and by
    # `seepline checkpoint`); 0 leaves only those two.
    checkpoint_interval_minutes: int = Field(default=60, ge=0)
    # Largest PDF accepted by the public verification upload.
    verify_upload_max_bytes: int = Field(default=10 * 1024 * 1024, ge=1024)
    # BENCH_ANCHORS=1 serves the bare speed anchors of scripts/bench_load.py
    # (service/api/bench_anchors.py); off by default, and never served in production.
    bench_anchors: bool = False

    @field_validator("lab_timezone")
    @classmethod
    def _known_timezone(cls, value: str) -> str:
        try:
            ZoneInfo(value)
        except (ZoneInfoNotFoundError, ValueError):
            raise ValueError(
                f"LAB_TIMEZONE {value!r} is not a known time zone; use an IANA name such as "
                "'UTC' or 'Europe/Berlin'"
            ) from None
        return value

    @model_validator(mode="after")
    def _secret_key_is_real(self) -> Settings:
        if self.secret_key.strip().lower() in PLACEHOLDER_SECRETS or len(self.secret_key) < 16:
            if self.environment == "production":
                raise ValueError(
                    "SECRET_KEY is unset or a placeholder; production needs a random value of "
                    "at least 16 characters (for example: python -c "
                    "'import secrets; print(secrets.token_urlsafe(32))')"
                )
            self.secret_key = _development_secret()
        return self

    @model_validator(mode="after")
    def _proxy_is_named(self) -> Settings:
        if self.environment == "production" and "*" in self.forwarded_allow_ips:
            raise ValueError(
                "FORWARDED_ALLOW_IPS='*' believes X-Forwarded-For from anyone, so any client "
                "could choose its address and escape the sign-in limits; set it to the "
                "address (or network) of your reverse proxy, e.g. 127.0.0.1"
            )
        return self

    @model_validator(mode="after")
    def _public_address_is_named(self) -> Settings:
        address = self.public_base_url.strip()
        if address and not address.startswith(("http://", "https://")):
            raise ValueError(
                f"PUBLIC_BASE_URL={address!r} is not an address; give it as "
                "https://seepline.example-lab.test (scheme and host, no path needed)"
            )
        if self.environment == "production" and not address:
            raise ValueError(
                "PUBLIC_BASE_URL is unset; production needs the address clients reach the "
                "service at (for example https://seepline.example-lab.test): it is printed on "
                "every certificate and in its QR code"
            )
        self.public_base_url = address.rstrip("/")
        return self

    @property
    def trusted_proxies(self) -> list[str]:
        return [part.strip() for part in self.forwarded_allow_ips.split(",") if part.strip()]

    @property
    def is_sqlite(self) -> bool:
        return self.database_url.startswith("sqlite")


def _development_secret() -> str:
    """Generate a secret once into ./var/ so development sessions survive restarts."""
    path = VAR_DIR / "secret_key"
    if path.exists():
        return path.read_text().strip()
    VAR_DIR.mkdir(parents=True, exist_ok=True)
    key = secrets.token_urlsafe(32)
    path.write_text(key)
    path.chmod(0o600)
    return key


@lru_cache
def get_settings() -> Settings:
    return Settings()


# The base URL the current request was served at (set per request by the app's
# ServedAddress middleware); what links use in development when PUBLIC_BASE_URL is unset.
served_base_url: ContextVar[str] = ContextVar("served_base_url", default="")


def public_base_url() -> str:
    """The address printed on certificates and in links sent out: PUBLIC_BASE_URL when set
    (always in production), else the address this request was served at, else host:port."""
    settings = get_settings()
    served = served_base_url.get().rstrip("/")
    return settings.public_base_url or served or served_address(settings.host, settings.port)


def served_address(host: str, port: int) -> str:
    """The address `seepline serve` answers on, as a browser on this machine reaches it."""
    if host in ("0.0.0.0", "::", ""):
        host = "127.0.0.1"
    elif ":" in host:
        host = f"[{host}]"
    return f"http://{host}:{port}"
