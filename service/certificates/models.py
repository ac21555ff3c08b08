"""Issued certificates: frozen PDF bytes, their hash, the lab's signatures (of the PDF and of
its state) and revisions; and every signing key the lab has used."""

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
    # The signed state record (service/certificates/signing.py: state_statement): state,
    # its change count and time, the successor; re-signed at every change of state.
    state_seq: int = 1
    state_changed_at: datetime | None = timestamp_field()
    state_signature: str = Field(default="", max_length=200)
    state_key_id: str = Field(default="", max_length=64)
    # The signed checkpoint made when this certificate was issued (it anchors its record);
    # no foreign key: the number is taken before the checkpoint is written, in one transaction.
    checkpoint_seq: int | None = None


class CertificateTest(SQLModel, table=True):
    """The approved tests a certificate reports."""

    __tablename__ = "certificate_test"

    certificate_id: int = Field(foreign_key="certificate.id", primary_key=True)
    test_id: int = Field(foreign_key="permeability_test.id", primary_key=True)


class PublishedKey(SQLModel, table=True):
    """A public key the lab has signed with, and when. A key other than the configured one is
    trusted only through a trusted key's signature: its successor's endorsement (over the key
    and its whole validity period, made when it was retired) or its predecessor's
    introduction (over the key and its start, made when it took over)."""

    __tablename__ = "signing_key"

    key_id: str = Field(primary_key=True, max_length=64)
    algorithm: str = Field(default="Ed25519", max_length=20)
    public_key: str = Field(max_length=100)  # base64 of the raw 32-byte Ed25519 key
    valid_from: datetime = created_at_field()
    valid_until: datetime | None = timestamp_field()
    endorsed_by: str = Field(default="", max_length=64)
    endorsement: str = Field(default="", max_length=200)
    introduced_by: str = Field(default="", max_length=64)
    introduction: str = Field(default="", max_length=200)
