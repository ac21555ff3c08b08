"""The stored first answer to each idempotency key."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlmodel import Field, SQLModel

from service.common import created_at_field
from service.db import JSONType


class IdempotencyRecord(SQLModel, table=True):
    __tablename__ = "idempotency_record"
    key: str = Field(primary_key=True, max_length=64)
    user_id: int = Field(foreign_key="app_user.id", index=True)
    request_hash: str = Field(max_length=64)
    status_code: int
    # What replay needs: the record the first request created (a trial), or, where the
    # answer is not rebuilt from one, the answer itself (a batch of samples).
    resource_id: int | None = None
    response: dict[str, Any] | None = Field(default=None, sa_type=JSONType)
    created_at: datetime = created_at_field()
