"""Client projects and the locations (boreholes, pits, borrow sources) samples come from."""

from __future__ import annotations

from datetime import datetime

import sqlalchemy as sa
from sqlmodel import Field, SQLModel

from service.common import LocationKind, created_at_field, one_of, positive, version_field


class Project(SQLModel, table=True):
    __table_args__ = (
        sa.UniqueConstraint("client_id", "number"),
        sa.CheckConstraint("turnaround_days > 0", name="turnaround_days_positive"),
        sa.CheckConstraint("retention_days >= 0", name="retention_days_non_negative"),
        positive("spec_k_max_m_per_s"),
    )

    id: int | None = Field(default=None, primary_key=True)
    client_id: int = Field(foreign_key="organisation.id", index=True)
    number: str = Field(max_length=40)
    name: str = Field(max_length=200)
    site: str = Field(default="", max_length=300)
    turnaround_days: int = 10
    retention_days: int = 90
    spec_k_max_m_per_s: float | None = None
    spec_k_max_text: str = Field(default="", max_length=60)
    spec_source: str = Field(default="", max_length=200)
    created_by_id: int | None = Field(default=None, foreign_key="app_user.id")
    created_at: datetime = created_at_field()
    version: int = version_field()


class Location(SQLModel, table=True):
    __table_args__ = (sa.UniqueConstraint("project_id", "name"), one_of("kind", LocationKind))

    id: int | None = Field(default=None, primary_key=True)
    project_id: int = Field(foreign_key="project.id", index=True)
    name: str = Field(max_length=60)
    kind: str = Field(max_length=20)
    easting_m: float | None = None
    northing_m: float | None = None
    coordinate_system: str = Field(default="", max_length=60)
    ground_level_m: float | None = None
    ground_level_text: str = Field(default="", max_length=60)
    created_at: datetime = created_at_field()
    version: int = version_field()
