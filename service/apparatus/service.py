"""The apparatus register: permeameters and instruments, their geometry, resolution and
calibration dates, and the check a submission runs on the items a test used."""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from datetime import date, datetime
from typing import Any

import sqlalchemy as sa
from pydantic import BaseModel, ConfigDict, Field, ValidationInfo, field_validator
from sqlmodel import Session, col, func, select

from service.accounts.models import User
from service.apparatus.models import Apparatus, EntryUnit
from service.audit.service import apply_changes, record_change, record_created
from service.common import ApparatusKind, Role
from service.db import utcnow
from service.errors import Conflict, NotFound, invalid, require_version
from service.lab_tests.models import TestApparatus
from service.paging import paginate
from service.quantities import (
    AREA,
    DURATION,
    LENGTH,
    MASS,
    PRESSURE,
    TEMPERATURE,
    VOLUME,
    Kind,
    typed,
    typed_step,
)
from service.text import Identifier, identifier_key

# The quantity a reading resolution is stated in, per kind of item. A permeameter's is the
# smallest head difference read on its standpipe or manometer scale.
RESOLUTION_KIND: dict[ApparatusKind, Kind] = {
    ApparatusKind.RIGID_WALL_PERMEAMETER: LENGTH,
    ApparatusKind.FLEXIBLE_WALL_PERMEAMETER: LENGTH,
    ApparatusKind.BALANCE: MASS,
    ApparatusKind.CALIPER: LENGTH,
    ApparatusKind.THERMOMETER: TEMPERATURE,
    ApparatusKind.TIMER: DURATION,
    ApparatusKind.PRESSURE_TRANSDUCER: PRESSURE,
    ApparatusKind.BURETTE: VOLUME,
}
# Typed geometry: API field -> (column prefix, kind).
GEOMETRY: dict[str, tuple[str, Kind]] = {
    "specimen_area": ("specimen_area", AREA),
    "port_spacing": ("port_spacing", LENGTH),
    "standpipe_area": ("standpipe_area", AREA),
    "headwater_area": ("headwater_area", AREA),
    "tailwater_area": ("tailwater_area", AREA),
}
_SI_SUFFIX = {"specimen_area": "m2", "port_spacing": "m"}


def _si_column(field: str) -> str:
    return f"{field}_{_SI_SUFFIX.get(field, 'm2')}"


# --- schemas -------------------------------------------------------------------------------


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", str_strip_whitespace=True)


_TYPED = "with its unit, e.g. "


class ApparatusCreate(_Strict):
    identifier: Identifier = Field(min_length=1, max_length=40, description="unique, e.g. 'BAL-01'")
    kind: ApparatusKind
    description: str = Field(default="", max_length=300)
    specimen_area: str | None = Field(
        default=None, max_length=40, description=_TYPED + "'81.1 cm^2'"
    )
    port_spacing: str | None = Field(default=None, max_length=40, description=_TYPED + "'100 mm'")
    standpipe_area: str | None = Field(
        default=None, max_length=40, description=_TYPED + "'0.5 cm^2'"
    )
    headwater_area: str | None = Field(default=None, max_length=40)
    tailwater_area: str | None = Field(default=None, max_length=40)
    resolution: str | None = Field(
        default=None,
        max_length=40,
        description="smallest reading step in the kind's quantity: balance '0.1 g', caliper "
        "'0.02 mm', thermometer '0.1 K', timer '0.1 s', transducer '0.1 kPa', burette '0.1 mL', "
        "permeameter (head scale) '1 mm'",
    )
    calibrated_on: date | None = None
    calibration_due: date | None = None
    is_active: bool = True

    @field_validator("calibration_due")
    @classmethod
    def _due_after_calibration(cls, value: date | None, info: ValidationInfo) -> date | None:
        _check_dates(info.data.get("calibrated_on"), value)
        return value


class ApparatusUpdate(_Strict):
    version: int = Field(ge=1, description="the version you read; a stale one answers 409")
    identifier: Identifier | None = Field(default=None, min_length=1, max_length=40)
    description: str | None = Field(default=None, max_length=300)
    specimen_area: str | None = Field(default=None, max_length=40, description="'' removes it")
    port_spacing: str | None = Field(default=None, max_length=40)
    standpipe_area: str | None = Field(default=None, max_length=40)
    headwater_area: str | None = Field(default=None, max_length=40)
    tailwater_area: str | None = Field(default=None, max_length=40)
    resolution: str | None = Field(default=None, max_length=40)
    calibrated_on: date | None = None
    calibration_due: date | None = None
    is_active: bool | None = None


REGISTER_EDITORS = frozenset({Role.LAB_MANAGER, Role.ADMIN})


def may_edit_register(user: User) -> bool:
    """Whether `user` adds, edits and retires register items."""
    return user.role in REGISTER_EDITORS


def _check_dates(calibrated_on: date | None, calibration_due: date | None) -> None:
    if calibrated_on and calibration_due and calibration_due < calibrated_on:
        raise ValueError(
            f"is before the calibration date ({calibrated_on}); "
            "accepted: a due date on or after the calibration date"
        )


class ApparatusRead(BaseModel):
    model_config = ConfigDict(from_attributes=True)

    id: int
    identifier: str
    kind: str
    description: str
    specimen_area_text: str
    specimen_area_m2: float | None
    port_spacing_text: str
    port_spacing_m: float | None
    standpipe_area_text: str
    standpipe_area_m2: float | None
    headwater_area_text: str
    headwater_area_m2: float | None
    tailwater_area_text: str
    tailwater_area_m2: float | None
    resolution_text: str
    resolution_si: float | None
    resolution_unit: str = Field(description="the SI unit of resolution_si")
    calibrated_on: date | None
    calibration_due: date | None
    is_active: bool
    overdue: bool = Field(description="calibration due date has passed")
    created_at: datetime
    version: int


def apparatus_read(item: Apparatus, *, on: date | None = None) -> ApparatusRead:
    kind = RESOLUTION_KIND.get(ApparatusKind(item.kind), LENGTH)
    unit = "K" if kind is TEMPERATURE else kind.canonical_unit
    return ApparatusRead.model_validate(
        {
            **item.model_dump(),
            "resolution_unit": unit,
            "overdue": is_overdue(item, on=on or utcnow().date()),
        }
    )


def is_overdue(item: Apparatus, *, on: date) -> bool:
    """Past its calibration due date on `on` (the due day itself is still in calibration)."""
    return item.calibration_due is not None and item.calibration_due < on


# --- typed values --------------------------------------------------------------------------


def _resolution(text: str, kind: ApparatusKind) -> tuple[str, float]:
    # A resolution is a step, so '0.1 degC' is 0.1 K (not 273.25 K).
    return typed_step(text, RESOLUTION_KIND[kind], ("resolution",))


def _typed_columns(
    data: ApparatusCreate | ApparatusUpdate, kind: ApparatusKind, only: set[str]
) -> dict[str, Any]:
    """Column values for the typed fields named in `only` ('' or None clears one)."""
    columns: dict[str, Any] = {}
    for name, (prefix, quantity) in GEOMETRY.items():
        if name not in only:
            continue
        text = getattr(data, name)
        if text:
            columns[f"{prefix}_text"], columns[_si_column(name)] = typed(
                text, quantity, (name,), positive=True
            )
        else:
            columns[f"{prefix}_text"], columns[_si_column(name)] = "", None
    if "resolution" in only:
        if data.resolution:
            columns["resolution_text"], columns["resolution_si"] = _resolution(
                data.resolution, kind
            )
        else:
            columns["resolution_text"], columns["resolution_si"] = "", None
    return columns


def _refuse_duplicate_identifier(
    session: Session, identifier: str, apparatus_id: int | None = None
) -> None:
    # Compared on the key computed in Python: SQLite's lower() folds ASCII letters only.
    query = select(Apparatus.id).where(Apparatus.identifier_key == identifier_key(identifier))
    if apparatus_id is not None:
        query = query.where(Apparatus.id != apparatus_id)
    if session.exec(query).first() is not None:
        raise Conflict(
            f"the register already has an item '{identifier}'", detail={"field": "identifier"}
        )


# --- register ------------------------------------------------------------------------------


def create_apparatus(session: Session, data: ApparatusCreate, *, actor: User) -> Apparatus:
    """Add an item to the register; identifiers are unique (letter case ignored)."""
    _refuse_duplicate_identifier(session, data.identifier)
    item = Apparatus(
        identifier=data.identifier,
        kind=data.kind,
        description=data.description,
        calibrated_on=data.calibrated_on,
        calibration_due=data.calibration_due,
        is_active=data.is_active,
        **_typed_columns(data, data.kind, set(GEOMETRY) | {"resolution"}),
    )
    session.add(item)
    session.flush()
    record_created(session, item, actor_id=actor.id)
    return item


def get_apparatus(session: Session, apparatus_id: int) -> Apparatus:
    item = session.get(Apparatus, apparatus_id)
    if item is None:
        raise NotFound(f"apparatus {apparatus_id} not found")
    return item


def identifiers_of(session: Session, apparatus_ids: Iterable[int]) -> dict[int, str]:
    """The identifiers of register items, by id."""
    wanted = set(apparatus_ids)
    if not wanted:
        return {}
    rows = session.exec(select(Apparatus).where(col(Apparatus.id).in_(wanted))).all()
    return {item.id: item.identifier for item in rows if item.id is not None}


def list_apparatus(
    session: Session,
    *,
    kind: ApparatusKind | None = None,
    overdue: bool | None = None,
    active: bool | None = None,
    on: date | None = None,
    limit: int,
    offset: int,
) -> tuple[list[Apparatus], int]:
    """The register by identifier, optionally only one kind, only overdue, only active."""
    today = on or utcnow().date()
    query = select(Apparatus)
    if kind is not None:
        query = query.where(Apparatus.kind == kind.value)
    if active is not None:
        query = query.where(Apparatus.is_active == active)
    if overdue is not None:
        late = sa.and_(
            col(Apparatus.calibration_due).is_not(None), col(Apparatus.calibration_due) < today
        )
        query = query.where(late if overdue else sa.not_(late))
    query = query.order_by(col(Apparatus.identifier))
    return paginate(session, query, limit=limit, offset=offset)


def update_apparatus(
    session: Session, apparatus_id: int, data: ApparatusUpdate, *, actor: User
) -> Apparatus:
    """Edit an item against the version the editor read; every changed field is audited."""
    item = get_apparatus(session, apparatus_id)
    require_version(
        item,
        data.version,
        f"apparatus {item.identifier}",
        yours=data.model_dump(mode="json", exclude_unset=True, exclude={"version"}),
        current=apparatus_read(item).model_dump(mode="json"),
    )
    fields = data.model_fields_set - {"version"}
    changes: dict[str, Any] = {}
    for name in ("identifier", "description", "is_active"):
        if name in fields and getattr(data, name) is not None:
            changes[name] = getattr(data, name)
    for name in ("calibrated_on", "calibration_due"):
        if name in fields:
            changes[name] = getattr(data, name)
    try:
        _check_dates(
            changes.get("calibrated_on", item.calibrated_on),
            changes.get("calibration_due", item.calibration_due),
        )
    except ValueError as exc:
        reason, accepted = str(exc).split("; accepted: ")
        raise invalid(
            ("calibration_due",),
            reason,
            value=str(changes.get("calibration_due")),
            accepted=accepted,
            kind="date_order",
        ) from None
    if "identifier" in changes:
        _refuse_duplicate_identifier(session, changes["identifier"], item.id)
    changes.update(_typed_columns(data, ApparatusKind(item.kind), fields))
    apply_changes(session, item, changes, actor_id=actor.id)
    return item


def delete_apparatus(session: Session, apparatus_id: int, *, actor: User) -> None:
    """Remove an item entered by mistake; one a test used stays, to be retired instead."""
    item = get_apparatus(session, apparatus_id)
    used = session.exec(
        select(func.count())
        .select_from(TestApparatus)
        .where(TestApparatus.apparatus_id == apparatus_id)
    ).one()
    if used:
        raise Conflict(
            f"apparatus {item.identifier} was used by {used} test(s) and stays in the register; "
            "retire it instead (is_active: false)"
        )
    record_change(
        session,
        entity="apparatus",
        entity_id=apparatus_id,
        field="deleted",
        old=item.identifier,
        new=None,
        actor_id=actor.id,
    )
    for kept in session.exec(select(EntryUnit).where(EntryUnit.apparatus_id == apparatus_id)):
        session.delete(kept)
    session.delete(item)
    session.flush()


# --- the units a permeameter's pages start with ----------------------------------------------


def remembered_units(session: Session, apparatus_id: int | None) -> dict[str, str]:
    """Entry path -> the unit last picked on a test with this permeameter (none: empty)."""
    if apparatus_id is None:
        return {}
    rows = session.exec(select(EntryUnit).where(EntryUnit.apparatus_id == apparatus_id))
    return {row.entry: row.unit for row in rows}


def remember_units(session: Session, apparatus_id: int | None, used: dict[str, str]) -> None:
    """Keep the units just picked (entry path -> unit) for the next test with the permeameter."""
    if apparatus_id is None or not used:
        return
    kept = remembered_units(session, apparatus_id)
    for entry, unit in used.items():
        if kept.get(entry) == unit:
            continue
        row = session.get(EntryUnit, (apparatus_id, entry))
        if row is None:
            session.add(EntryUnit(apparatus_id=apparatus_id, entry=entry, unit=unit))
        else:
            row.unit = unit
    session.flush()


# --- the check at submission ---------------------------------------------------------------


@dataclass(frozen=True)
class CalibrationProblem:
    """One register item a test may not be submitted with, and why."""

    apparatus_id: int
    identifier: str
    kind: str
    calibration_due: date | None
    reason: str  # "overdue", "retired" or "unknown"

    @property
    def message(self) -> str:
        if self.reason == "unknown":
            return f"apparatus {self.apparatus_id} is not in the register"
        if self.reason == "retired":
            return f"{self.identifier} ({self.kind}) is retired from the register"
        return (
            f"{self.identifier} ({self.kind}) was due for calibration on "
            f"{self.calibration_due}; recalibrate it or use another item"
        )

    def as_dict(self) -> dict[str, Any]:
        return {
            "apparatus_id": self.apparatus_id,
            "identifier": self.identifier,
            "kind": self.kind,
            "calibration_due": self.calibration_due.isoformat() if self.calibration_due else None,
            "reason": self.reason,
            "message": self.message,
        }


def calibration_problems(
    session: Session, apparatus_ids: Iterable[int], on: date | None = None
) -> list[CalibrationProblem]:
    """The items among `apparatus_ids` that may not be used on `on` (default today, UTC):
    past their calibration due date, retired, or unknown. Empty when all are fine.

    An item without a due date is taken as not needing calibration (a permeameter body)."""
    wanted = sorted(set(apparatus_ids))
    if not wanted:
        return []
    today = on or utcnow().date()
    found = {
        item.id: item
        for item in session.exec(select(Apparatus).where(col(Apparatus.id).in_(wanted))).all()
    }
    problems: list[CalibrationProblem] = []
    for apparatus_id in wanted:
        item = found.get(apparatus_id)
        if item is None:
            problems.append(CalibrationProblem(apparatus_id, "", "", None, "unknown"))
        elif not item.is_active:
            problems.append(
                CalibrationProblem(
                    apparatus_id, item.identifier, item.kind, item.calibration_due, "retired"
                )
            )
        elif is_overdue(item, on=today):
            problems.append(
                CalibrationProblem(
                    apparatus_id, item.identifier, item.kind, item.calibration_due, "overdue"
                )
            )
    return sorted(problems, key=lambda problem: problem.identifier)
