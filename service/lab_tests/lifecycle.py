"""The test's lifecycle: request and assign it, change its conditions, start, submit, approve,
send back and issue.

States: planned → running (first specimen, saturation or trial write, or an explicit start)
→ submitted → approved → issued; submitted → running when sent back (reason required).
Submission stores the engine's result with its version and the hash of its inputs, and the
sign-off stores the hash of exactly that (service/signoffs/service.py). Who may do what is
`permissions.allowed_actions`.
"""

from __future__ import annotations

from typing import Any

from sqlmodel import Session, col, delete, func, select

from service.access import get_visible
from service.accounts.models import Organisation, User
from service.apparatus.models import Apparatus
from service.apparatus.service import calibration_problems
from service.audit.service import apply_changes, record_change, record_created
from service.common import OrganisationKind, Role, SignOffMeaning, TestState
from service.db import utcnow
from service.errors import (
    Conflict,
    FieldProblem,
    InvalidInput,
    InvalidTransition,
    PermissionDenied,
    invalid,
    require_version,
)
from service.lab_tests import reduction
from service.lab_tests.models import PermeabilityTest, TestApparatus
from service.lab_tests.permissions import Action, may_request_tests, require
from service.lab_tests.reading import apparatus_of, get_test, trials_of
from service.lab_tests.schemas import SendBackRequest, SignOffRequest, TestCreate, TestUpdate
from service.projects.models import Project
from service.quantities import CONDUCTIVITY, DENSITY, PRESSURE, typed
from service.samples.models import Sample
from service.scope import service as scope
from service.signoffs import service as signoffs

PRESSURES = ("cell_pressure", "back_pressure", "effective_confining")


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
        raise invalid(
            ("technician_id",),
            f"user {user_id} is not an active technician of the lab",
            value=user_id,
            accepted="the id of an active user with the technician role",
        )


def _check_apparatus(session: Session, apparatus_ids: list[int]) -> list[int]:
    wanted: list[int] = []
    permeameters = []
    problems: list[FieldProblem] = []
    for index, apparatus_id in enumerate(apparatus_ids):
        item = session.get(Apparatus, apparatus_id)
        loc = ("apparatus_ids", index)
        if item is None:
            problems.append(FieldProblem(loc, f"apparatus {apparatus_id} not found", apparatus_id))
        elif not item.is_active:
            problems.append(
                FieldProblem(loc, f"{item.identifier} is retired from the register", apparatus_id)
            )
        else:
            if item.kind in reduction.PERMEAMETERS:
                permeameters.append(item.identifier)
            if apparatus_id not in wanted:
                wanted.append(apparatus_id)
    if len(permeameters) > 1:
        problems.append(
            FieldProblem(
                ("apparatus_ids",),
                f"one permeameter per test (got {', '.join(permeameters)})",
                apparatus_ids,
                "one permeameter and any instruments",
            )
        )
    if problems:
        raise InvalidInput(problems=problems)
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


def _typed_or_empty(raw: Any, kind: Any, name: str, *, positive: bool = False) -> tuple[str, Any]:
    return typed(raw, kind, (name,), positive=positive) if raw else ("", None)


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
        raise invalid(("permeant",), "name the permeant liquid", value=columns["permeant"])
    if "reference_temperature_c" in fields:
        columns["reference_temperature_c"] = fields["reference_temperature_c"]
    correction = columns.get("temperature_correction", test.temperature_correction)
    reference = columns.get("reference_temperature_c", test.reference_temperature_c)
    if correction == "astm_d5084" and reference != 20.0:
        raise invalid(
            ("temperature_correction",),
            f"'astm_d5084' corrects to 20 °C only (reference {reference:g} °C)",
            value=correction,
            accepted="'iapws' for 10 or 27 °C",
        )
    if "target_dry_density" in fields:
        text, value = _typed_or_empty(
            fields["target_dry_density"], DENSITY, "target_dry_density", positive=True
        )
        columns["target_dry_density_text"], columns["target_dry_density_kg_per_m3"] = text, value
    if "spec_k_max" in fields:
        if fields["spec_k_max"]:
            text, value = typed(fields["spec_k_max"], CONDUCTIVITY, ("spec_k_max",), positive=True)
            columns["spec_k_max_text"], columns["spec_k_max_m_per_s"] = text, value
        else:  # no override: the project's limit applies
            columns.update(_project_limit(session, test))
    for name in PRESSURES:
        if name in fields:
            text, value = _typed_or_empty(fields[name], PRESSURE, name)
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
    unless overridden; the due date is the sample's; the reference temperature, unless
    given, is the one the laboratory's scope sets for the standard."""
    sample = get_visible(session, Sample, sample_id, actor, "sample")
    if not may_request_tests(actor):
        raise PermissionDenied("requesting a test needs a lab manager, reviewer or admin")
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
    if "reference_temperature_c" not in data.model_fields_set and (
        data.temperature_correction != "astm_d5084"
    ):
        scope_default = scope.default_reference_temperature(session, data.standard)
        if scope_default is not None:
            fields["reference_temperature_c"] = scope_default
    for name, value in _test_columns(session, test, fields).items():
        setattr(test, name, value)
    session.add(test)
    session.flush()
    record_created(session, test, actor_id=actor.id)
    if data.apparatus_ids:
        _set_apparatus(session, test, data.apparatus_ids, actor=actor)
    return test


def _actions_for(
    test: PermeabilityTest, columns: dict[str, Any], fields: dict[str, Any]
) -> list[Action]:
    """What a change of these fields needs: editing, and assigning or changing the limit
    (known once the typed limit is read into `columns`)."""
    needed = [Action.EDIT]
    if "technician_id" in fields or "method" in fields:
        needed.append(Action.ASSIGN)
    limit_changed = "spec_k_max_text" in columns and (
        columns["spec_k_max_text"] != test.spec_k_max_text
        or columns["spec_k_max_m_per_s"] != test.spec_k_max_m_per_s
    )
    if limit_changed:
        needed.append(Action.SET_LIMIT)
    return needed


def update_test(
    session: Session, test_id: int, data: TestUpdate, *, actor: User
) -> PermeabilityTest:
    """Change a test's request, conditions, technician or apparatus (planned or running).

    Assigning and changing the method, and any change of the specification limit (raising
    or removing it loosens what the result is held to), are for planners only."""
    test = get_test(session, test_id, actor=actor, lock=True)
    fields = data.model_dump(exclude_unset=True, exclude={"version"})
    for action in _actions_for(test, {}, fields):
        require(test, actor, action)
    require_version(test, data.version, "test", yours=fields)
    assert test.id is not None
    if "method" in fields and fields["method"] != test.method and trials_of(session, test.id):
        raise Conflict(
            f"method: test {test.id} has trials recorded as {test.method}; the method cannot "
            "change now (exclude them, or request another test)"
        )
    apparatus_ids = fields.pop("apparatus_ids", None)
    columns = _test_columns(session, test, fields)
    if Action.SET_LIMIT in _actions_for(test, columns, fields):
        require(test, actor, Action.SET_LIMIT)
    changed = apply_changes(session, test, columns, actor_id=actor.id)
    if apparatus_ids is not None and _set_apparatus(session, test, apparatus_ids, actor=actor):
        if not changed:
            test.version += 1
        session.add(test)
        session.flush()
    return test


def start(session: Session, test: PermeabilityTest, *, actor: User) -> None:
    """Planned → running, when the first thing is recorded on the test."""
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
    require(test, actor, Action.START)
    start(session, test, actor=actor)
    return test


# --- submission and review ----------------------------------------------------------------------


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
    require(test, actor, Action.SUBMIT)
    require_version(test, data.version, "test", yours={}, required=False)
    signoffs.confirm_password(session, actor, data.password)
    _calibration_check(session, test)
    reduced = reduction.reduce_stored(session, test)
    if reduced.result is None:
        raise InvalidInput(
            "the reduction refuses what is recorded; fix these first", problems=reduced.problems
        )
    for trial in trials_of(session, test.id or 0):
        output = reduced.output(trial.id) or {}  # excluded trials carry no figures
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
            "result": reduced.result,
            "result_k_ref_m_per_s": reduced.result["result"]["k_ref_m_per_s"],
            "engine_version": reduced.result["engine_version"],
            "scope_version": reduced.scope_version,
            "input_hash": reduced.input_hash,
            "default_uncertainties": reduced.defaults,
        },
        actor_id=actor.id,
    )
    signoffs.record_sign_off(
        session, test, actor=actor, meaning=SignOffMeaning.PERFORMED, note=data.note
    )
    return test


def approve_test(
    session: Session, test_id: int, data: SignOffRequest, *, actor: User
) -> PermeabilityTest:
    """Submitted → approved with a reviewer's sign-off (password re-entered). Nobody approves
    a test they performed. Approving a correction marks the revision it replaces superseded."""
    test = get_test(session, test_id, actor=actor, lock=True)
    require(test, actor, Action.APPROVE, performers=signoffs.performer_ids(session, test))
    require_version(test, data.version, "test", yours={}, required=False)
    signoffs.confirm_password(session, actor, data.password)
    stored = reduction.stored_request(session, test, defaults=test.default_uncertainties)
    if stored.input_hash != test.input_hash:
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
    reason = data.reason.strip()
    test = get_test(session, test_id, actor=actor, lock=True)
    require(test, actor, Action.SEND_BACK)
    if not reason:
        raise invalid(
            ("reason",),
            "say what must change before the test is resubmitted",
            value=data.reason,
            kind="missing",
        )
    require_version(test, data.version, "test", yours={"reason": reason}, required=False)
    apply_changes(
        session,
        test,
        {"state": TestState.RUNNING, "sent_back_reason": reason},
        actor_id=actor.id,
    )
    return test


def mark_issued(session: Session, test_id: int, *, actor: User) -> PermeabilityTest:
    """Approved → issued (for the certificate workflow, once a certificate reports it)."""
    test = get_test(session, test_id, actor=actor, lock=True)
    if test.superseded_by_id is not None and test.state == TestState.APPROVED:
        raise InvalidTransition(
            f"test {test.id} has a correction in progress (test {test.superseded_by_id}); "
            "issue that revision once it is approved",
            detail={"state": test.state, "superseded_by_id": test.superseded_by_id},
        )
    require(test, actor, Action.ISSUE)
    apply_changes(
        session, test, {"state": TestState.ISSUED, "issued_at": utcnow()}, actor_id=actor.id
    )
    return test
