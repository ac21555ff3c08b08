"""Logger files for the consolidation and permeation stages: the apparatus's mapping (set
once per apparatus and stage), and a file's rows taken in as the stage's readings once every
row reads. Files are read by service/exchange/files.py (its size and shape limits)."""

from __future__ import annotations

from typing import Any

from pydantic import BaseModel, ConfigDict, Field
from sqlmodel import Session, col, select

from service.accounts.models import User
from service.apparatus.models import Apparatus
from service.audit.service import apply_changes, record_created
from service.common import ApparatusKind, Role
from service.errors import (
    Conflict,
    FieldProblem,
    InvalidInput,
    Loc,
    NotFound,
    PermissionDenied,
    require_version,
)
from service.exchange.files import Table
from service.lab_tests import reduction
from service.lab_tests.models import TestApparatus
from service.lab_tests.permissions import Action, require
from service.lab_tests.reading import get_test
from service.stages.fields import stage_spec
from service.stages.models import LoggerMapping, StageName, TestStage
from service.stages.service import StageWrite, stages_of, write_stage

# The quantities a logger may give, per stage (each a catalogue entry of the stage's readings).
CHANNELS: dict[str, tuple[str, ...]] = {
    StageName.CONSOLIDATION: ("volume_change",),
    StageName.PERMEATION: (
        "headwater_reading",
        "tailwater_reading",
        "headwater_pressure",
        "tailwater_pressure",
        "temperature",
    ),
}
LOGGER_LIMIT = 4 * 1024 * 1024  # a logger file of a few thousand rows fits well within this
WRITERS = frozenset({Role.TECHNICIAN, Role.LAB_MANAGER, Role.ADMIN})


class TimeColumnIn(BaseModel):
    model_config = ConfigDict(extra="forbid")
    column: str = Field(min_length=1, max_length=100, description="header text or number")
    unit: str | None = Field(None, max_length=20, description="elapsed time unit, e.g. 'min'")
    datetime_format: str | None = Field(
        None, max_length=40, description="'iso' or a pattern such as '%d/%m/%Y %H:%M:%S'"
    )


class ChannelIn(BaseModel):
    model_config = ConfigDict(extra="forbid")
    column: str = Field(min_length=1, max_length=100)
    unit: str = Field(min_length=1, max_length=20, description="e.g. 'kPa', 'mL', 'degC'")
    required: bool = True


class MappingWrite(BaseModel):
    """Which column holds the time and which hold each quantity, in which unit."""

    model_config = ConfigDict(extra="forbid")
    time: TimeColumnIn
    channels: dict[str, ChannelIn] = Field(max_length=10)
    version: int | None = Field(None, ge=1)


class MappingRead(BaseModel):
    apparatus_id: int
    stage: str
    mapping: dict[str, Any]
    version: int


class MappingMissing(Conflict):
    """A logger file came for a test whose permeameter has no mapping for the stage."""


def _readings(stage: str) -> dict[str, Any]:
    spec = stage_spec(stage)
    assert spec is not None
    return {e.id: e for e in spec.group("readings").entries}


def _kinds(stage: str) -> dict[str, Any]:
    entries = _readings(stage)
    return {name: entries[name].kind for name in CHANNELS[stage]}


def channel_entries(stage: str) -> list[Any]:
    """The catalogue entries of the quantities a logger gives for the stage (label, kind)."""
    entries = _readings(stage)
    return [entries[name] for name in CHANNELS[stage]]


def mapping_label(stage: str, loc: Loc) -> str:
    """A mapping field in words: 'Time column · Heading', 'Volume change · Unit'."""
    parts = [str(p) for p in loc if p != "body"]
    if parts[:1] == ["channels"]:
        parts = parts[1:]
    if not parts:
        return "Logger columns"
    entries = _readings(stage) if stage in CHANNELS else {}
    what = "Time column" if parts[0] == "time" else getattr(entries.get(parts[0]), "label", "")
    what = what or f"Channel {parts[0]}"
    rest = {"column": "Heading", "unit": "Unit", "datetime_format": "Unit"}
    return f"{what} · {rest[parts[1]]}" if len(parts) > 1 and parts[1] in rest else what


def _stage_of(stage: str) -> str:
    if stage not in CHANNELS:
        raise NotFound(f"no logger stage {stage!r} (stages: {', '.join(CHANNELS)})")
    return stage


def require_writer(actor: User) -> None:
    """Who may set a logger mapping (the API and the page check the same)."""
    if actor.role not in WRITERS:
        raise PermissionDenied("logger mappings are set by technicians and lab managers")


def permeameter_of(session: Session, test_id: int) -> Apparatus | None:
    """The flexible-wall permeameter a test uses (its logger's mapping is the one read)."""
    return session.exec(
        select(Apparatus)
        .join(TestApparatus, col(TestApparatus.apparatus_id) == col(Apparatus.id))
        .where(
            TestApparatus.test_id == test_id,
            Apparatus.kind == ApparatusKind.FLEXIBLE_WALL_PERMEAMETER,
        )
    ).first()


def mapping_of(session: Session, apparatus_id: int, stage: str) -> LoggerMapping | None:
    """The apparatus's mapping for the stage, if one was set."""
    return session.exec(
        select(LoggerMapping).where(
            LoggerMapping.apparatus_id == apparatus_id, LoggerMapping.stage == stage
        )
    ).first()


def _mapping_problems(stage: str, data: MappingWrite) -> list[FieldProblem]:
    """What is wrong with a mapping before any file arrives: unknown or no quantities, and
    (through the engine, on a header row of the mapped columns) a wrong unit, a time given
    both ways, one column mapped twice."""
    unknown = [name for name in data.channels if name not in CHANNELS[stage]]
    if unknown:
        return [
            FieldProblem(
                ("channels", name),
                "is not a quantity a logger gives for this stage",
                name,
                ", ".join(CHANNELS[stage]),
                "unknown",
                f"Channel {name}",
            )
            for name in unknown
        ]
    if not data.channels:
        return [
            FieldProblem(
                ("channels",),
                "need the column of at least one reading",
                None,
                "a column heading (or number) for at least one of the readings",
                "missing",
                "Readings",
            )
        ]
    mapping = data.model_dump(mode="json", exclude={"version"})
    header = [mapping["time"]["column"], *(c["column"] for c in mapping["channels"].values())]
    try:
        reduction.logger_readings(header, [], mapping, _kinds(stage))
    except InvalidInput as exc:
        own = [p for p in exc.problems if p.loc and p.loc[0] == "mapping"]
        out = []
        for p in own:
            loc = tuple(p.loc[1:])
            if loc and loc[0] != "time":
                loc = ("channels", *loc)
            out.append(p.at(loc, mapping_label(stage, loc)))
        return out
    return []


def save_mapping(
    session: Session, apparatus_id: int, stage: str, data: MappingWrite, *, actor: User
) -> LoggerMapping:
    """Set or change how an apparatus's logger files are read for a stage."""
    _stage_of(stage)
    require_writer(actor)
    if session.get(Apparatus, apparatus_id) is None:
        raise NotFound(f"apparatus {apparatus_id} not found")
    problems = _mapping_problems(stage, data)
    if problems:
        raise InvalidInput(problems=problems)
    mapping = data.model_dump(mode="json", exclude={"version"})
    row = mapping_of(session, apparatus_id, stage)
    if row is None:
        row = LoggerMapping(
            apparatus_id=apparatus_id, stage=stage, mapping=mapping, recorded_by_id=actor.id
        )
        session.add(row)
        session.flush()
        record_created(session, row, actor_id=actor.id)
        return row
    require_version(row, data.version, "logger mapping", yours=mapping)
    if apply_changes(
        session, row, {"mapping": mapping, "recorded_by_id": actor.id}, actor_id=actor.id
    ):
        session.add(row)
        session.flush()
    return row


def mapping_for_test(session: Session, test_id: int, stage: str) -> LoggerMapping:
    """The mapping of the flexible-wall permeameter the test uses, for the stage."""
    permeameter = permeameter_of(session, test_id)
    found = mapping_of(session, permeameter.id or 0, stage) if permeameter else None
    if found is None:
        raise MappingMissing(
            f"test {test_id}: its permeameter has no logger mapping for {stage}; set one "
            "first (time column and channels, once per apparatus)"
        )
    return found


def import_readings(
    session: Session, test_id: int, stage: str, table: Table, *, actor: User
) -> TestStage:
    """Take a logger file's rows as the stage's readings, replacing those recorded; the
    stage's own entries are kept. Nothing is stored unless every row reads."""
    _stage_of(stage)
    test = get_test(session, test_id, actor=actor)
    require(test, actor, Action.RECORD)
    mapping = mapping_for_test(session, test.id or 0, stage)
    readings = reduction.logger_readings(
        table.header, table.rows, mapping.mapping, _kinds(stage), first_row=table.first_row
    )
    current = stages_of(session, test.id or 0).get(stage)
    entries = dict(current.typed) if current is not None else {}
    entries = {k: v for k, v in entries.items() if not isinstance(v, list)}
    groups = {
        k: v
        for k, v in (current.typed if current is not None else {}).items()
        if isinstance(v, list)
    }
    groups["readings"] = [{name: cell["text"] for name, cell in r.items()} for r in readings]
    data = StageWrite(
        entries=entries,
        groups=groups,
        started_at=current.started_at if current else None,
        ended_at=current.ended_at if current else None,
        version=current.version if current else None,
    )
    return write_stage(session, test_id, stage, data, actor=actor)
