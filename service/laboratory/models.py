"""The one row of the laboratory's settings."""

from __future__ import annotations

from sqlmodel import Field, SQLModel

from service.common import version_field


class LabSettings(SQLModel, table=True):
    """Who the laboratory is, as certificates, page footers and exports name it (one row)."""

    __tablename__ = "lab_settings"

    id: int | None = Field(default=None, primary_key=True)
    name: str = Field(max_length=200)
    address: str = Field(default="", max_length=500)
    accreditation_body: str = Field(default="", max_length=200)
    accreditation_number: str = Field(default="", max_length=100)
    version: int = version_field()
