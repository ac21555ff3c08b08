"""Organisations, users and their access tokens."""

from __future__ import annotations

from datetime import datetime

import sqlalchemy as sa
from sqlmodel import Field, SQLModel

from service.common import (
    DisplayUnits,
    OrganisationKind,
    Role,
    TokenKind,
    created_at_field,
    one_of,
    timestamp_field,
    version_field,
)


class Organisation(SQLModel, table=True):
    """The lab itself or one of its clients."""

    __table_args__ = (one_of("kind", OrganisationKind),)

    id: int | None = Field(default=None, primary_key=True)
    name: str = Field(max_length=200, unique=True)
    kind: str = Field(max_length=20)
    address: str = Field(default="", max_length=500)
    contact_email: str = Field(default="", max_length=254)
    created_at: datetime = created_at_field()
    version: int = version_field()


class User(SQLModel, table=True):
    """A person who signs in: lab staff or a client's engineer."""

    __tablename__ = "app_user"
    __table_args__ = (
        one_of("role", Role),
        one_of("display_units", DisplayUnits),
        sa.CheckConstraint("failed_sign_ins >= 0", name="failed_sign_ins_non_negative"),
    )

    id: int | None = Field(default=None, primary_key=True)
    organisation_id: int = Field(foreign_key="organisation.id", index=True)
    email: str = Field(max_length=254, unique=True)
    full_name: str = Field(max_length=200)
    role: str = Field(max_length=20)
    password_hash: str = Field(max_length=255)
    is_active: bool = True
    display_units: str = Field(default="si", max_length=5)
    failed_sign_ins: int = 0
    locked_until: datetime | None = timestamp_field()
    created_at: datetime = created_at_field()
    version: int = version_field()


class AccessToken(SQLModel, table=True):
    """A sign-in session (cookie) or an API bearer token, stored only as a SHA-256 hash."""

    __tablename__ = "access_token"
    __table_args__ = (one_of("kind", TokenKind),)

    id: int | None = Field(default=None, primary_key=True)
    user_id: int = Field(foreign_key="app_user.id", index=True)
    kind: str = Field(max_length=10)
    token_hash: str = Field(max_length=64, unique=True)
    label: str = Field(default="", max_length=100)
    csrf_token: str = Field(default="", max_length=64)
    created_at: datetime = created_at_field()
    expires_at: datetime | None = timestamp_field()
    last_used_at: datetime | None = timestamp_field()
    revoked_at: datetime | None = timestamp_field()


class SignInThrottle(SQLModel, table=True):
    """Recent failed sign-ins of one subject: an email address (whether or not it has an
    account, so that known and unknown addresses are treated alike) or one trusted device of
    an account. `subject` is an HMAC of it, never the address itself."""

    __tablename__ = "sign_in_throttle"
    __table_args__ = (sa.CheckConstraint("failures >= 0", name="failures_non_negative"),)

    subject: str = Field(primary_key=True, max_length=64)
    failures: int = 0
    last_failure_at: datetime = timestamp_field(nullable=False)
    wait_until: datetime | None = timestamp_field()
