"""Sign-offs: who vouched for what, in which role, and the hash of exactly what they signed."""

from __future__ import annotations

from datetime import datetime

from sqlmodel import Field, SQLModel

from service.common import Role, SignOffMeaning, created_at_field, one_of


class SignOff(SQLModel, table=True):
    __tablename__ = "sign_off"
    __table_args__ = (one_of("meaning", SignOffMeaning), one_of("role", Role))

    id: int | None = Field(default=None, primary_key=True)
    test_id: int = Field(foreign_key="permeability_test.id", index=True)
    user_id: int = Field(foreign_key="app_user.id", index=True)
    role: str = Field(max_length=20)
    meaning: str = Field(max_length=20)
    content_hash: str = Field(max_length=64)
    test_version: int
    note: str = Field(default="", max_length=1000)
    signed_at: datetime = created_at_field()
