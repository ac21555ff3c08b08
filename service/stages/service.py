"""Recording the stages of a flexible-wall test, each kept as typed beside its SI figures,
with the engine's outcome (through the lab-tests door) stored beside them.

Only tests whose standard is a flexible-wall one, or whose permeameter is a flexible-wall
one, have stages; rigid-wall and granular tests keep their short path (409 here)."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from datetime import datetime
from typing import Any

from pydantic import BaseModel, ConfigDict, Field
from sqlmodel import Session, col, select

from service.accounts.models import User
from service.apparatus.models import Apparatus
from service.audit.service import apply_changes, record_created
from service.common import ApparatusKind
from service.db import utcnow
from service.errors import (
    Conflict,
    FieldProblem,
    InvalidInput,
    NotFound,
    require_version,
)
from service.lab_tests import reduction
from service.lab_tests.lifecycle import start
from service.lab_tests.models import PermeabilityTest, TestApparatus
from service.lab_tests.permissions import Action, require
from service.lab_tests.reading import get_test
from service.lab_tests.reduction import Entry, catalogue
from service.quantities import typed
from service.stages.fields import STAGE_IDS, STAGES, StageSpec, stage_spec
from service.stages.models import StageName, TestStage

MAX_ROWS = 500
MIN_VOLUME_READINGS = 4
MAX_TEXT = 200
Value = str | bool | None


class StageWrite(BaseModel):
    """One stage as typed: its entries by name, its lists of readings by group name (each
    value a text with its unit, as on the form), when it started and ended, and the version
    read (required once the stage exists)."""

    model_config = ConfigDict(extra="forbid")

    entries: dict[str, Value] = Field(default_factory=dict, max_length=40)
    groups: dict[str, list[dict[str, Value]]] = Field(default_factory=dict, max_length=4)
    started_at: datetime | None = None
    ended_at: datetime | None = None
    version: int | None = Field(None, ge=1)


class StageRead(BaseModel):
    """A recorded stage: `typed` as typed, `si` the same shape in SI units (Pa, s, m, m², m³,
    kg, °C), `outcome` what the engine made of it, who recorded it and when."""

    typed: dict[str, Any]
    si: dict[str, Any]
    outcome: dict[str, Any]
    started_at: datetime | None
    ended_at: datetime | None
    recorded_by_id: int | None
    recorded_at: datetime
    version: int


class StagesRead(BaseModel):
    """Every stage of a test, null where not recorded; `needs_stages` is false for rigid-wall
    and granular tests, which keep their short path."""

    test_id: int
    needs_stages: bool
    setup: StageRead | None = None
    saturation: StageRead | None = None
    consolidation: StageRead | None = None
    permeation: StageRead | None = None
    post_test: StageRead | None = None


def needs_stages(session: Session, test: PermeabilityTest) -> bool:
    """Flexible wall by its standard or by the permeameter it uses."""
    wall = next((s.wall for s in catalogue.STANDARDS if s.id == test.standard), "")
    if wall == "flexible":
        return True
    kinds = session.exec(
        select(Apparatus.kind)
        .join(TestApparatus, col(TestApparatus.apparatus_id) == col(Apparatus.id))
        .where(TestApparatus.test_id == test.id)
    ).all()
    return ApparatusKind.FLEXIBLE_WALL_PERMEAMETER in kinds


def stages_of(session: Session, test_id: int) -> dict[str, TestStage]:
    rows = session.exec(select(TestStage).where(TestStage.test_id == test_id)).all()
    return {r.stage: r for r in rows}


def read_stages(
    session: Session, test_id: int, *, actor: User
) -> tuple[PermeabilityTest, dict[str, TestStage]]:
    """The test (404 if not visible) and its recorded stages by name."""
    test = get_test(session, test_id, actor=actor)
    return test, stages_of(session, test.id or 0)


# --- reading what was typed ---------------------------------------------------------------------


def _value(entry: Entry, raw: Value, loc: tuple[Any, ...]) -> tuple[Value, Any]:
    """(as typed, SI figure) of one value; None for an empty one."""
    if entry.is_flag:
        return bool(raw), bool(raw)
    text = "" if raw is None or isinstance(raw, bool) else str(raw).strip()
    if not text:
        return None, None
    if len(text) > MAX_TEXT:
        raise _refuse(loc, entry, text, f"is longer than {MAX_TEXT} characters")
    if entry.is_text:
        return text, text
    if entry.choices:
        if text not in entry.choices:
            raise _refuse(loc, entry, text, "is not one of the choices")
        return text, text
    shown, value = typed(text, entry.kind, loc, positive=entry.positive)
    return shown, value


def _refuse(loc: tuple[Any, ...], entry: Entry, value: Any, reason: str) -> InvalidInput:
    return InvalidInput(
        problems=[FieldProblem(loc, reason, value, entry.accepted, "value_error", entry.label)]
    )


def _label(spec: StageSpec, loc: Sequence[Any]) -> str:
    """'Saturation · B check 2 · Pore pressure after'."""
    words = [spec.title]
    if len(loc) >= 3 and loc[0] == "groups":
        group = next((g for g in spec.groups if g.id == loc[1]), None)
        if group is not None:
            words.append(group.label if group.single else f"{group.label} {int(loc[2]) + 1}")
            found = next((e for e in group.entries if len(loc) > 3 and e.id == loc[3]), None)
            if found is not None:
                words.append(found.label)
    elif len(loc) >= 2:
        found = next((e for e in spec.entries if e.id == loc[1]), None)
        words.append(found.label if found is not None else str(loc[-1]))
    return " · ".join(words)


def _labelled(spec: StageSpec, exc: InvalidInput) -> InvalidInput:
    return InvalidInput(
        problems=[
            FieldProblem(p.loc, p.reason, p.value, p.accepted, p.kind, _label(spec, p.loc))
            for p in exc.problems
        ]
    )


def read_typed(spec: StageSpec, data: StageWrite) -> tuple[dict[str, Any], dict[str, Any]]:
    """Every value of the stage as typed and in SI, or a 422 naming each refused field."""
    problems: list[FieldProblem] = []
    typed_out: dict[str, Any] = {}
    si_out: dict[str, Any] = {}
    known = {e.id: e for e in spec.entries}
    for name in data.entries:
        if name not in known:
            problems.append(
                FieldProblem(
                    ("entries", name),
                    "is not an entry of this stage",
                    name,
                    ", ".join(known) or "no entries",
                    "unknown",
                    f"{spec.title} · {name}",
                )
            )
    for entry in spec.entries:
        loc: tuple[Any, ...] = ("entries", entry.id)
        try:
            shown, value = _value(entry, data.entries.get(entry.id), loc)
        except InvalidInput as exc:
            problems.extend(exc.problems)
            continue
        if shown is None and entry.id in spec.required:
            problems.append(FieldProblem(loc, "is required", None, entry.accepted, "missing"))
        if shown is not None:
            typed_out[entry.id], si_out[entry.id] = shown, value
    groups = {g.id: g for g in spec.groups}
    for name in data.groups:
        if name not in groups:
            problems.append(
                FieldProblem(
                    ("groups", name),
                    "is not a list of this stage",
                    name,
                    ", ".join(groups) or "no lists",
                    "unknown",
                    f"{spec.title} · {name}",
                )
            )
    for group in spec.groups:
        rows = data.groups.get(group.id, [])
        if len(rows) > (1 if group.single else MAX_ROWS):
            problems.append(
                FieldProblem(
                    ("groups", group.id),
                    "has too many rows",
                    len(rows),
                    f"at most {1 if group.single else MAX_ROWS}",
                    "too_many",
                )
            )
            continue
        row_entries = {e.id: e for e in group.entries}
        typed_rows, si_rows = [], []
        for j, row in enumerate(rows):
            extra = [k for k in row if k not in row_entries]
            for k in extra:
                problems.append(
                    FieldProblem(
                        ("groups", group.id, j, k),
                        "is not a value of this list",
                        k,
                        ", ".join(row_entries),
                        "unknown",
                        f"{spec.title} · {group.label} {j + 1} · {k}",
                    )
                )
            t_row: dict[str, Any] = {}
            s_row: dict[str, Any] = {}
            for entry in group.entries:
                loc = ("groups", group.id, j, entry.id)
                try:
                    shown, value = _value(entry, row.get(entry.id), loc)
                except InvalidInput as exc:
                    problems.extend(exc.problems)
                    continue
                if shown is None and entry.id in group.required:
                    problems.append(
                        FieldProblem(loc, "is required", None, entry.accepted, "missing")
                    )
                if shown is not None and not (entry.is_flag and shown is False):
                    t_row[entry.id], s_row[entry.id] = shown, value
            typed_rows.append(t_row)
            si_rows.append(s_row)
        if typed_rows:
            typed_out[group.id] = typed_rows
            si_out[group.id] = si_rows
    if problems:
        raise _labelled(spec, InvalidInput(problems=problems))
    return typed_out, si_out


# --- what the engine makes of it -----------------------------------------------------------------


def _si(stages: Mapping[str, TestStage], stage: str) -> dict[str, Any]:
    row = stages.get(stage)
    return dict(row.si) if row is not None else {}


def _outcome(stages: Mapping[str, TestStage], stage: str) -> dict[str, Any]:
    row = stages.get(stage)
    return dict(row.outcome) if row is not None else {}


def derive(
    test: PermeabilityTest, stage: str, si: Mapping[str, Any], others: Mapping[str, TestStage]
) -> dict[str, Any]:
    """The engine's outcome of one stage, given the other stages recorded."""
    setup = _si(others, StageName.SETUP) if stage != StageName.SETUP else dict(si)
    gravity = setup.get("specific_gravity")
    if stage == StageName.SATURATION:
        return reduction.stage_saturation(
            si.get("b_checks", []), stiff=bool(si.get("stiff_material")), standard=test.standard
        )
    if stage == StageName.CONSOLIDATION:
        readings = [(r["elapsed"], r["volume_change"]) for r in si.get("readings", [])]
        stress = si["cell_pressure"] - si["back_pressure"]
        if len(readings) < MIN_VOLUME_READINGS:
            # Readings come in over hours: keep them; the end is judged from the fourth on.
            return {
                "effective_stress_pa": stress,
                "pending": "At least four volume-change readings are needed to judge the end "
                "of consolidation.",
            }
        out = reduction.stage_consolidation(
            readings,
            length_m=setup.get("length"),
            diameter_m=setup.get("diameter"),
            axial_change_m=si.get("axial_change"),
            dry_mass_kg=reduction.stage_dry_mass(setup.get("wet_mass"), setup.get("water_content")),
            specific_gravity=gravity,
        )
        out["effective_stress_pa"] = stress
        return out
    if stage == StageName.PERMEATION:
        if len(si.get("readings", [])) < 2:
            return {"pending": "At least two readings are needed for a first k."}
        consolidation = others.get(StageName.CONSOLIDATION)
        dims = (consolidation.outcome.get("dimensions") if consolidation else None) or {}
        length = dims.get("length_m") or setup.get("length")
        diameter = setup.get("diameter")
        area = dims.get("area_m2") or (3.141592653589793 * diameter**2 / 4 if diameter else None)
        if not (length and area):
            raise InvalidInput(
                problems=[
                    FieldProblem(
                        ("entries", "permeation_method"),
                        "needs the specimen's length and diameter from the set-up first",
                        None,
                        "a set-up stage with the specimen's dimensions",
                        "missing",
                        "Permeation",
                    )
                ]
            )
        zero = (si.get("zero_flow") or [None])[0]
        return reduction.stage_permeation(
            si["readings"],
            method=si["permeation_method"],
            headwater_area_m2=si["headwater_area"],
            tailwater_area_m2=si.get("tailwater_area"),
            zero_flow=zero,
            length_m=length,
            area_m2=area,
            pore_volume_m3=consolidation.outcome.get("pore_volume_m3") if consolidation else None,
            standard=test.standard,
            saturation=[
                (c["b_value"], c["back_pressure_pa"])
                for c in _outcome(others, StageName.SATURATION).get("b_checks", [])
            ],
        )
    if stage == StageName.POST_TEST:
        return reduction.stage_post_test(
            length_m=si["post_length"],
            diameter_m=si["post_diameter"],
            wet_mass_kg=si["post_wet_mass"],
            dry_mass_kg=si["post_dry_mass"],
            specific_gravity=gravity,
        )
    return {}


def write_stage(
    session: Session, test_id: int, stage: str, data: StageWrite, *, actor: User
) -> TestStage:
    """Record a stage, or replace what it holds (its `version` required once it exists).
    A stage the engine refuses is not stored; later stages are worked out again."""
    test = get_test(session, test_id, actor=actor, lock=True)
    spec = stage_spec(stage)
    if spec is None:
        raise NotFound(f"test {test_id} has no stage {stage!r} (stages: {', '.join(STAGE_IDS)})")
    require(test, actor, Action.RECORD)
    if not needs_stages(session, test):
        raise Conflict(
            f"test {test_id} is not a flexible-wall test: its trials are recorded directly"
        )
    assert test.id is not None
    stages = stages_of(session, test.id)
    row = stages.get(stage)
    if row is not None:
        require_version(row, data.version, "stage", yours=data.model_dump(mode="json"))
    typed_values, si = read_typed(spec, data)
    try:
        outcome = derive(test, stage, si, stages)
    except InvalidInput as exc:
        raise _labelled(spec, exc) from None
    start(session, test, actor=actor)
    columns: dict[str, Any] = {
        "typed": typed_values,
        "si": si,
        "outcome": outcome,
        "started_at": data.started_at,
        "ended_at": data.ended_at,
        "recorded_by_id": actor.id,
    }
    if row is None:
        row = TestStage(test_id=test.id, stage=stage, **columns)
        session.add(row)
        session.flush()
        record_created(session, row, actor_id=actor.id)
        stages[stage] = row
    elif apply_changes(session, row, columns, actor_id=actor.id):
        row.recorded_at = utcnow()
        session.add(row)
        session.flush()
    _rederive_later(session, test, stage, stages, actor=actor)
    return row


def _rederive_later(
    session: Session,
    test: PermeabilityTest,
    stage: str,
    stages: dict[str, TestStage],
    *,
    actor: User,
) -> None:
    """Later stages depend on earlier ones (dimensions, pore volume, Gₛ): work them out again;
    one that no longer reduces keeps the refusal in its outcome."""
    later = STAGE_IDS[STAGE_IDS.index(stage) + 1 :]
    for name in later:
        row = stages.get(name)
        if row is None:
            continue
        try:
            outcome = derive(test, name, row.si, stages)
        except InvalidInput as exc:
            outcome = {"refused": [p.msg for p in exc.problems]}
        if apply_changes(session, row, {"outcome": outcome}, actor_id=actor.id):
            session.add(row)
            session.flush()


# --- views of the stages -----------------------------------------------------------------------


def stage_read(row: TestStage | None) -> dict[str, Any] | None:
    """A stage for the API and the export: values as typed beside their SI values."""
    if row is None:
        return None
    return {
        "typed": row.typed,
        "si": row.si,
        "outcome": row.outcome,
        "started_at": row.started_at.isoformat() if row.started_at else None,
        "ended_at": row.ended_at.isoformat() if row.ended_at else None,
        "recorded_by_id": row.recorded_by_id,
        "recorded_at": row.recorded_at.isoformat(),
        "version": row.version,
    }


def stages_read(rows: Mapping[str, TestStage]) -> dict[str, Any]:
    """Every stage by name, null where not recorded."""
    return {s.id: stage_read(rows.get(s.id)) for s in STAGES}


def stages_by_test(session: Session, test_ids: Sequence[int]) -> dict[int, dict[str, Any]]:
    """Every stage of each test (null where not recorded), for the export."""
    grouped: dict[int, dict[str, TestStage]] = {t: {} for t in test_ids}
    for row in session.exec(select(TestStage).where(col(TestStage.test_id).in_(test_ids))).all():
        grouped[row.test_id][row.stage] = row
    return {t: stages_read(rows) for t, rows in grouped.items()}


def permeation_trials(row: TestStage) -> list[dict[str, str]]:
    """The permeation stage's intervals as the test's trials (heads, duration, inflow and
    outflow, temperature), each figure written in SI with enough digits to give the same k."""
    trials = []
    for d in row.outcome.get("determinations", []):
        trial = {
            "head_initial": f"{d['head_initial_m']:.6g} m",
            "head_final": f"{d['head_final_m']:.6g} m",
            "duration": f"{d['time_end_s'] - d['time_start_s']:.6g} s",
            "inflow_volume": f"{d['inflow_volume_m3'] * 1e6:.6g} mL",
        }
        if d.get("outflow_volume_m3") is not None:
            trial["outflow_volume"] = f"{d['outflow_volume_m3'] * 1e6:.6g} mL"
        if d.get("temperature_c") is not None:
            trial["temperature"] = f"{d['temperature_c']:.6g} degC"
        trials.append(trial)
    return trials
