"""Chain of custody: an append-only, hash-chained log of what happened to each sample (one
chain per sample; `seq` counts from 1 within the sample's chain)."""

from __future__ import annotations

from datetime import datetime

import sqlalchemy as sa
from sqlmodel import Field, SQLModel

from service.common import CustodyKind, created_at_field, one_of


class CustodyEvent(SQLModel, table=True):
    __tablename__ = "custody_event"
    __table_args__ = (
        sa.UniqueConstraint("sample_id", "seq"),
        one_of("kind", CustodyKind),
        sa.CheckConstraint("seq > 0", name="seq_positive"),
    )

    id: int | None = Field(default=None, primary_key=True)
    seq: int
    sample_id: int = Field(foreign_key="sample.id", index=True)
    kind: str = Field(max_length=30)
    from_holder: str = Field(default="", max_length=120)
    to_holder: str = Field(default="", max_length=120)
    place: str = Field(default="", max_length=120)
    condition: str = Field(default="", max_length=300)
    note: str = Field(default="", max_length=1000)
    occurred_at: datetime = created_at_field()
    recorded_by_id: int | None = Field(default=None, foreign_key="app_user.id")
    prev_hash: str = Field(max_length=64)
    row_hash: str = Field(max_length=64)
