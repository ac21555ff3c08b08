"""Audit trail of every change (one row per created or changed record, in per-entity hash
chains), the heads of the hash chains and the signed checkpoints that anchor them."""

from __future__ import annotations

from datetime import datetime

import sqlalchemy as sa
from sqlmodel import Field, SQLModel

from service.common import created_at_field


class AuditEvent(SQLModel, table=True):
    """One created or changed record: `changes` is canonical JSON text,
    {field: {"old": value, "new": value}} (old is null for a new record).

    `chain` names the hash chain the row belongs to, the record that owns it
    ("permeability_test:42" for a test and its trials, specimen and sign-offs); `seq` counts
    from 1 within that chain."""

    __tablename__ = "audit_event"
    __table_args__ = (
        sa.UniqueConstraint("chain", "seq"),
        sa.Index("ix_audit_event_entity", "entity", "entity_id"),
        sa.CheckConstraint("seq > 0", name="seq_positive"),
    )

    id: int | None = Field(default=None, primary_key=True)
    chain: str = Field(max_length=80)
    seq: int
    entity: str = Field(max_length=40)
    entity_id: int
    changes: str = Field(sa_type=sa.Text)
    actor_id: int | None = Field(default=None, foreign_key="app_user.id")
    occurred_at: datetime = created_at_field()
    prev_hash: str = Field(max_length=64)
    row_hash: str = Field(max_length=64)


class ChainHead(SQLModel, table=True):
    """Last sequence number and hash of one chain ("custody/sample:17",
    "audit/permeability_test:42"), locked while appending so only writers of the same entity
    queue; `anchored_seq` is the last row a signed checkpoint lists. Rows named "lock/..."
    are plain named locks (they never hold a chain)."""

    __tablename__ = "chain_head"
    __table_args__ = (
        # What the next checkpoint must list: heads that moved since the last one.
        sa.Index(
            "ix_chain_head_unanchored",
            "name",
            sqlite_where=sa.text("last_seq > anchored_seq"),
            postgresql_where=sa.text("last_seq > anchored_seq"),
        ),
    )

    name: str = Field(primary_key=True, max_length=90)
    last_seq: int = 0
    last_hash: str = Field(default="0" * 64, max_length=64)
    anchored_seq: int = 0


class Checkpoint(SQLModel, table=True):
    """A signed statement of chain heads. `body` is the exact signed text (see
    service/audit/checkpoints.py for its layout); the other columns repeat what it says so it
    can be queried, and verification checks that they agree."""

    __tablename__ = "log_checkpoint"
    __table_args__ = (sa.CheckConstraint("seq > 0", name="seq_positive"),)

    seq: int = Field(primary_key=True, sa_column_kwargs={"autoincrement": False})
    made_at: datetime = created_at_field()
    reason: str = Field(max_length=20)
    heads: int
    body: str = Field(sa_type=sa.Text)
    digest: str = Field(max_length=64)
    key_id: str = Field(max_length=64)
    signature: str = Field(max_length=200)
