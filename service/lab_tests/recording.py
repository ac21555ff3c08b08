"""Recording at the permeameter: the specimen, saturation steps and trials, each kept exactly
as typed beside the SI figures the engine read from it, and the live reduction they give.

Each save reduces the test once, through the door (service/lab_tests/reduction/), with
the change in it: what the engine refuses in the change is a 422 naming the field and
nothing is stored; what is still missing elsewhere is reported as pending. The SI columns
are the engine's own reading of the typed text (units are parsed once).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from sqlmodel import Session, col, delete

from service.accounts.models import User
from service.audit.service import apply_changes, record_created
from service.db import utcnow
from service.errors import (
    Conflict,
    FieldProblem,
    InvalidInput,
    NotFound,
    capped,
    invalid,
    require_version,
)
from service.idempotency import service as idempotency
from service.lab_tests import reduction
from service.lab_tests.lifecycle import start
from service.lab_tests.models import PermeabilityTest, Reading, SaturationStep, Specimen, Trial
from service.lab_tests.permissions import Action, require
from service.lab_tests.preview import inputs_of, stamp_of
from service.lab_tests.reading import (
    get_test,
    readings_of,
    saturation_of,
    specimen_of,
    trial_with_key,
    trials_of,
)
from service.lab_tests.reading import trial_read as read_trial
from service.lab_tests.reduction import Reduction
from service.lab_tests.schemas import (
    LiveReduction,
    ProblemRead,
    SaturationStepCreate,
    SpecimenWrite,
    TrialCreate,
    TrialExclusion,
    TrialUpdate,
    TrialWritten,
)
from service.quantities import PRESSURE, typed

# Specimen entries typed with a unit: entry -> (SI column, text column).
SPECIMEN_COLUMNS: dict[str, tuple[str, str]] = {
    "diameter": ("diameter_m", "diameter_text"),
    "length": ("length_m", "length_text"),
    "wet_mass": ("wet_mass_kg", "wet_mass_text"),
    "water_content": ("water_content", "water_content_text"),
    "max_dry_density": ("max_dry_density_kg_per_m3", "max_dry_density_text"),
    "d10": ("d10_m", "d10_text"),
    "max_particle_size": ("max_particle_size_m", "max_particle_size_text"),
    "final_diameter": ("final_diameter_m", "final_diameter_text"),
    "final_length": ("final_length_m", "final_length_text"),
}
# Trial entries copied to SI columns (the rest stay in `entries` only); the column is the
# catalogue entry's engine field.
TRIAL_COLUMNS = (
    "duration_s",
    "temperature_c",
    "volume_m3",
    "head_difference_m",
    "head_initial_m",
    "head_final_m",
)


def problem_read(problem: FieldProblem) -> ProblemRead:
    """A refusal as the live reduction lists it (path, words, value, what is accepted)."""
    return ProblemRead(
        loc=list(problem.loc),
        field=".".join(str(p) for p in problem.loc),
        label=problem.name,
        msg=problem.msg,
        type=problem.kind,
        value=capped(problem.value),
        accepted=problem.accepted,
    )


def live(
    reduced: Reduction, pending: Sequence[FieldProblem], saved_as: int | None = None
) -> LiveReduction:
    """The reduction as the API shows it; `pending` names what is still missing or refused;
    the trial reduced unsaved ("new") is shown as `saved_as` once stored."""
    if reduced.result is None:
        return LiveReduction(
            engine_version=reduction.ENGINE_VERSION,
            trials=[],
            result=None,
            checks=[],
            pending=[problem_read(p) for p in pending],
        )
    outputs = [
        {**output, "trial_id": key if isinstance(key, int) else saved_as or 0, "seq": number}
        for key, number, output in zip(
            reduced.keys, reduced.numbers, reduced.result["trials"], strict=True
        )
    ]
    return LiveReduction.model_validate(
        {
            "engine_version": reduced.result["engine_version"],
            "trials": outputs,
            "result": reduced.result["result"],
            "checks": reduced.result["checks"],
            "pending": [],
        }
    )


def live_reduction(session: Session, test_id: int, *, actor: User) -> LiveReduction:
    """The test's reduction from what is recorded now (nothing stored); `pending` lists what
    the engine still needs or refuses."""
    test = get_test(session, test_id, actor=actor)
    reduced = reduction.reduce_stored(session, test)
    return live(reduced, reduced.problems)


# --- specimen and saturation ----------------------------------------------------------------------


def _specimen_columns(fields: dict[str, Any], reduced: Reduction) -> dict[str, Any]:
    """The columns of the fields sent: typed text and the SI figure the engine read."""
    columns: dict[str, Any] = {}
    for name, value in fields.items():
        if name in SPECIMEN_COLUMNS:
            si_column, text_column = SPECIMEN_COLUMNS[name]
            text = (value or "").strip()
            columns[text_column] = text
            columns[si_column] = reduced.si("specimen", name) if text else None
            if text and columns[si_column] is None:
                raise invalid((name,), "could not be read", value=text)
        elif name == "retained_on_lower_sieve":
            share = reduced.si("specimen", name) if value else None
            columns["retained_on_lower_sieve_pct"] = share * 100.0 if share is not None else None
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
    require(test, actor, Action.RECORD)
    assert test.id is not None
    fields = data.model_dump(exclude_unset=True, exclude={"version"})
    specimen = specimen_of(session, test.id)
    if specimen is not None:
        require_version(specimen, data.version, "specimen", yours=fields)
    reduced = reduction.reduce_stored(session, test, specimen_changes=fields)
    # A field not recorded yet is pending, not a refusal of what was sent.
    own = [p for p in reduced.section_problems("specimen") if p.kind != "missing"]
    if own:
        raise InvalidInput(problems=own)
    columns = _specimen_columns(fields, reduced)
    start(session, test, actor=actor)
    if specimen is None:
        created = Specimen(test_id=test.id, recorded_by_id=actor.id, **columns)
        session.add(created)
        session.flush()
        record_created(session, created, actor_id=actor.id)
        return created
    columns["recorded_by_id"] = actor.id
    if apply_changes(session, specimen, columns, actor_id=actor.id):
        specimen.updated_at = utcnow()
        session.add(specimen)
        session.flush()
    return specimen


def require_based_on(
    test: PermeabilityTest, based_on_version: int | None, yours: dict[str, Any]
) -> None:
    """An entry kept on a tablet while it was offline names the test version it was typed
    against; if the test changed since (sent back, approved, edited elsewhere) it is refused
    with 409 and both versions, so nothing lands on a test the technician has not seen.
    Entries sent without one (the API, a plain form post) are not checked."""
    require_version(test, based_on_version, "test", yours=yours, required=False)


def add_saturation_step(
    session: Session,
    test_id: int,
    data: SaturationStepCreate,
    *,
    actor: User,
    idempotency_key: str | None = None,
    based_on_version: int | None = None,
) -> SaturationStep:
    """Append a back-pressure step and the B-value measured after it.

    With an `idempotency_key`, a retry with the same key and body finds the step the first
    request stored and stores nothing; the same key with another body is a 409."""
    test = get_test(session, test_id, actor=actor, lock=True)
    assert test.id is not None
    assert actor.id is not None
    scope = f"saturation:{test.id}"
    sent = data.model_dump(mode="json")
    request_hash = idempotency.fingerprint(sent)
    if idempotency_key is not None:
        key = idempotency.check_key(idempotency_key)
        replay = idempotency.find_replay(
            session, scope=scope, key=key, user_id=actor.id, request_hash=request_hash
        )
        if replay is not None:
            found = replay.response.get("saturation_step_id")
            stored = session.get(SaturationStep, found) if found is not None else None
            if stored is None:
                raise Conflict(f"the step first written with this {idempotency.HEADER} is gone")
            return stored
    require_based_on(test, based_on_version, sent)
    require(test, actor, Action.RECORD)
    text, pascals = typed(data.back_pressure, PRESSURE, ("back_pressure",), non_negative=True)
    steps = saturation_of(session, test.id)
    step = SaturationStep(
        test_id=test.id,
        seq=(steps[-1].seq if steps else 0) + 1,
        back_pressure_kpa=pascals / 1000.0,
        back_pressure_text=text,
        b_value=data.b_value,
    )
    start(session, test, actor=actor)
    session.add(step)
    session.flush()
    record_created(session, step, actor_id=actor.id)
    if idempotency_key is not None:
        idempotency.remember(
            session,
            scope=scope,
            key=idempotency_key,
            user_id=actor.id,
            request_hash=request_hash,
            status_code=201,
            response={"saturation_step_id": step.id},
        )
    return step


# --- trials -------------------------------------------------------------------------------------


def _typed_text(raw: Any) -> str:
    """A quantity as a single text (objects keep value and unit; the entry keeps its `u`)."""
    if isinstance(raw, dict):
        return f"{raw.get('value')} {raw.get('unit') or ''}".strip()[:40]
    return str(raw)[:40]


class _Checked:
    """A trial's change checked by the engine: the reduction with it, what is pending, and
    the SI figures of the trial itself (position `at` of `source`)."""

    def __init__(self, reduced: Reduction, pending: list[FieldProblem], source: Reduction, at: int):
        self.reduced = reduced
        self.pending = pending
        self.source = source
        self.at = at

    def columns(self) -> dict[str, Any]:
        by_field = {e.si_field: e.id for e in reduction.catalogue.entries(reduction.Scope.TRIAL)}
        return {
            column: self.source.si("trials", self.at, by_field[column]) for column in TRIAL_COLUMNS
        }

    def readings(self, entries: dict[str, Any]) -> list[tuple[float, str, float, str]]:
        typed_rows = entries.get("readings") or []
        key = self.source.keys[self.at]
        return [
            (time_s, _typed_text(row["time"]), head_m, _typed_text(row["head"]))
            for (time_s, head_m), row in zip(self.source.readings_si(key), typed_rows, strict=False)
        ]


def _check_trial(
    session: Session, test: PermeabilityTest, trial: Trial, others: Sequence[Trial]
) -> _Checked:
    """Reduce the test with `trial` in it; refuse (422, at the trial's own fields) what the
    engine refuses in that trial. A trial left out of the reduction is checked on its own."""
    reduced = reduction.reduce_stored(session, test, trials=[*others, trial])
    if trial.excluded:
        alone = reduction.check_trial(test, trial.entries, trial.seq)
        if alone.problems:
            raise InvalidInput(problems=alone.problems)
        return _Checked(reduced, list(reduced.problems), alone, 0)
    key = trial.id if trial.id is not None else reduction.UNSAVED
    own, pending = reduced.split(key)
    if own:
        raise InvalidInput(problems=own)
    at = reduced.position(key)
    assert at is not None
    return _Checked(reduced, pending, reduced, at)


def _checked_new(reduced: Reduction) -> _Checked:
    """A new trial's check from its reduction (key "new"): 422 at its own fields."""
    own, pending = reduced.split(reduction.UNSAVED)
    if own:
        raise InvalidInput(problems=own)
    at = reduced.position(reduction.UNSAVED)
    assert at is not None
    return _Checked(reduced, pending, reduced, at)


def _store_readings(
    session: Session, trial: Trial, rows: list[tuple[float, str, float, str]], *, new: bool = False
) -> list[Reading]:
    assert trial.id is not None
    if not new:  # a new trial has none to replace
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


def _written(
    test: PermeabilityTest,
    trial: Trial,
    readings: Sequence[Reading],
    reduced: Reduction,
    pending: Sequence[FieldProblem],
) -> TrialWritten:
    return TrialWritten(
        trial=read_trial(trial, readings),
        test_state=test.state,
        test_version=test.version,
        reduction=live(reduced, pending, saved_as=trial.id),
    )


@dataclass(frozen=True)
class PreparedTrial:
    """A new trial reduced before the write lock (the API's dependency runs it in a read of
    its own): the body as sent, and the reduction with the stamp of the inputs it read. The
    write uses it when the stamp still holds under the lock, and reduces again otherwise."""

    data: TrialCreate
    entries: dict[str, Any]
    stamp: tuple[Any, ...] | None = None
    reduced: Reduction | None = None


def prepare_trial(session: Session, test_id: int, data: TrialCreate) -> PreparedTrial:
    """Reduce the test with the new trial from a read of its own, before any lock; nothing
    is checked against a user here (the write does that) and nothing is stored."""
    entries = data.model_dump(mode="json", exclude_unset=True, exclude_none=True)
    inputs = inputs_of(session, test_id)
    if inputs is None:
        return PreparedTrial(data=data, entries=entries)
    return PreparedTrial(data, entries, inputs.stamp, inputs.reduce(entries))


def record_trial(
    session: Session,
    test_id: int,
    data: TrialCreate | PreparedTrial,
    *,
    idempotency_key: str | None,
    actor: User,
    based_on_version: int | None = None,
) -> TrialWritten:
    """Store one trial exactly as typed and answer it with the live reduction.

    A retry with the same `idempotency_key` and body gets the first answer again and
    stores nothing; the same key with another body is a 409. A trial the engine refuses is
    a 422 naming the field (at the trial's own fields, labelled with its number), and
    nothing is stored. A stale `based_on_version` is a 409 (`require_based_on`), checked
    after the replay so a retry of a trial that landed is answered as landed. Given a
    `PreparedTrial`, its reduction is used when the test's inputs (their stamp: the test's
    version and state, its trials, specimen, saturation and apparatus) are still those it
    read; the test is locked meanwhile."""
    prepared = data if isinstance(data, PreparedTrial) else prepare_trial(session, test_id, data)
    key = idempotency.check_key(idempotency_key)
    test = get_test(session, test_id, actor=actor, lock=True)
    assert test.id is not None
    assert actor.id is not None
    entries = prepared.entries
    scope = f"trial:{test.id}"
    request_hash = idempotency.fingerprint(entries)
    replay = idempotency.find_replay(
        session, scope=scope, key=key, user_id=actor.id, request_hash=request_hash
    )
    if replay is not None:
        return TrialWritten.model_validate(replay.response)
    require_based_on(test, based_on_version, entries)
    require(test, actor, Action.RECORD)
    if trial_with_key(session, test.id, key) is not None:
        raise Conflict(
            f"{idempotency.HEADER} {key!r} already belongs to a trial of test {test.id}; "
            "send a new key for a new trial",
            detail={"idempotency_key": key},
        )
    stamp, seq = stamp_of(session, test.id)
    trial = Trial(
        test_id=test.id, seq=seq, idempotency_key=key, entries=entries, recorded_by_id=actor.id
    )
    if prepared.reduced is not None and prepared.stamp == stamp:
        checked = _checked_new(prepared.reduced)
    else:  # the test changed since the reduction was run: run it again, under the lock
        checked = _check_trial(session, test, trial, trials_of(session, test.id))
    for name, value in checked.columns().items():
        setattr(trial, name, value)
    rows = checked.readings(entries)
    start(session, test, actor=actor)
    session.add(trial)
    session.flush()
    record_created(session, trial, actor_id=actor.id)
    readings = _store_readings(session, trial, rows, new=True)
    written = _written(test, trial, readings, checked.reduced, checked.pending)
    # The answer itself is kept: a retry must get the first answer, not the trial as it
    # stands (a partner's edit since would show a newer version).
    idempotency.remember(
        session,
        scope=scope,
        key=key,
        user_id=actor.id,
        request_hash=request_hash,
        status_code=201,
        response=written.model_dump(mode="json"),
    )
    return written


def _get_trial(session: Session, test: PermeabilityTest, trial_id: int) -> Trial:
    trial = session.get(Trial, trial_id)
    if trial is None or trial.test_id != test.id:
        raise NotFound(f"trial {trial_id} of test {test.id} not found")
    return trial


def update_trial(
    session: Session, test_id: int, trial_id: int, data: TrialUpdate, *, actor: User
) -> TrialWritten:
    """Change a trial's entries (fields sent replace theirs; null removes one)."""
    test = get_test(session, test_id, actor=actor, lock=True)
    require(test, actor, Action.RECORD)
    assert test.id is not None
    trial = _get_trial(session, test, trial_id)
    sent = data.model_dump(mode="json", exclude_unset=True, exclude={"version"})
    require_version(trial, data.version, "trial", yours={"entries": sent})
    entries = dict(trial.entries)
    for name, value in sent.items():
        if value is None:
            entries.pop(name, None)
        else:
            entries[name] = value
    candidate = Trial(**{**trial.model_dump(), "entries": entries})
    others = [t for t in trials_of(session, test.id) if t.id != trial.id]
    checked = _check_trial(session, test, candidate, others)
    changes = {"entries": entries, **checked.columns()}
    rows = checked.readings(entries)
    apply_changes(session, trial, changes, actor_id=actor.id)
    readings = _store_readings(session, trial, rows)
    return _written(test, trial, readings, checked.reduced, checked.pending)


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
    require(test, actor, Action.RECORD)
    assert test.id is not None
    trial = _get_trial(session, test, trial_id)
    reason = data.reason.strip()
    if excluded and not reason:
        raise invalid(
            ("reason",), "say why the trial is left out", value=data.reason, kind="missing"
        )
    require_version(trial, data.version, "trial", yours={"excluded": excluded, "reason": reason})
    candidate = Trial(**{**trial.model_dump(), "excluded": excluded})
    others = [t for t in trials_of(session, test.id) if t.id != trial.id]
    checked = _check_trial(session, test, candidate, others)
    apply_changes(
        session,
        trial,
        {"excluded": excluded, "exclusion_reason": reason if excluded else ""},
        actor_id=actor.id,
    )
    assert trial.id is not None
    readings = readings_of(session, [trial.id])[trial.id]
    return _written(test, trial, readings, checked.reduced, checked.pending)
