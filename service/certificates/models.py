"""Issued certificates: frozen PDF bytes, their hash, the lab's signature and revisions."""

from __future__ import annotations

from datetime import datetime

import sqlalchemy as sa
from sqlmodel import Field, SQLModel

from service.common import (
    CertificateKind,
    CertificateState,
    created_at_field,
    one_of,
    timestamp_field,
)


class Certificate(SQLModel, table=True):
    __table_args__ = (
        one_of("kind", CertificateKind),
        one_of("state", CertificateState),
        sa.UniqueConstraint("number", "revision"),
        sa.CheckConstraint("revision >= 1", name="revision_positive"),
    )

    id: int | None = Field(default=None, primary_key=True)
    number: str = Field(max_length=40)
    revision: int = 1
    kind: str = Field(max_length=10)
    state: str = Field(default="issued", max_length=12)
    project_id: int = Field(foreign_key="project.id", index=True)
    sample_id: int | None = Field(default=None, foreign_key="sample.id", index=True)
    supersedes_id: int | None = Field(default=None, foreign_key="certificate.id")
    superseded_by_id: int | None = Field(default=None, foreign_key="certificate.id")
    reason: str = Field(default="", max_length=1000)
    issued_by_id: int = Field(foreign_key="app_user.id")
    issued_at: datetime = created_at_field()
    withdrawn_at: datetime | None = timestamp_field()
    pdf: bytes = Field(sa_type=sa.LargeBinary)
    sha256: str = Field(max_length=64)
    signature: str = Field(max_length=200)  # base64 Ed25519 signature of the PDF bytes
    key_id: str = Field(max_length=64)
    verification_code: str = Field(max_length=20, unique=True)


class CertificateTest(SQLModel, table=True):
    """The approved tests a certificate reports."""

    __tablename__ = "certificate_test"

    certificate_id: int = Field(foreign_key="certificate.id", primary_key=True)
    test_id: int = Field(foreign_key="permeability_test.id", primary_key=True)
