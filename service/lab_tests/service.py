"""Test lifecycle rules: request and assign a test, record its conditions, specimen and trials,
submit, review (approve or send back), issue and correct by a new revision.

States: planned → running (first specimen, saturation or trial write, or an explicit start)
→ submitted → approved → issued; submitted → running when sent back (reason required).
A correction of an approved or issued test creates revision n+1 of the same series (running,
with the specimen, conditions, saturation and trials copied); the old test points to it at
once (`superseded_by_id`) and stays approved or issued, fully readable, until the new
revision is approved, when the old one becomes 'superseded'. Only planned and running tests
take edits; everything else answers 409 naming its state.

What the technician typed is kept as typed (text, and trial entries in the reduction
contract's shape) beside SI floats parsed by the engine's one unit registry. Submission stores
the engine's result with its version and the hash of its inputs, and the sign-off stores the
hash of exactly that (service/signoffs/service.py)."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

from sqlmodel import Session, col, delete, func, select

from service.access import can_see, get_visible
from service.accounts.models import Organisation, User
from service.apparatus.models import Apparatus
from service.apparatus.service import calibration_problems
from service.audit.service import apply_changes, record_change, record_created
from service.common import ApparatusKind, OrganisationKind, Role, SignOffMeaning, TestState
from service.db import utcnow
from service.engine import (
    ENGINE_VERSION,
    EngineInputError,
    parse_request,
    reduce,
    result_to_dict,
    units,
)
from service.engine.errors import Loc
from service.engine.uncertainty import standard_uncertainty_from_resolution
from service.errors import (
    Conflict,
    InvalidInput,
    InvalidTransition,
    NotFound,
    PermissionDenied,
    StaleVersion,
)
from service.idempotency import service as idempotency
from service.lab_tests.models import (
    PermeabilityTest,
    Reading,
    SaturationStep,
    Specimen,
    TestApparatus,
    Trial,
)
from service.lab_tests.payload import build_request, input_hash
from service.lab_tests.schemas import (
    ApparatusRef,
    CheckRead,
    CorrectionRequest,
    LiveReduction,
    ProblemRead,
    ReadingRead,
    RecomputeRead,
    SaturationStepCreate,
    SaturationStepRead,
    SendBackRequest,
    SignOffRead,
    SignOffRequest,
    SpecimenRead,
    SpecimenWrite,
    TestCreate,
    TestRead,
    TestUpdate,
    TrialCreate,
    TrialExclusion,
    TrialRead,
    TrialUpdate,
    TrialWritten,
)
from service.projects.models import Project
from service.queue import DEFAULT_LIMIT, paginate
from service.samples.models import Sample
from service.signoffs import service as signoffs
from service.signoffs.models import SignOff

EDITABLE = frozenset({TestState.PLANNED, TestState.RUNNING})
ALLOWED_ACTIONS: dict[str, tuple[str, ...]] = {
    TestState.PLANNED: ("edit", "start", "record specimen, saturation and trials"),
    TestState.RUNNING: ("edit", "record specimen, saturation and trials", "submit"),
    TestState.SUBMITTED: ("approve", "send back"),
    TestState.APPROVED: ("issue", "correct (new revision)"),
    TestState.ISSUED: ("correct (new revision)",),
    TestState.SUPERSEDED: (),
}
# Who requests tests and assigns them.
PLANNERS = frozenset({Role.LAB_MANAGER, Role.ADMIN, Role.REVIEWER})
# Who approves, sends back, issues and orders corrections.
REVIEWERS = frozenset({Role.REVIEWER, Role.LAB_MANAGER})
PERMEAMETERS = frozenset(
    {ApparatusKind.RIGID_WALL_PERMEAMETER, ApparatusKind.FLEXIBLE_WALL_PERMEAMETER}
)
# Which register item's resolution stands in for a missing `u`, per reduction field, and
# the SI unit its `resolution_si` is in.
RESOLUTION_FIELDS: dict[ApparatusKind, tuple[tuple[str, ...], str]] = {
    ApparatusKind.BALANCE: (("wet_mass", "water_mass"), "kg"),
    ApparatusKind.CALIPER: (("length", "diameter"), "m"),
    ApparatusKind.THERMOMETER: (("temperature",), "K"),
    ApparatusKind.TIMER: (("duration",), "s"),
}
# Specimen fields typed with a unit: field -> (kind, SI column, text column, must be > 0).
SPECIMEN_QUANTITIES: dict[str, tuple[units.Kind, str, str, bool]] = {
    "diameter": (units.LENGTH, "diameter_m", "diameter_text", True),
    "length": (units.LENGTH, "length_m", "length_text", True),
    "wet_mass": (units.MASS, "wet_mass_kg", "wet_mass_text", True),
    "water_content": (units.FRACTION, "water_content", "water_content_text", False),
    "max_dry_density": (units.DENSITY, "max_dry_density_kg_per_m3", "max_dry_density_text", True),
    "d10": (units.LENGTH, "d10_m", "d10_text", True),
    "max_particle_size": (units.LENGTH, "max_particle_size_m", "max_particle_size_text", True),
    "final_diameter": (units.LENGTH, "final_diameter_m", "final_diameter_text", True),
    "final_length": (units.LENGTH, "final_length_m", "final_length_text", True),
}
# Trial entries copied to SI columns (the rest stay in `entries` only).
TRIAL_COLUMNS: dict[str, tuple[units.Kind, str, bool]] = {
    "duration": (units.DURATION, "duration_s", True),
    "temperature": (units.TEMPERATURE, "temperature_c", False),
    "volume": (units.VOLUME, "volume_m3", True),
    "head_difference": (units.LENGTH, "head_difference_m", True),
    "head_initial": (units.LENGTH, "head_initial_m", True),
    "head_final": (units.LENGTH, "head_final_m", True),
}
PRESSURES = ("cell_pressure", "back_pressure", "effective_confining")


# --- errors ---------------------------------------------------------------------------------


def _invalid(loc: Sequence[str | int], msg: str, kind: str = "value_error") -> InvalidInput:
    return InvalidInput(msg, detail=[{"loc": list(loc), "msg": msg, "type": kind}])


def _problems(exc: EngineInputError, prefix: Loc = ()) -> list[dict[str, Any]]:
    return [
        {
            "loc": [*prefix, *p.loc],
            "msg": p.msg,
            "type": p.kind,
            "input": p.value,
            "ctx": {"accepted": p.accepted},
        }
        for p in exc.problems
    ]


def _refused(problems: list[dict[str, Any]]) -> InvalidInput:
    return InvalidInput(problems[0]["msg"], detail=problems)


def _wrong_state(test: PermeabilityTest, action: str) -> InvalidTransition:
    allowed = ALLOWED_ACTIONS.get(test.state, ())
    return InvalidTransition(
        f"cannot {action} test {test.id}: it is {test.state}; "
        f"allowed from {test.state}: {', '.join(allowed) or 'nothing (read only)'}",
        detail={"state": test.state, "allowed": list(allowed)},
    )


def _require_state(test: PermeabilityTest, states: set[str], action: str) -> None:
    if test.state not in states:
        raise _wrong_state(test, action)


def _require_editable(test: PermeabilityTest) -> None:
    if test.state not in EDITABLE:
        hint = (
            f"; revision {test.superseded_by_id} replaces it"
            if test.superseded_by_id
            else "; a change now needs a correction (a new revision)"
            if test.state in (TestState.APPROVED, TestState.ISSUED)
            else ""
        )
        allowed = ALLOWED_ACTIONS.get(test.state, ())
        raise InvalidTransition(
            f"test {test.id} is {test.state} and can no longer be edited{hint}",
            detail={"state": test.state, "allowed": list(allowed)},
        )


def _check_version(
    row: Any, version: int | None, what: str, yours: dict[str, Any], *, required: bool = True
) -> None:
    """Refuse an edit made against an older version: 409 with both versions."""
    if version is None:
        if required:
            raise _invalid(("body", "version"), f"version: send the version of the {what} you read")
        return
    if version != row.version:
        current = row.model_dump(mode="json", exclude={"result"})
        raise StaleVersion(
            f"the {what} changed since you read it: you sent version {version}, it is now "
            f"version {row.version}; reload, compare, and send your change again",
            detail={"yours": {**yours, "version": version}, "current": current},
        )


# --- typed values ---------------------------------------------------------------------------


def parse_typed(
    raw: Any, kind: units.Kind, loc: Loc, *, positive: bool = False
) -> tuple[str, float]:
    """(the text as typed, its SI float) through the engine's unit parsing; otherwise a 422
    naming the body field `loc`, the value and what is accepted."""
    text = raw.strip() if isinstance(raw, str) else raw
    try:
        value, _ = units.parse_quantity(text, kind, loc, positive=positive)
    except EngineInputError as exc:
        raise _refused(_problems(exc, ("body",))) from None
    return str(text), value


def _typed_text(raw: Any) -> str:
    """A quantity as a single text (objects keep value and unit; the entry keeps its `u`)."""
    if isinstance(raw, dict):
        return f"{raw.get('value')} {raw.get('unit') or ''}".strip()[:40]
    return str(raw)[:40]


# --- reading ----------------------------------------------------------------------------------


def get_test(
    session: Session, test_id: int, *, actor: User, lock: bool = False
) -> PermeabilityTest:
    """The test if `actor` may see it (404 otherwise); `lock` serialises writers on it."""
    if lock:
        test = session.exec(
            select(PermeabilityTest)
            .where(PermeabilityTest.id == test_id)
            .with_for_update()
            .execution_options(populate_existing=True)
        ).first()
        if test is None or not can_see(session, actor, test):
            raise NotFound(f"test {test_id} not found")
        return test
    return get_visible(session, PermeabilityTest, test_id, actor, "test")


def sample_tests(
    session: Session, sample_id: int, *, actor: User, limit: int = DEFAULT_LIMIT, offset: int = 0
) -> tuple[list[PermeabilityTest], int]:
    """One page of the tests and revisions requested on a sample (series, then revision
    order) and how many there are."""
    get_visible(session, Sample, sample_id, actor, "sample")
    query = (
        select(PermeabilityTest)
        .where(PermeabilityTest.sample_id == sample_id)
        .order_by(col(PermeabilityTest.series), col(PermeabilityTest.revision))
    )
    return paginate(session, query, limit=limit, offset=offset)


def apparatus_of(session: Session, test_id: int) -> list[Apparatus]:
    return list(
        session.exec(
            select(Apparatus)
            .join(TestApparatus, col(TestApparatus.apparatus_id) == col(Apparatus.id))
            .where(TestApparatus.test_id == test_id)
            .order_by(col(Apparatus.identifier))
        ).all()
    )


def specimen_of(session: Session, test_id: int) -> Specimen | None:
    return session.exec(select(Specimen).where(Specimen.test_id == test_id)).first()


def saturation_of(session: Session, test_id: int) -> list[SaturationStep]:
    return list(
        session.exec(
            select(SaturationStep)
            .where(SaturationStep.test_id == test_id)
            .order_by(col(SaturationStep.seq))
        ).all()
    )


def trials_of(session: Session, test_id: int) -> list[Trial]:
    return list(
        session.exec(select(Trial).where(Trial.test_id == test_id).order_by(col(Trial.seq))).all()
    )


def readings_of(session: Session, trial_ids: Sequence[int]) -> dict[int, list[Reading]]:
    out: dict[int, list[Reading]] = {trial_id: [] for trial_id in trial_ids}
    if trial_ids:
        rows = session.exec(
            select(Reading)
            .where(col(Reading.trial_id).in_(list(trial_ids)))
            .order_by(col(Reading.trial_id), col(Reading.seq))
        ).all()
        for row in rows:
            out[row.trial_id].append(row)
    return out


@dataclass
class TestRecord:
    """A test with everything recorded on it, as the pages and the API show it."""

    __test__ = False
    test: PermeabilityTest
    apparatus: list[Apparatus]
    specimen: Specimen | None
    saturation: list[SaturationStep]
    trials: list[Trial]
    readings: dict[int, list[Reading]]
    sign_offs: list[SignOff] = field(default_factory=list)


def load_record(session: Session, test_id: int, *, actor: User) -> TestRecord:
    test = get_test(session, test_id, actor=actor)
    assert test.id is not None
    trials = trials_of(session, test.id)
    return TestRecord(
        test=test,
        apparatus=apparatus_of(session, test.id),
        specimen=specimen_of(session, test.id),
        saturation=saturation_of(session, test.id),
        trials=trials,
        readings=readings_of(session, [t.id for t in trials if t.id is not None]),
        sign_offs=list(signoffs.sign_offs_of(session, test.id)),
    )


def trial_read(trial: Trial, readings: Sequence[Reading] = ()) -> TrialRead:
    return TrialRead.model_validate(
        {
            **trial.model_dump(),
            "readings": [ReadingRead.model_validate(r.model_dump()) for r in readings],
        }
    )


def describe_test(record: TestRecord) -> TestRead:
    """The API's view of a test record."""
    return TestRead.model_validate(
        {
            **record.test.model_dump(),
            "apparatus": [ApparatusRef.model_validate(a.model_dump()) for a in record.apparatus],
            "specimen": SpecimenRead.model_validate(record.specimen.model_dump())
            if record.specimen
            else None,
            "saturation": [
                SaturationStepRead.model_validate(s.model_dump()) for s in record.saturation
            ],
            "trials": [trial_read(t, record.readings.get(t.id or 0, ())) for t in record.trials],
            "sign_offs": [SignOffRead.model_validate(s.model_dump()) for s in record.sign_offs],
        }
    )


# --- access -----------------------------------------------------------------------------------


def _is_planner(actor: User) -> bool:
    return actor.role in PLANNERS


def _require_planner(actor: User, action: str) -> None:
    if not _is_planner(actor):
        raise PermissionDenied(f"{action} needs a lab manager, reviewer or admin")


def _require_writer(test: PermeabilityTest, actor: User) -> None:
    """Test data is written by the technician assigned to it, or by a lab manager."""
    if actor.role == Role.LAB_MANAGER:
        return
    if actor.role == Role.TECHNICIAN and test.technician_id == actor.id:
        return
    if actor.role == Role.TECHNICIAN:
        raise PermissionDenied(
            f"test {test.id} is not assigned to you; only its technician or a lab manager "
            "may record on it"
        )
    raise PermissionDenied(
        f"recording on test {test.id} is for its assigned technician or a lab manager"
    )


# --- request, assignment and conditions -------------------------------------------------------


def _check_technician(session: Session, user_id: int) -> None:
    user = session.get(User, user_id)
    organisation = session.get(Organisation, user.organisation_id) if user else None
    if (
        user is None
        or organisation is None
        or not user.is_active
        or user.role != Role.TECHNICIAN
        or organisation.kind != OrganisationKind.LAB
    ):
        raise _invalid(
            ("body", "technician_id"),
            f"technician_id: user {user_id} is not an active technician of the lab; "
            "accepted: the id of an active user with the technician role",
        )


def _check_apparatus(session: Session, apparatus_ids: list[int]) -> list[int]:
    wanted: list[int] = []
    permeameters = []
    for index, apparatus_id in enumerate(apparatus_ids):
        item = session.get(Apparatus, apparatus_id)
        loc = ("body", "apparatus_ids", index)
        if item is None:
            raise _invalid(loc, f"apparatus_ids[{index}]: apparatus {apparatus_id} not found")
        if not item.is_active:
            raise _invalid(
                loc, f"apparatus_ids[{index}]: {item.identifier} is retired from the register"
            )
        if item.kind in PERMEAMETERS:
            permeameters.append(item.identifier)
        if apparatus_id not in wanted:
            wanted.append(apparatus_id)
    if len(permeameters) > 1:
        raise _invalid(
            ("body", "apparatus_ids"),
            f"apparatus_ids: one permeameter per test (got {', '.join(permeameters)})",
        )
    return wanted


def _set_apparatus(
    session: Session, test: PermeabilityTest, apparatus_ids: list[int], *, actor: User
) -> bool:
    assert test.id is not None
    wanted = _check_apparatus(session, apparatus_ids)
    current = [a.id for a in apparatus_of(session, test.id) if a.id is not None]
    if sorted(current) == sorted(wanted):
        return False
    session.exec(delete(TestApparatus).where(col(TestApparatus.test_id) == test.id))
    for apparatus_id in wanted:
        session.add(TestApparatus(test_id=test.id, apparatus_id=apparatus_id))
    session.flush()
    record_change(
        session,
        entity="permeability_test",
        entity_id=test.id,
        field="apparatus_ids",
        old=sorted(current),
        new=sorted(wanted),
        actor_id=actor.id,
    )
    return True


def _project_limit(session: Session, test: PermeabilityTest) -> dict[str, Any]:
    sample = session.get(Sample, test.sample_id)
    project = session.get(Project, sample.project_id) if sample else None
    return {
        "spec_k_max_text": project.spec_k_max_text if project else "",
        "spec_k_max_m_per_s": project.spec_k_max_m_per_s if project else None,
    }


def _test_columns(
    session: Session, test: PermeabilityTest, fields: dict[str, Any]
) -> dict[str, Any]:
    """Column values for the request fields sent (typed values parsed, checked)."""
    columns: dict[str, Any] = {}
    if "standard" in fields:
        columns["standard"] = fields["standard"] or ""
    for name in ("method", "permeant", "temperature_correction"):
        if fields.get(name) is not None:
            columns[name] = fields[name]
    if "permeant" in columns and not columns["permeant"].strip():
        raise _invalid(("body", "permeant"), "permeant: name the permeant liquid")
    if "reference_temperature_c" in fields:
        columns["reference_temperature_c"] = fields["reference_temperature_c"]
    correction = columns.get("temperature_correction", test.temperature_correction)
    reference = columns.get("reference_temperature_c", test.reference_temperature_c)
    if correction == "astm_d5084" and reference != 20.0:
        raise _invalid(
            ("body", "temperature_correction"),
            f"temperature_correction: 'astm_d5084' corrects to 20 °C only (reference "
            f"{reference:g} °C); accepted: 'iapws' for 10 or 27 °C",
        )
    if "target_dry_density" in fields:
        raw = fields["target_dry_density"]
        text, value = (
            parse_typed(raw, units.DENSITY, ("target_dry_density",), positive=True)
            if raw
            else ("", None)
        )
        columns["target_dry_density_text"] = text
        columns["target_dry_density_kg_per_m3"] = value
    if "spec_k_max" in fields:
        raw = fields["spec_k_max"]
        if raw:
            text, value = parse_typed(raw, units.CONDUCTIVITY, ("spec_k_max",), positive=True)
            columns["spec_k_max_text"], columns["spec_k_max_m_per_s"] = text, value
        else:  # no override: the project's limit applies
            columns.update(_project_limit(session, test))
    for name in PRESSURES:
        if name in fields:
            raw = fields[name]
            text, value = parse_typed(raw, units.PRESSURE, (name,)) if raw else ("", None)
            columns[f"{name}_text"] = text
            columns[f"{name}_kpa"] = value / 1000.0 if value is not None else None
    if fields.get("technician_id") is not None:
        _check_technician(session, fields["technician_id"])
    if "technician_id" in fields:
        columns["technician_id"] = fields["technician_id"]
    return columns


def request_test(
    session: Session, sample_id: int, data: TestCreate, *, actor: User
) -> PermeabilityTest:
    """Request a permeability test on a sample; the project's specification limit applies
    unless overridden; the due date is the sample's."""
    _require_planner(actor, "requesting a test")
    sample = get_visible(session, Sample, sample_id, actor, "sample")
    if sample.disposed_at is not None:
        raise Conflict(f"sample {sample.lab_id} was disposed of; no test can be requested on it")
    series = session.exec(
        select(func.max(PermeabilityTest.series)).where(PermeabilityTest.sample_id == sample_id)
    ).one()
    test = PermeabilityTest(
        sample_id=sample_id,
        series=(series or 0) + 1,
        method=data.method,
        due_date=sample.due_date,
        requested_by_id=actor.id,
    )
    fields = data.model_dump(exclude={"apparatus_ids"})
    fields["spec_k_max"] = data.spec_k_max  # None: inherit from the project
    if fields.get("permeant") is None:
        fields.pop("permeant")
    for name, value in _test_columns(session, test, fields).items():
        setattr(test, name, value)
    session.add(test)
    session.flush()
    record_created(session, test, actor_id=actor.id)
    if data.apparatus_ids:
        _set_apparatus(session, test, data.apparatus_ids, actor=actor)
    return test


def update_test(
    session: Session, test_id: int, data: TestUpdate, *, actor: User
) -> PermeabilityTest:
    """Change a test's request, conditions, technician or apparatus (planned or running)."""
    test = get_test(session, test_id, actor=actor, lock=True)
    fields = data.model_dump(exclude_unset=True, exclude={"version"})
    if "technician_id" in fields or "method" in fields:
        _require_planner(actor, "assigning a technician or changing the method")
    elif not _is_planner(actor):
        _require_writer(test, actor)
    _require_editable(test)
    _check_version(test, data.version, "test", fields)
    assert test.id is not None
    if "method" in fields and fields["method"] != test.method and trials_of(session, test.id):
        raise Conflict(
            f"method: test {test.id} has trials recorded as {test.method}; the method cannot "
            "change now (exclude them, or request another test)"
        )
    apparatus_ids = fields.pop("apparatus_ids", None)
    columns = _test_columns(session, test, fields)
    changed = apply_changes(session, test, columns, actor_id=actor.id)
    if apparatus_ids is not None and _set_apparatus(session, test, apparatus_ids, actor=actor):
        if not changed:
            test.version += 1
        session.add(test)
        session.flush()
    return test


def _start(session: Session, test: PermeabilityTest, *, actor: User) -> None:
    if test.state == TestState.PLANNED:
        apply_changes(
            session,
            test,
            {"state": TestState.RUNNING, "started_at": utcnow()},
            actor_id=actor.id,
        )


def start_test(session: Session, test_id: int, *, actor: User) -> PermeabilityTest:
    """Planned → running (also happens on the first specimen, saturation or trial write)."""
    test = get_test(session, test_id, actor=actor, lock=True)
    _require_writer(test, actor)
    _require_state(test, {TestState.PLANNED}, "start")
    _start(session, test, actor=actor)
    return test


# --- reduction ----------------------------------------------------------------------------------


def default_uncertainties(apparatus: Sequence[Apparatus]) -> dict[str, str]:
    """Standard uncertainties for entries typed without a `u`, from the assigned items.

    A reading limited by an instrument's resolution r is taken as rectangularly distributed
    over ±r/2, so u = r/√12 (GUM, JCGM 100:2008, §4.3.7). Where two items of one kind are
    assigned, the coarser resolution is used."""
    out: dict[str, str] = {}
    for kind, (names, unit) in RESOLUTION_FIELDS.items():
        resolutions = [
            a.resolution_si for a in apparatus if a.kind == kind and a.resolution_si is not None
        ]
        if not resolutions:
            continue
        u = standard_uncertainty_from_resolution(max(resolutions))
        for name in names:
            out[name] = f"{u:.6g} {unit}"
    return out


def _permeameter(apparatus: Sequence[Apparatus]) -> Apparatus | None:
    return next((a for a in apparatus if a.kind in PERMEAMETERS), None)


def _request_hash(request: dict[str, Any], defaults: dict[str, Any]) -> str:
    """The hash of what determines the result: the request, plus the default uncertainties
    under their own key when any applied."""
    if not defaults:
        return input_hash(request)
    return input_hash({**request, "default_uncertainties": defaults})


@dataclass
class _Inputs:
    request: dict[str, Any]
    defaults: dict[str, str]
    included: list[Trial]


def _inputs(
    session: Session,
    test: PermeabilityTest,
    *,
    specimen: Specimen | None = None,
    trials: Sequence[Trial] | None = None,
    defaults: dict[str, str] | None = None,
) -> _Inputs:
    assert test.id is not None
    apparatus = apparatus_of(session, test.id)
    trial_rows = list(trials) if trials is not None else trials_of(session, test.id)
    if specimen is None:
        specimen = specimen_of(session, test.id)
    request = build_request(
        test,
        specimen=specimen,
        trials=trial_rows,
        saturation=saturation_of(session, test.id),
        permeameter=_permeameter(apparatus),
    )
    included = [t for t in sorted(trial_rows, key=lambda t: t.seq) if not t.excluded]
    return _Inputs(
        request,
        default_uncertainties(apparatus) if defaults is None else defaults,
        included,
    )


def _run(inputs: _Inputs) -> tuple[dict[str, Any] | None, EngineInputError | None]:
    try:
        return result_to_dict(reduce(parse_request(inputs.request, inputs.defaults))), None
    except EngineInputError as exc:
        return None, exc


def _split(
    exc: EngineInputError | None, section: Loc, into: Loc
) -> tuple[list[dict[str, Any]], list[dict[str, Any]]]:
    """The engine's refusals in `section` (renamed under `into`), and all the others."""
    if exc is None:
        return [], []
    own: list[dict[str, Any]] = []
    others: list[dict[str, Any]] = []
    for problem in _problems(exc):
        loc = tuple(problem["loc"])
        if loc[: len(section)] == section:
            own.append({**problem, "loc": [*into, *loc[len(section) :]]})
        elif loc == ("trials",) and section[:1] == ("trials",):
            own.append({**problem, "loc": list(into)})
        else:
            others.append(problem)
    return own, others


def _live(
    result: dict[str, Any] | None, pending: list[dict[str, Any]], included: Sequence[Trial]
) -> LiveReduction:
    if result is None:
        return LiveReduction(
            engine_version=ENGINE_VERSION,
            trials=[],
            result=None,
            checks=[],
            pending=[ProblemRead.model_validate(p) for p in pending],
        )
    outputs = [
        {**output, "trial_id": trial.id, "seq": trial.seq}
        for trial, output in zip(included, result["trials"], strict=True)
    ]
    return LiveReduction.model_validate(
        {
            "engine_version": result["engine_version"],
            "trials": outputs,
            "result": result["result"],
            "checks": [CheckRead.model_validate(c) for c in result["checks"]],
            "pending": [],
        }
    )


def live_reduction(session: Session, test_id: int, *, actor: User) -> LiveReduction:
    """The test's reduction from what is recorded now (nothing stored); `pending` lists what
    the engine still needs or refuses."""
    test = get_test(session, test_id, actor=actor)
    inputs = _inputs(session, test)
    result, exc = _run(inputs)
    return _live(result, _problems(exc) if exc else [], inputs.included)


# --- specimen and saturation ----------------------------------------------------------------------


def _specimen_columns(fields: dict[str, Any]) -> dict[str, Any]:
    columns: dict[str, Any] = {}
    for name, value in fields.items():
        if name in SPECIMEN_QUANTITIES:
            kind, si_column, text_column, positive = SPECIMEN_QUANTITIES[name]
            if value is None or value == "":
                columns[si_column], columns[text_column] = None, ""
                continue
            text, number = parse_typed(value, kind, (name,), positive=positive)
            if name == "water_content" and not 0.0 <= number <= 10.0:
                raise _invalid(
                    ("body", name),
                    f"water_content: got '{text}'; accepted: from 0 to 1000 %, such as '22.4 %'",
                )
            columns[si_column], columns[text_column] = number, text
        elif name == "retained_on_lower_sieve":
            if value is None or value == "":
                columns["retained_on_lower_sieve_pct"] = None
                continue
            text, number = parse_typed(value, units.FRACTION, (name,))
            if not 0.0 <= number <= 1.0:
                raise _invalid(
                    ("body", name),
                    f"retained_on_lower_sieve: got '{text}'; accepted: 0 to 100 %, such as '40 %'",
                )
            columns["retained_on_lower_sieve_pct"] = number * 100.0
        elif name == "stiff_material":
            columns[name] = bool(value)
        elif name in ("preparation", "description"):
            if value is not None:
                columns[name] = value
        elif name == "specific_gravity":
            columns[name] = value
    return columns


def write_specimen(session: Session, test_id: int, data: SpecimenWrite, *, actor: User) -> Specimen:
    """Record the specimen, or change the fields sent (its `version` required once it
    exists). A specimen the engine refuses (say, masses that leave no voids) is not stored."""
    test = get_test(session, test_id, actor=actor, lock=True)
    _require_writer(test, actor)
    _require_editable(test)
    assert test.id is not None
    fields = data.model_dump(exclude_unset=True, exclude={"version"})
    specimen = specimen_of(session, test.id)
    if specimen is not None:
        _check_version(specimen, data.version, "specimen", fields)
    columns = _specimen_columns(fields)
    base = specimen.model_dump(exclude={"id"}) if specimen else {"test_id": test.id}
    candidate = Specimen(**{**base, **columns})
    _, exc = _run(_inputs(session, test, specimen=candidate))
    own, _ = _split(exc, ("specimen",), ("body",))
    # A field not recorded yet is pending, not a refusal of what was sent.
    own = [p for p in own if p["type"] != "missing"]
    if own:
        raise _refused(own)
    _start(session, test, actor=actor)
    if specimen is None:
        candidate.recorded_by_id = actor.id
        session.add(candidate)
        session.flush()
        record_created(session, candidate, actor_id=actor.id)
        return candidate
    columns["recorded_by_id"] = actor.id
    if apply_changes(session, specimen, columns, actor_id=actor.id):
        specimen.updated_at = utcnow()
        session.add(specimen)
        session.flush()
    return specimen


def add_saturation_step(
    session: Session, test_id: int, data: SaturationStepCreate, *, actor: User
) -> SaturationStep:
    """Append a back-pressure step and the B-value measured after it."""
    test = get_test(session, test_id, actor=actor, lock=True)
    _require_writer(test, actor)
    _require_editable(test)
    assert test.id is not None
    text, pascals = parse_typed(data.back_pressure, units.PRESSURE, ("back_pressure",))
    if pascals < 0:
        raise _invalid(
            ("body", "back_pressure"),
            f"back_pressure: got '{text}'; accepted: a pressure of zero or more, such as '345 kPa'",
        )
    steps = saturation_of(session, test.id)
    step = SaturationStep(
        test_id=test.id,
        seq=(steps[-1].seq if steps else 0) + 1,
        back_pressure_kpa=pascals / 1000.0,
        back_pressure_text=text,
        b_value=data.b_value,
    )
    _start(session, test, actor=actor)
    session.add(step)
    session.flush()
    record_created(session, step, actor_id=actor.id)
    return step


# --- trials -------------------------------------------------------------------------------------


def _trial_columns(entries: dict[str, Any]) -> dict[str, Any]:
    """SI columns of a trial the engine has accepted (so these parse)."""
    columns: dict[str, Any] = {}
    for name, (kind, column, positive) in TRIAL_COLUMNS.items():
        raw = entries.get(name)
        columns[column] = (
            units.parse_quantity(raw, kind, (name,), positive=positive)[0]
            if raw is not None
            else None
        )
    return columns


def _reading_rows(entries: dict[str, Any]) -> list[tuple[float, str, float, str]]:
    rows = []
    for index, reading in enumerate(entries.get("readings") or []):
        time_s = units.parse_quantity(reading["time"], units.TIME, ("time",), positive=False)[0]
        head_m = units.parse_quantity(reading["head"], units.LENGTH, ("head",))[0]
        if time_s < 0:
            raise _invalid(
                ("body", "readings", index, "time"),
                f"readings[{index}].time: got '{_typed_text(reading['time'])}'; accepted: a "
                "time from the start of the run, zero or later, such as '0 s' or '10 min'",
            )
        rows.append((time_s, _typed_text(reading["time"]), head_m, _typed_text(reading["head"])))
    return rows


def _store_readings(
    session: Session, trial: Trial, rows: list[tuple[float, str, float, str]]
) -> list[Reading]:
    assert trial.id is not None
    session.exec(delete(Reading).where(col(Reading.trial_id) == trial.id))
    # Readings are derived rows of `trial.entries`, whose changes are audited.
    readings = [
        Reading(
            trial_id=trial.id, seq=seq, time_s=time_s, time_text=t_text, head_m=h, head_text=h_text
        )
        for seq, (time_s, t_text, h, h_text) in enumerate(rows, start=1)
    ]
    session.add_all(readings)
    session.flush()
    return readings


def _check_trial(
    session: Session, test: PermeabilityTest, trial: Trial, others: Sequence[Trial]
) -> tuple[dict[str, Any] | None, list[dict[str, Any]], list[Trial]]:
    """Run the test's reduction with `trial` in it; refuse (422, loc under "body") what the
    engine refuses in that trial. Returns the result, what is still pending, and the
    included trials in the engine's order."""
    inputs = _inputs(session, test, trials=[*others, trial])
    result, exc = _run(inputs)
    if not trial.excluded:
        index = next(i for i, t in enumerate(inputs.included) if t is trial)
        own, pending = _split(exc, ("trials", index), ("body",))
        if own:
            raise _refused(own)
    else:
        pending = _problems(exc) if exc else []
    return result, pending, inputs.included


def record_trial(
    session: Session,
    test_id: int,
    data: TrialCreate,
    *,
    idempotency_key: str | None,
    actor: User,
) -> tuple[int, dict[str, Any]]:
    """Store one trial exactly as typed and answer (status, body) with the live reduction.

    A retry with the same `idempotency_key` and body gets the first answer again and stores
    nothing; the same key with another body is a 409. A trial the engine refuses is a 422
    naming the field, and nothing is stored."""
    key = idempotency.check_key(idempotency_key)
    test = get_test(session, test_id, actor=actor, lock=True)
    assert test.id is not None
    assert actor.id is not None
    entries = data.model_dump(mode="json", exclude_unset=True, exclude_none=True)
    scope = f"trial:{test.id}"
    request_hash = idempotency.fingerprint(entries)
    replay = idempotency.find_replay(
        session, scope=scope, key=key, user_id=actor.id, request_hash=request_hash
    )
    if replay is not None:
        return replay.status_code, replay.response
    _require_writer(test, actor)
    _require_editable(test)
    others = trials_of(session, test.id)
    if any(t.idempotency_key == key for t in others):
        raise Conflict(
            f"{idempotency.HEADER} {key!r} already belongs to a trial of test {test.id}; "
            "send a new key for a new trial",
            detail={"idempotency_key": key},
        )
    trial = Trial(
        test_id=test.id,
        seq=(others[-1].seq if others else 0) + 1,
        idempotency_key=key,
        entries=entries,
        recorded_by_id=actor.id,
    )
    result, pending, included = _check_trial(session, test, trial, others)
    rows = _reading_rows(entries)
    for name, value in _trial_columns(entries).items():
        setattr(trial, name, value)
    _start(session, test, actor=actor)
    session.add(trial)
    session.flush()
    record_created(session, trial, actor_id=actor.id)
    readings = _store_readings(session, trial, rows)
    body = TrialWritten(
        trial=trial_read(trial, readings),
        test_state=test.state,
        test_version=test.version,
        reduction=_live(result, pending, included),
    ).model_dump(mode="json")
    idempotency.remember(
        session,
        scope=scope,
        key=key,
        user_id=actor.id,
        request_hash=request_hash,
        status_code=201,
        response=body,
    )
    return 201, body


def _get_trial(session: Session, test: PermeabilityTest, trial_id: int) -> Trial:
    trial = session.get(Trial, trial_id)
    if trial is None or trial.test_id != test.id:
        raise NotFound(f"trial {trial_id} of test {test.id} not found")
    return trial


def _written(
    session: Session,
    test: PermeabilityTest,
    trial: Trial,
    result: dict[str, Any] | None,
    pending: list[dict[str, Any]],
    included: Sequence[Trial],
) -> TrialWritten:
    assert trial.id is not None
    return TrialWritten(
        trial=trial_read(trial, readings_of(session, [trial.id])[trial.id]),
        test_state=test.state,
        test_version=test.version,
        reduction=_live(result, pending, included),
    )


def update_trial(
    session: Session, test_id: int, trial_id: int, data: TrialUpdate, *, actor: User
) -> TrialWritten:
    """Change a trial's entries (fields sent replace theirs; null removes one)."""
    test = get_test(session, test_id, actor=actor, lock=True)
    _require_writer(test, actor)
    _require_editable(test)
    assert test.id is not None
    trial = _get_trial(session, test, trial_id)
    sent = data.model_dump(mode="json", exclude_unset=True, exclude={"version"})
    _check_version(trial, data.version, "trial", {"entries": sent})
    entries = dict(trial.entries)
    for name, value in sent.items():
        if value is None:
            entries.pop(name, None)
        else:
            entries[name] = value
    candidate = Trial(**{**trial.model_dump(), "entries": entries})
    others = [t for t in trials_of(session, test.id) if t.id != trial.id]
    result, pending, included = _check_trial(session, test, candidate, others)
    rows = _reading_rows(entries)
    changes = {"entries": entries, **_trial_columns(entries)}
    apply_changes(session, trial, changes, actor_id=actor.id)
    _store_readings(session, trial, rows)
    included = [trial if t is candidate else t for t in included]
    return _written(session, test, trial, result, pending, included)


def exclude_trial(
    session: Session,
    test_id: int,
    trial_id: int,
    data: TrialExclusion,
    *,
    actor: User,
    excluded: bool = True,
) -> TrialWritten:
    """Leave a trial out of the reduction (reason required), or take it back in."""
    test = get_test(session, test_id, actor=actor, lock=True)
    _require_writer(test, actor)
    _require_editable(test)
    assert test.id is not None
    trial = _get_trial(session, test, trial_id)
    reason = data.reason.strip()
    if excluded and not reason:
        raise _invalid(("body", "reason"), "reason: say why the trial is left out")
    _check_version(trial, data.version, "trial", {"excluded": excluded, "reason": reason})
    candidate = Trial(**{**trial.model_dump(), "excluded": excluded})
    others = [t for t in trials_of(session, test.id) if t.id != trial.id]
    result, pending, included = _check_trial(session, test, candidate, others)
    apply_changes(
        session,
        trial,
        {"excluded": excluded, "exclusion_reason": reason if excluded else ""},
        actor_id=actor.id,
    )
    included = [trial if t is candidate else t for t in included]
    return _written(session, test, trial, result, pending, included)


# --- submission and review ----------------------------------------------------------------------


def _require_submitter(test: PermeabilityTest, actor: User) -> None:
    if actor.role == Role.LAB_MANAGER:
        return
    if actor.role == Role.TECHNICIAN and test.technician_id == actor.id:
        return
    raise PermissionDenied(
        f"test {test.id} is submitted by its assigned technician or a lab manager"
    )


def _require_reviewer(actor: User, action: str) -> None:
    if actor.role not in REVIEWERS:
        raise PermissionDenied(f"{action} needs a reviewer or a lab manager")


def _calibration_check(session: Session, test: PermeabilityTest) -> None:
    assert test.id is not None
    ids = [a.id for a in apparatus_of(session, test.id) if a.id is not None]
    problems = calibration_problems(session, ids, on=utcnow().date())
    if problems:
        raise Conflict(
            "apparatus not fit for use: " + "; ".join(p.message for p in problems),
            detail={"apparatus": [p.as_dict() for p in problems]},
        )


def submit_test(
    session: Session, test_id: int, data: SignOffRequest, *, actor: User
) -> PermeabilityTest:
    """Running → submitted with the technician's sign-off (password re-entered).

    Refused while any assigned apparatus is past its calibration due date. Runs the engine on
    the stored entries and stores its result, version, the input hash and per-trial figures;
    the 'performed' sign-off carries the hash of exactly that."""
    test = get_test(session, test_id, actor=actor, lock=True)
    _require_submitter(test, actor)
    _require_state(test, {TestState.RUNNING}, "submit")
    _check_version(test, data.version, "test", {}, required=False)
    signoffs.confirm_password(session, actor, data.password)
    _calibration_check(session, test)
    inputs = _inputs(session, test)
    result, exc = _run(inputs)
    if exc is not None or result is None:
        assert exc is not None
        raise _refused(_problems(exc))
    outputs = dict(zip([t.id for t in inputs.included], result["trials"], strict=True))
    for trial in trials_of(session, test.id or 0):
        output = outputs.get(trial.id, {})  # excluded trials carry no figures
        apply_changes(
            session,
            trial,
            {
                "k_m_per_s": output.get("k_m_per_s"),
                "k_ref_m_per_s": output.get("k_ref_m_per_s"),
                "gradient": output.get("gradient"),
            },
            actor_id=actor.id,
        )
    apply_changes(
        session,
        test,
        {
            "state": TestState.SUBMITTED,
            "submitted_at": utcnow(),
            "result": result,
            "result_k_ref_m_per_s": result["result"]["k_ref_m_per_s"],
            "engine_version": result["engine_version"],
            "input_hash": _request_hash(inputs.request, inputs.defaults),
            "default_uncertainties": inputs.defaults,
        },
        actor_id=actor.id,
    )
    signoffs.record_sign_off(
        session, test, actor=actor, meaning=SignOffMeaning.PERFORMED, note=data.note
    )
    return test


def _entries_unchanged(session: Session, test: PermeabilityTest) -> bool:
    inputs = _inputs(session, test, defaults=test.default_uncertainties)
    return _request_hash(inputs.request, inputs.defaults) == test.input_hash


def approve_test(
    session: Session, test_id: int, data: SignOffRequest, *, actor: User
) -> PermeabilityTest:
    """Submitted → approved with a reviewer's sign-off (password re-entered). Nobody approves
    a test they performed. Approving a correction marks the revision it replaces superseded."""
    _require_reviewer(actor, "approving a test")
    test = get_test(session, test_id, actor=actor, lock=True)
    _require_state(test, {TestState.SUBMITTED}, "approve")
    _check_version(test, data.version, "test", {}, required=False)
    if actor.id in signoffs.performer_ids(session, test):
        raise PermissionDenied(
            f"you performed test {test.id}; another reviewer or lab manager must approve it"
        )
    signoffs.confirm_password(session, actor, data.password)
    if not _entries_unchanged(session, test):
        raise Conflict(
            f"test {test.id}: its inputs (entries, or the permeameter's geometry) no longer "
            "match what was submitted; send it back so it is submitted again"
        )
    apply_changes(
        session,
        test,
        {"state": TestState.APPROVED, "approved_at": utcnow(), "reviewer_id": actor.id},
        actor_id=actor.id,
    )
    signoffs.record_sign_off(
        session, test, actor=actor, meaning=SignOffMeaning.APPROVED, note=data.note
    )
    if test.supersedes_id is not None:
        old = session.get(PermeabilityTest, test.supersedes_id)
        if old is not None and old.state != TestState.SUPERSEDED:
            apply_changes(
                session,
                old,
                {"state": TestState.SUPERSEDED, "superseded_by_id": test.id},
                actor_id=actor.id,
            )
    return test


def send_back(
    session: Session, test_id: int, data: SendBackRequest, *, actor: User
) -> PermeabilityTest:
    """Submitted → running with the reviewer's reason (required). The last submitted result
    stays on the record until the next submission replaces it."""
    _require_reviewer(actor, "sending a test back")
    reason = data.reason.strip()
    if not reason:
        raise _invalid(
            ("body", "reason"), "reason: say what must change before the test is resubmitted"
        )
    test = get_test(session, test_id, actor=actor, lock=True)
    _require_state(test, {TestState.SUBMITTED}, "send back")
    _check_version(test, data.version, "test", {"reason": reason}, required=False)
    apply_changes(
        session,
        test,
        {"state": TestState.RUNNING, "sent_back_reason": reason},
        actor_id=actor.id,
    )
    return test


def mark_issued(session: Session, test_id: int, *, actor: User) -> PermeabilityTest:
    """Approved → issued (for the certificate workflow, once a certificate reports it)."""
    _require_reviewer(actor, "issuing a test")
    test = get_test(session, test_id, actor=actor, lock=True)
    _require_state(test, {TestState.APPROVED}, "issue")
    if test.superseded_by_id is not None:
        raise InvalidTransition(
            f"test {test.id} has a correction in progress (test {test.superseded_by_id}); "
            "issue that revision once it is approved",
            detail={"state": test.state, "superseded_by_id": test.superseded_by_id},
        )
    apply_changes(
        session, test, {"state": TestState.ISSUED, "issued_at": utcnow()}, actor_id=actor.id
    )
    return test


_COPIED_TEST_FIELDS = (
    "sample_id",
    "series",
    "method",
    "standard",
    "technician_id",
    "permeant",
    "reference_temperature_c",
    "temperature_correction",
    "target_dry_density_kg_per_m3",
    "target_dry_density_text",
    "spec_k_max_m_per_s",
    "spec_k_max_text",
    "cell_pressure_kpa",
    "cell_pressure_text",
    "back_pressure_kpa",
    "back_pressure_text",
    "effective_confining_kpa",
    "effective_confining_text",
    "options",
    "due_date",
)


def request_correction(
    session: Session, test_id: int, data: CorrectionRequest, *, actor: User
) -> PermeabilityTest:
    """Correct an approved or issued test: a new revision (same series, revision + 1) with
    the reason, copying specimen, conditions, apparatus, saturation and trials. The old test
    points to it now and becomes superseded when the new revision is approved."""
    _require_reviewer(actor, "ordering a correction")
    reason = data.reason.strip()
    if not reason:
        raise _invalid(("body", "reason"), "reason: say what the correction is for")
    old = get_test(session, test_id, actor=actor, lock=True)
    assert old.id is not None
    _require_state(old, {TestState.APPROVED, TestState.ISSUED}, "correct")
    if old.superseded_by_id is not None:
        raise Conflict(
            f"test {old.id} already has a correction: test {old.superseded_by_id}",
            detail={"superseded_by_id": old.superseded_by_id},
        )
    last = session.exec(
        select(func.max(PermeabilityTest.revision)).where(
            PermeabilityTest.sample_id == old.sample_id, PermeabilityTest.series == old.series
        )
    ).one()
    now = utcnow()
    new = PermeabilityTest(
        **{name: getattr(old, name) for name in _COPIED_TEST_FIELDS},
        revision=(last or old.revision) + 1,
        supersedes_id=old.id,
        correction_reason=reason,
        state=TestState.RUNNING,
        requested_by_id=actor.id,
        requested_at=now,
        started_at=now,
    )
    session.add(new)
    session.flush()
    assert new.id is not None
    record_created(session, new, actor_id=actor.id)
    for item in apparatus_of(session, old.id):
        session.add(TestApparatus(test_id=new.id, apparatus_id=item.id or 0))
    specimen = specimen_of(session, old.id)
    rows: list[Any] = []
    if specimen is not None:
        rows.append(
            Specimen(
                **specimen.model_dump(exclude={"id", "test_id", "version", "updated_at"}),
                test_id=new.id,
            )
        )
    rows += [
        SaturationStep(**s.model_dump(exclude={"id", "test_id"}), test_id=new.id)
        for s in saturation_of(session, old.id)
    ]
    old_trials = trials_of(session, old.id)
    readings = readings_of(session, [t.id for t in old_trials if t.id is not None])
    copies = [
        Trial(
            **t.model_dump(
                exclude={"id", "test_id", "version", "k_m_per_s", "k_ref_m_per_s", "gradient"}
            ),
            test_id=new.id,
        )
        for t in old_trials
    ]
    session.add_all(rows + copies)
    session.flush()
    for row in rows + copies:
        record_created(session, row, actor_id=actor.id)
    for source, copy in zip(old_trials, copies, strict=True):
        assert copy.id is not None
        session.add_all(
            Reading(**r.model_dump(exclude={"id", "trial_id"}), trial_id=copy.id)
            for r in readings.get(source.id or 0, [])
        )
    apply_changes(session, old, {"superseded_by_id": new.id}, actor_id=actor.id)
    return new


# --- recomputation ------------------------------------------------------------------------------


def _differences(stored: Any, fresh: Any, path: str = "") -> list[str]:
    if isinstance(stored, dict) and isinstance(fresh, dict):
        out: list[str] = []
        for key in sorted(set(stored) | set(fresh)):
            if key == "engine_version" and not path:
                continue
            where = f"{path}.{key}" if path else str(key)
            if key not in stored or key not in fresh:
                out.append(where)
            else:
                out += _differences(stored[key], fresh[key], where)
        return out
    if isinstance(stored, list) and isinstance(fresh, list):
        if len(stored) != len(fresh):
            return [path]
        out = []
        for index, (a, b) in enumerate(zip(stored, fresh, strict=True)):
            out += _differences(a, b, f"{path}[{index}]")
        return out
    numbers = (int, float)
    if (
        isinstance(stored, numbers)
        and isinstance(fresh, numbers)
        and not isinstance(stored, bool)
        and not isinstance(fresh, bool)
    ):
        return [] if math.isclose(stored, fresh, rel_tol=1e-12, abs_tol=0.0) else [path]
    return [] if stored == fresh else [path]


def recompute(session: Session, test_id: int, *, actor: User) -> RecomputeRead:
    """Reduce the stored entries again with the current engine and compare with the stored
    result (figures to 1e-12 relative; the engine version itself is reported, not compared)."""
    test = get_test(session, test_id, actor=actor)
    if test.result is None:
        raise _wrong_state(test, "recompute the stored result of")
    inputs = _inputs(session, test, defaults=test.default_uncertainties)
    fresh_hash = _request_hash(inputs.request, inputs.defaults)
    fresh, exc = _run(inputs)
    if fresh is None:
        assert exc is not None
        differences = [f"the current engine refuses the entries: {exc}"]
        fresh_k = None
    else:
        differences = _differences(test.result, fresh)[:50]
        fresh_k = fresh["result"]["k_ref_m_per_s"]
    result_matches = fresh is not None and not differences
    input_matches = fresh_hash == test.input_hash
    return RecomputeRead(
        test_id=test.id or 0,
        matches=result_matches and input_matches,
        result_matches=result_matches,
        input_matches=input_matches,
        stored_engine_version=test.engine_version,
        current_engine_version=ENGINE_VERSION,
        stored_input_hash=test.input_hash,
        recomputed_input_hash=fresh_hash,
        stored_k_ref_m_per_s=test.result_k_ref_m_per_s,
        recomputed_k_ref_m_per_s=fresh_k,
        differences=differences,
    )
