"""Samples received from a client, each with a lab ID written on its tube or bag."""

from __future__ import annotations

from datetime import date, datetime

import sqlalchemy as sa
from sqlmodel import Field, SQLModel

from service.common import (
    Priority,
    SampleType,
    created_at_field,
    one_of,
    timestamp_field,
    version_field,
)


class Sample(SQLModel, table=True):
    __table_args__ = (
        one_of("sample_type", SampleType),
        one_of("priority", Priority),
        sa.CheckConstraint(
            "depth_top_m IS NULL OR depth_top_m >= 0", name="depth_top_non_negative"
        ),
        sa.CheckConstraint(
            "depth_bottom_m IS NULL OR depth_top_m IS NULL OR depth_bottom_m >= depth_top_m",
            name="depth_bottom_below_top",
        ),
        sa.Index("ix_sample_client_sample_id", "client_sample_id"),
    )

    id: int | None = Field(default=None, primary_key=True)
    lab_id: str = Field(max_length=20, unique=True)
    project_id: int = Field(foreign_key="project.id", index=True)
    location_id: int | None = Field(default=None, foreign_key="location.id", index=True)
    client_sample_id: str = Field(default="", max_length=60)
    depth_top_m: float | None = None
    depth_top_text: str = Field(default="", max_length=40)
    depth_bottom_m: float | None = None
    depth_bottom_text: str = Field(default="", max_length=40)
    sample_type: str = Field(max_length=10)
    description: str = Field(default="", max_length=500)
    condition: str = Field(default="", max_length=300)
    seal_intact: bool | None = None
    storage_place: str = Field(default="", max_length=60)
    priority: str = Field(default="normal", max_length=10)
    received_at: datetime = created_at_field()
    due_date: date | None = None
    disposed_at: datetime | None = timestamp_field()
    received_by_id: int | None = Field(default=None, foreign_key="app_user.id")
    version: int = version_field()
