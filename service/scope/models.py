"""Tables of the laboratory's accredited scope.

The current scope is the rows of ``scope_standard`` (one per standard the laboratory lists)
and ``scope_rule`` (one per rule the laboratory has confirmed or changed). Every change of
them writes a ``scope_version`` holding the whole scope as it then stood (``snapshot``), so a
result reduced under version n is judged by version n's rules for good.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

import sqlalchemy as sa
from sqlmodel import Field, SQLModel

from service.common import created_at_field, json_field, timestamp_field, version_field


class ScopeVersion(SQLModel, table=True):
    """One version of the scope: its number, who made it and the scope as it then stood."""

    __tablename__ = "scope_version"
    __table_args__ = (sa.CheckConstraint("number >= 1", name="number_positive"),)

    id: int | None = Field(default=None, primary_key=True)
    number: int = Field(unique=True)
    note: str = Field(default="", max_length=500)
    created_at: datetime = created_at_field()
    created_by_id: int | None = Field(default=None, foreign_key="app_user.id")
    # {"standards": {standard: {...defaults}}, "rules": {standard: {rule_id: {...}}}}
    snapshot: dict[str, Any] = json_field()


class ScopeStandard(SQLModel, table=True):
    """A standard the laboratory lists, the edition it works to, and its defaults."""

    __tablename__ = "scope_standard"
    __table_args__ = (
        sa.CheckConstraint(
            "determinations IS NULL OR determinations BETWEEN 1 AND 20",
            name="determinations_range",
        ),
        sa.CheckConstraint(
            "reference_temperature_c IS NULL OR reference_temperature_c BETWEEN 0 AND 40",
            name="reference_temperature_range",
        ),
    )

    id: int | None = Field(default=None, primary_key=True)
    standard: str = Field(max_length=40, unique=True)
    edition: str = Field(default="", max_length=40)
    in_scope: bool = True
    reference_temperature_c: float | None = None
    decision_rule: str = Field(default="", max_length=20)
    determinations: int | None = None
    changed_at: datetime | None = timestamp_field()
    changed_by_id: int | None = Field(default=None, foreign_key="app_user.id")
    version: int = version_field()


class ScopeRule(SQLModel, table=True):
    """The laboratory's reading of one rule of one standard: its limits, edition and clause."""

    __tablename__ = "scope_rule"
    __table_args__ = (sa.UniqueConstraint("standard", "rule_id"),)

    id: int | None = Field(default=None, primary_key=True)
    standard: str = Field(max_length=40)
    rule_id: str = Field(max_length=40)
    confirmed: bool = True
    edition: str = Field(default="", max_length=40)
    clause: str = Field(default="", max_length=120)
    # limit id -> value in the limit's SI unit, as the laboratory reads it
    limits: dict[str, Any] = json_field()
    confirmed_at: datetime | None = timestamp_field()
    confirmed_by_id: int | None = Field(default=None, foreign_key="app_user.id")
    version: int = version_field()
