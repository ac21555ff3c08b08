"""The apparatus register: permeameters and the instruments used with them."""

from __future__ import annotations

from datetime import date, datetime

import sqlalchemy as sa
from sqlmodel import Field, SQLModel

from service.common import ApparatusKind, created_at_field, one_of, positive, version_field
from service.text import identifier_key


class Apparatus(SQLModel, table=True):
    __table_args__ = (
        one_of("kind", ApparatusKind),
        positive("specimen_area_m2"),
        positive("port_spacing_m"),
        positive("standpipe_area_m2"),
        positive("headwater_area_m2"),
        positive("tailwater_area_m2"),
        sa.CheckConstraint(
            "resolution_si IS NULL OR resolution_si > 0", name="resolution_positive"
        ),
        sa.CheckConstraint(
            "calibration_due IS NULL OR calibrated_on IS NULL OR calibration_due >= calibrated_on",
            name="calibration_due_after_calibration",
        ),
    )

    id: int | None = Field(default=None, primary_key=True)
    identifier: str = Field(max_length=40, unique=True)
    # identifier_key(identifier), kept by the events below: what duplicates are found by.
    identifier_key: str = Field(default="", max_length=160, unique=True)
    kind: str = Field(max_length=30)
    description: str = Field(default="", max_length=300)
    specimen_area_m2: float | None = None
    specimen_area_text: str = Field(default="", max_length=40)
    port_spacing_m: float | None = None
    port_spacing_text: str = Field(default="", max_length=40)
    standpipe_area_m2: float | None = None
    standpipe_area_text: str = Field(default="", max_length=40)
    headwater_area_m2: float | None = None
    headwater_area_text: str = Field(default="", max_length=40)
    tailwater_area_m2: float | None = None
    tailwater_area_text: str = Field(default="", max_length=40)
    # Reading resolution in the SI unit of the kind's quantity (kg, m, K, s, Pa, m3).
    resolution_si: float | None = None
    resolution_text: str = Field(default="", max_length=40)
    calibrated_on: date | None = None
    calibration_due: date | None = None
    is_active: bool = True
    created_at: datetime = created_at_field()
    version: int = version_field()


@sa.event.listens_for(Apparatus, "before_insert")
@sa.event.listens_for(Apparatus, "before_update")
def _keep_identifier_key(_mapper: object, _connection: object, item: Apparatus) -> None:
    item.identifier_key = identifier_key(item.identifier)


class EntryUnit(SQLModel, table=True):
    """The unit last picked for one entry on a test with this permeameter ('trials.head_final'
    -> 'mm'): the page's unit picker starts there next time. A preference, not a record, so it
    is not audited."""

    __tablename__ = "entry_unit"

    apparatus_id: int = Field(foreign_key="apparatus.id", primary_key=True)
    entry: str = Field(max_length=60, primary_key=True)
    unit: str = Field(max_length=20)
