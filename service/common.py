"""Column helpers and enumerations shared by the tables of every feature."""

from __future__ import annotations

from datetime import date
from enum import StrEnum
from typing import Any

import sqlalchemy as sa
from sqlmodel import Field

from service.db import JSONType, UTCDateTime, utcnow


def created_at_field() -> Any:
    return Field(default_factory=utcnow, sa_type=UTCDateTime, nullable=False)


def timestamp_field(*, nullable: bool = True) -> Any:
    return Field(default=None, sa_type=UTCDateTime, nullable=nullable)


def json_field(default_factory: Any = dict) -> Any:
    return Field(default_factory=default_factory, sa_type=JSONType, nullable=False)


def version_field() -> Any:
    """Optimistic-concurrency counter on every editable record."""
    return Field(default=1, nullable=False, ge=1)


def one_of(column: str, values: type[StrEnum], name: str | None = None) -> sa.CheckConstraint:
    """A named CHECK constraint listing an enumeration's values (no native enums: STACK.md 7)."""
    allowed = ", ".join(f"'{member.value}'" for member in values)
    return sa.CheckConstraint(f"{column} IN ({allowed})", name=name or f"{column}_allowed")


def positive(column: str) -> sa.CheckConstraint:
    return sa.CheckConstraint(f"{column} IS NULL OR {column} > 0", name=f"{column}_positive")


class OrganisationKind(StrEnum):
    LAB = "lab"
    CLIENT = "client"


class Role(StrEnum):
    TECHNICIAN = "technician"
    REVIEWER = "reviewer"
    LAB_MANAGER = "lab_manager"
    CLIENT = "client"
    ADMIN = "admin"


class DisplayUnits(StrEnum):
    SI = "si"
    US = "us"


class LocationKind(StrEnum):
    BOREHOLE = "borehole"
    TEST_PIT = "test_pit"
    BORROW_SOURCE = "borrow_source"
    STOCKPILE = "stockpile"


class SampleType(StrEnum):
    TUBE = "tube"
    BLOCK = "block"
    BULK = "bulk"
    RING = "ring"


class Priority(StrEnum):
    NORMAL = "normal"
    URGENT = "urgent"


class TestMethod(StrEnum):
    CONSTANT_HEAD = "constant_head"
    FALLING_HEAD = "falling_head"
    FALLING_HEAD_RISING_TAIL = "falling_head_rising_tail"
    CONSTANT_RATE = "constant_rate"


class TestState(StrEnum):
    PLANNED = "planned"
    RUNNING = "running"
    SUBMITTED = "submitted"
    APPROVED = "approved"
    ISSUED = "issued"
    SUPERSEDED = "superseded"


# Tests still owed to a client: these count towards load and can be overdue.
OPEN_STATES = (TestState.PLANNED, TestState.RUNNING, TestState.SUBMITTED, TestState.APPROVED)
# The open-test condition as literal SQL: the partial indexes are declared with it, and a
# query must carry it with constants (not bound parameters) for SQLite to use them.
OPEN_TEST_SQL = "state IN ({})".format(", ".join(f"'{s.value}'" for s in OPEN_STATES))
# The queue's stored due date of a test with none (its own and its sample's both unset):
# the latest date, so such tests sort last and every row has a key an index can serve.
NO_DUE_DATE = date.max


class Preparation(StrEnum):
    INTACT = "intact"
    REMOULDED = "remoulded"
    COMPACTED = "compacted"


class ApparatusKind(StrEnum):
    RIGID_WALL_PERMEAMETER = "rigid_wall_permeameter"
    FLEXIBLE_WALL_PERMEAMETER = "flexible_wall_permeameter"
    BALANCE = "balance"
    THERMOMETER = "thermometer"
    TIMER = "timer"
    CALIPER = "caliper"
    PRESSURE_TRANSDUCER = "pressure_transducer"
    BURETTE = "burette"


class SignOffMeaning(StrEnum):
    PERFORMED = "performed"
    REVIEWED = "reviewed"
    APPROVED = "approved"
    ISSUED = "issued"


class CustodyKind(StrEnum):
    RECEIVED = "received"
    STORED = "stored"
    MOVED = "moved"
    HANDED_TO_TECHNICIAN = "handed_to_technician"
    SPECIMEN_PREPARED = "specimen_prepared"
    RETURNED_TO_STORE = "returned_to_store"
    SHIPPED = "shipped"
    DISPOSED = "disposed"


class CertificateKind(StrEnum):
    SAMPLE = "sample"
    PROJECT = "project"


class CertificateState(StrEnum):
    ISSUED = "issued"
    SUPERSEDED = "superseded"
    WITHDRAWN = "withdrawn"


class TokenKind(StrEnum):
    SESSION = "session"
    API = "api"
