"""The stored first answer to each idempotency key."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlmodel import Field, SQLModel

from service.common import created_at_field, json_field


class IdempotencyRecord(SQLModel, table=True):
    __tablename__ = "idempotency_record"
    key: str = Field(primary_key=True, max_length=64)
    user_id: int = Field(foreign_key="app_user.id", index=True)
    request_hash: str = Field(max_length=64)
    status_code: int
    response: dict[str, Any] = json_field()
    created_at: datetime = created_at_field()
