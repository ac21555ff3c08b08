"""What a restored database must still prove: both hash chains hold, every certificate's PDF
hashes to its stored SHA-256 and carries a valid signature, and nothing went missing."""

from __future__ import annotations

from dataclasses import dataclass

import sqlalchemy as sa
from sqlmodel import Session, SQLModel, col, func, select

import service.models  # noqa: F401  (every table registered on the metadata)
from service.audit.chain import verify
from service.certificates.models import Certificate
from service.certificates.signing import load_signing_key, sha256_hex, verify_signature


@dataclass(frozen=True)
class Proof:
    custody_rows: int
    audit_rows: int
    certificates: list[tuple[str, int, str, str]]  # number, revision, state, sha256
    row_counts: dict[str, int]


def prove(engine: sa.Engine) -> Proof:
    """Check the chains and certificates of the database behind `engine` (assert) and
    return what it holds, to compare the restored copy with its source."""
    key = load_signing_key()
    with Session(engine) as session:
        custody, audit = verify(session, "custody"), verify(session, "audit")
        assert custody.ok, custody.problem
        assert audit.ok, audit.problem
        certificates = session.exec(
            select(Certificate).order_by(col(Certificate.number), col(Certificate.revision))
        ).all()
        for certificate in certificates:
            # SHA-256 (FIPS 180-4, Python's hashlib) of the stored bytes equals the stored hash,
            # and the Ed25519 signature (RFC 8032, the `cryptography` library) verifies.
            assert sha256_hex(certificate.pdf) == certificate.sha256, certificate.number
            assert verify_signature(key.public_key, certificate.pdf, certificate.signature)
            assert certificate.pdf.startswith(b"%PDF-")
        counts = {
            table.name: int(session.execute(select(func.count()).select_from(table)).scalar_one())
            for table in SQLModel.metadata.sorted_tables
        }
        listed = [(c.number, c.revision, c.state, c.sha256) for c in certificates]
    return Proof(custody.rows, audit.rows, listed, counts)
