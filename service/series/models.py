"""Compaction series of a project: the series, its members (tests with their moulding state)
and the optional compaction-curve points; each typed value kept as typed beside its SI float."""

from __future__ import annotations

from datetime import datetime

import sqlalchemy as sa
from sqlmodel import Field, SQLModel

from service.common import created_at_field, positive, version_field


class CompactionSeries(SQLModel, table=True):
    """Several specimens of one material compacted at different water contents and densities."""

    __tablename__ = "compaction_series"
    __table_args__ = (
        sa.UniqueConstraint("project_id", "name"),
        positive("spec_k_max_m_per_s"),
        sa.CheckConstraint("specific_gravity BETWEEN 1.0 AND 5.0", name="specific_gravity_range"),
        sa.CheckConstraint(
            "min_saturation IS NULL OR (min_saturation > 0 AND min_saturation <= 1)",
            name="min_saturation_range",
        ),
    )

    id: int | None = Field(default=None, primary_key=True)
    project_id: int = Field(foreign_key="project.id", index=True)
    name: str = Field(max_length=80)
    material: str = Field(default="", max_length=300)
    specific_gravity: float = 2.70
    # The limit on k20 for this material; the project's limit when left empty at creation.
    spec_k_max_m_per_s: float | None = None
    spec_k_max_text: str = Field(default="", max_length=60)
    min_saturation: float | None = None  # fraction
    min_saturation_text: str = Field(default="", max_length=40)
    compaction_effort: str = Field(default="", max_length=120)
    created_by_id: int | None = Field(default=None, foreign_key="app_user.id")
    created_at: datetime = created_at_field()
    version: int = version_field()


class SeriesMember(SQLModel, table=True):
    """A test of the project in the series, with its moulding water content and dry density."""

    __tablename__ = "series_member"
    __table_args__ = (
        sa.UniqueConstraint("series_id", "test_id"),
        sa.UniqueConstraint("series_id", "label"),
        sa.CheckConstraint("water_content >= 0", name="water_content_ok"),
        positive("dry_density_kg_per_m3"),
    )

    id: int | None = Field(default=None, primary_key=True)
    series_id: int = Field(foreign_key="compaction_series.id", index=True)
    test_id: int = Field(foreign_key="permeability_test.id", index=True)
    label: str = Field(max_length=40)
    water_content: float  # fraction
    water_content_text: str = Field(max_length=40)
    dry_density_kg_per_m3: float
    dry_density_text: str = Field(max_length=40)
    created_at: datetime = created_at_field()


class CompactionCurvePoint(SQLModel, table=True):
    """A point of the material's compaction test (e.g. a Proctor test)."""

    __tablename__ = "compaction_curve_point"
    __table_args__ = (
        sa.CheckConstraint("water_content >= 0", name="water_content_ok"),
        positive("dry_density_kg_per_m3"),
    )

    id: int | None = Field(default=None, primary_key=True)
    series_id: int = Field(foreign_key="compaction_series.id", index=True)
    water_content: float
    water_content_text: str = Field(max_length=40)
    dry_density_kg_per_m3: float
    dry_density_text: str = Field(max_length=40)
    created_at: datetime = created_at_field()
