"""Audit trail of every change, hash-chained, and the heads of the hash chains."""

from __future__ import annotations

from datetime import datetime

import sqlalchemy as sa
from sqlmodel import Field, SQLModel

from service.common import created_at_field


class AuditEvent(SQLModel, table=True):
    __tablename__ = "audit_event"
    __table_args__ = (
        sa.UniqueConstraint("seq"),
        sa.Index("ix_audit_event_entity", "entity", "entity_id"),
        sa.CheckConstraint("seq > 0", name="seq_positive"),
    )

    id: int | None = Field(default=None, primary_key=True)
    seq: int
    entity: str = Field(max_length=40)
    entity_id: int
    field: str = Field(max_length=60)
    old_value: str | None = Field(default=None, sa_type=sa.Text)
    new_value: str | None = Field(default=None, sa_type=sa.Text)
    actor_id: int | None = Field(default=None, foreign_key="app_user.id")
    occurred_at: datetime = created_at_field()
    prev_hash: str = Field(max_length=64)
    row_hash: str = Field(max_length=64)


class ChainHead(SQLModel, table=True):
    """Last sequence number and hash of each chain; locked while appending, so a deleted
    tail row is detected too."""

    __tablename__ = "chain_head"
    name: str = Field(primary_key=True, max_length=20)
    last_seq: int = 0
    last_hash: str = Field(default="0" * 64, max_length=64)
