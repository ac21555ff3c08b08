"""One record per stage of a flexible-wall test: what was typed, its SI figures, the engine's
outcome, when it ran and who recorded it."""

from __future__ import annotations

from datetime import datetime
from enum import StrEnum
from typing import Any

import sqlalchemy as sa
from sqlmodel import Field, SQLModel

from service.common import created_at_field, json_field, one_of, timestamp_field, version_field


class StageName(StrEnum):
    SETUP = "setup"
    SATURATION = "saturation"
    CONSOLIDATION = "consolidation"
    PERMEATION = "permeation"
    POST_TEST = "post_test"


class TestStage(SQLModel, table=True):
    """A stage as recorded. `typed` keeps every value exactly as typed (entries, and lists of
    readings by group); `si` holds the same shape in SI floats (the unit is the catalogue
    entry's canonical one: Pa, s, m, m³, kg, °C); `outcome` is what the engine made of it."""

    __tablename__ = "test_stage"
    __table_args__ = (
        sa.UniqueConstraint("test_id", "stage"),
        one_of("stage", StageName),
    )

    id: int | None = Field(default=None, primary_key=True)
    test_id: int = Field(foreign_key="permeability_test.id", index=True)
    stage: str = Field(max_length=20)
    typed: dict[str, Any] = json_field()
    si: dict[str, Any] = json_field()
    outcome: dict[str, Any] = json_field()
    started_at: datetime | None = timestamp_field()
    ended_at: datetime | None = timestamp_field()
    recorded_by_id: int | None = Field(default=None, foreign_key="app_user.id")
    recorded_at: datetime = created_at_field()
    version: int = version_field()


class LoggerMapping(SQLModel, table=True):
    """How an apparatus's logger files are read for one stage, set once: the time column
    (elapsed with its unit, or a clock time with its format) and a column and unit per
    quantity. Changed in place against its version, each change audited."""

    __tablename__ = "logger_mapping"
    __table_args__ = (
        sa.UniqueConstraint("apparatus_id", "stage"),
        one_of("stage", StageName),
    )

    id: int | None = Field(default=None, primary_key=True)
    apparatus_id: int = Field(foreign_key="apparatus.id", index=True)
    stage: str = Field(max_length=20)
    mapping: dict[str, Any] = json_field()
    recorded_by_id: int | None = Field(default=None, foreign_key="app_user.id")
    recorded_at: datetime = created_at_field()
    version: int = version_field()
