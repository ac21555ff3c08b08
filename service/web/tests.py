"""The test page at the permeameter: specimen, apparatus, flexible-wall conditions and
saturation, trials with k and every check recomputed as they are typed, and submission with
the technician's sign-off. Clients see a read-only summary of their own organisation's tests.

Every write goes through service.lab_tests.service; a refusal comes back as the same section
(422, 403 or 409) with everything typed still in it and the message beside the field.
"""

from __future__ import annotations

import uuid
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Annotated, Any

from fastapi import APIRouter, Query, Request
from fastapi.responses import Response
from pydantic import ValidationError
from sqlmodel import Session

from service.accounts.models import User
from service.apparatus.models import Apparatus
from service.apparatus.service import is_overdue, list_apparatus
from service.common import ApparatusKind, Preparation, Role, TestState
from service.db import utcnow
from service.deps import CurrentUser, SessionDep
from service.engine import EngineInputError, parse_request, reduce, result_to_dict
from service.engine.errors import InputProblem, field_name
from service.errors import (
    Conflict,
    InvalidInput,
    InvalidTransition,
    PermissionDenied,
    ServiceError,
    StaleVersion,
    TooManyAttempts,
)
from service.lab_tests import service as lab_tests
from service.lab_tests.models import PermeabilityTest, Trial
from service.lab_tests.payload import build_request
from service.lab_tests.schemas import (
    SaturationStepCreate,
    SignOffRequest,
    SpecimenWrite,
    TestUpdate,
    TrialCreate,
    TrialExclusion,
)
from service.projects.models import Project
from service.samples.models import Sample
from service.web.bench import Entry, trial_notes
from service.web.htmx import htmx_details, redirect, render
from service.web.pages import layout_context

router = APIRouter(prefix="/tests", include_in_schema=False)

PAGE = "tests/test.html"
READING_ROWS = 8
D5084 = "ASTM D5084"

METHOD_NAMES = {
    "constant_head": "Constant head",
    "falling_head": "Falling head, constant tailwater",
    "falling_head_rising_tail": "Falling headwater, rising tailwater",
    "constant_rate": "Constant rate of flow",
}

# ---------- what is typed where ----------

SPECIMEN_QUANTITIES = (
    Entry("diameter", "Diameter", "7.10 cm"),
    Entry("length", "Length", "11.60 cm"),
    Entry("wet_mass", "Wet mass", "560.0 g"),
    Entry("water_content", "Water content", "22.4 %"),
    Entry("specific_gravity", "Specific gravity, Gs", "2.70", "a number"),
    Entry("max_dry_density", "Max. dry density", "1.68 g/cm**3"),
    Entry("d10", "D10", "0.30 mm"),
    Entry("max_particle_size", "Max. particle size", "12.5 mm"),
    Entry("retained_on_lower_sieve", "Retained on the lower sieve", "40 %"),
    Entry("final_diameter", "Diameter after consolidation", "7.08 cm", "flexible wall"),
    Entry("final_length", "Length after consolidation", "11.52 cm", "flexible wall"),
)
PREPARATIONS = tuple((p.value, p.value.capitalize()) for p in Preparation)

CONDITION_ENTRIES = (
    Entry("cell_pressure", "Cell pressure", "550 kPa"),
    Entry("back_pressure", "Back pressure", "515 kPa"),
    Entry("effective_confining", "Effective confining pressure", "35 kPa"),
)

TEMPERATURE = Entry("temperature", "Temperature", "21.5 degC", "or 70 degF")
DURATION = Entry("duration", "Duration", "3600 s", "or use the stopwatch")
TRIAL_ENTRIES: dict[str, tuple[Entry, ...]] = {
    "constant_head": (
        Entry("volume", "Volume collected", "355 mL", "or give the water mass"),
        Entry("water_mass", "Water mass collected", "354.2 g", "instead of the volume"),
        DURATION,
        Entry("head_difference", "Head difference", "4.50 cm"),
        TEMPERATURE,
    ),
    "falling_head": (
        Entry("head_initial", "Head at start", "100.0 cm"),
        Entry("head_final", "Head at end", "70.0 cm"),
        DURATION,
        TEMPERATURE,
    ),
    "falling_head_rising_tail": (
        Entry("head_initial", "Head at start", "125.0 cm"),
        Entry("head_final", "Head at end", "101.3 cm", "optional with volumes"),
        DURATION,
        Entry("inflow_volume", "Inflow volume", "9.75 mL"),
        Entry("outflow_volume", "Outflow volume", "9.50 mL"),
        TEMPERATURE,
    ),
    "constant_rate": (
        Entry("flow_rate", "Flow rate", "0.020 mL/min"),
        Entry("pressure_difference", "Pressure difference", "35 kPa"),
        TEMPERATURE,
    ),
}
# Methods whose trial may instead be a run of time and head readings.
READING_METHODS = frozenset({"falling_head"})

PICKER_KINDS: tuple[tuple[str, str, tuple[ApparatusKind, ...]], ...] = (
    (
        "permeameter",
        "Permeameter",
        (ApparatusKind.RIGID_WALL_PERMEAMETER, ApparatusKind.FLEXIBLE_WALL_PERMEAMETER),
    ),
    ("balance", "Balance", (ApparatusKind.BALANCE,)),
    ("thermometer", "Thermometer", (ApparatusKind.THERMOMETER,)),
    ("caliper", "Caliper", (ApparatusKind.CALIPER,)),
    ("timer", "Timer", (ApparatusKind.TIMER,)),
)
PICKED_KINDS = frozenset(kind for _, _, kinds in PICKER_KINDS for kind in kinds)
REGISTER_LIMIT = 200


def trial_entries(method: str) -> tuple[Entry, ...]:
    return TRIAL_ENTRIES.get(method, TRIAL_ENTRIES["falling_head"])


# ---------- messages beside fields ----------


def _form_name(prefix: str, loc: Sequence[Any]) -> str:
    parts = [str(p) for p in loc if p != "body"]
    return ".".join([prefix, *parts])


def _problems_to_fields(prefix: str, detail: Any) -> dict[str, dict[str, str]]:
    """A service's InvalidInput detail list as {form name: {"msg", "kind"}}."""
    out: dict[str, dict[str, str]] = {}
    for item in detail if isinstance(detail, list) else []:
        if isinstance(item, dict):
            name = _form_name(prefix, item.get("loc", []))
            out.setdefault(name, {"msg": str(item.get("msg", "")), "kind": "refused"})
    return out


def _validation_to_fields(
    prefix: str, exc: ValidationError, typed: Mapping[str, Any]
) -> dict[str, dict[str, str]]:
    """Pydantic's refusals of a form, worded like the service's (field, value, accepted)."""
    out: dict[str, dict[str, str]] = {}
    for error in exc.errors():
        loc = [p for p in error["loc"] if p not in ("body",)]
        name = _form_name(prefix, loc)
        value = typed.get(".".join(str(p) for p in loc), error.get("input"))
        msg = f"{field_name(tuple(loc))}: {error['msg'].lower()} (got {value!r})"
        out.setdefault(name, {"msg": msg, "kind": "refused"})
    return out


def _beside(problem: InputProblem) -> dict[str, str]:
    if problem.kind == "missing":
        return {"msg": f"Needed: {problem.accepted}.", "kind": "missing"}
    return {"msg": problem.msg, "kind": "refused"}


# ---------- the live reduction, stored trials plus the one being typed ----------


@dataclass
class Reduction:
    """The test's reduction with (optionally) the trial being typed; nothing is stored."""

    result: dict[str, Any] | None = None
    rows: list[Any] = field(default_factory=list)  # trial id per engine trial, "new" for typed
    notes: dict[Any, list[dict[str, str]]] = field(default_factory=dict)
    field_errors: dict[str, dict[str, str]] = field(default_factory=dict)
    pending: list[dict[str, str]] = field(default_factory=list)
    typed: bool = False

    def trial(self, key: Any) -> dict[str, Any] | None:
        if self.result is None or key not in self.rows:
            return None
        return dict(self.result["trials"][self.rows.index(key)])

    @property
    def refused(self) -> bool:
        return any(e["kind"] != "missing" for e in self.field_errors.values())


def reduce_test(
    session: Session, test: PermeabilityTest, entries: dict[str, Any] | None = None
) -> Reduction:
    """Run the engine on the stored entries plus `entries` (the trial being typed) exactly
    as service.lab_tests.service.live_reduction would after saving it, storing nothing."""
    assert test.id is not None
    apparatus = lab_tests.apparatus_of(session, test.id)
    trials = lab_tests.trials_of(session, test.id)
    if entries:
        seq = (trials[-1].seq if trials else 0) + 1
        trials = [*trials, Trial(test_id=test.id, seq=seq, idempotency_key="-", entries=entries)]
    permeameter = next((a for a in apparatus if a.kind in lab_tests.PERMEAMETERS), None)
    request = build_request(
        test,
        specimen=lab_tests.specimen_of(session, test.id),
        trials=trials,
        saturation=lab_tests.saturation_of(session, test.id),
        permeameter=permeameter,
    )
    included = [t for t in sorted(trials, key=lambda t: t.seq) if not t.excluded]
    outcome = Reduction(rows=[t.id if t.id is not None else "new" for t in included])
    outcome.typed = bool(entries)
    try:
        defaults = lab_tests.default_uncertainties(apparatus)
        result = result_to_dict(reduce(parse_request(request, defaults)))
    except EngineInputError as exc:
        new_index = outcome.rows.index("new") if "new" in outcome.rows else None
        for problem in exc.problems:
            loc = problem.loc
            if new_index is not None and loc[:2] == ("trials", new_index) and len(loc) > 2:
                name = _form_name("trial", loc[2:])
                outcome.field_errors.setdefault(name, _beside(problem))
            elif loc != ("trials",) or new_index is not None:
                outcome.pending.append(
                    {"field": _where(loc), "msg": _beside(problem)["msg"], **_kind(problem)}
                )
        return outcome
    outcome.result = result
    # Keys are trial ids, or "new" for the trial being typed.
    notes: dict[Any, list[dict[str, str]]] = dict(trial_notes(result, outcome.rows))
    outcome.notes = notes
    reference = f"{result['reference_temperature_c']:g} °C"
    for trial in included:
        if "temperature" not in trial.entries:
            key = trial.id if trial.id is not None else "new"
            notes.setdefault(key, []).append(
                {"status": "warn", "text": f"No temperature: k is not corrected to {reference}."}
            )
    return outcome


def _where(loc: Sequence[Any]) -> str:
    """A refused input's place in words: ('specimen', 'length') -> 'Specimen: length'."""
    words = [str(p).replace("_", " ") for p in loc if not isinstance(p, int)]
    if loc and loc[0] == "apparatus":
        words[0] = "permeameter (from the register)"
    if not words:
        return "Request"
    head = words[0][:1].upper() + words[0][1:]
    return ": ".join([head, *words[1:]])


def _kind(problem: InputProblem) -> dict[str, str]:
    return {"kind": "missing" if problem.kind == "missing" else "refused"}


def typed_trial(form: Mapping[str, Any], method: str) -> tuple[dict[str, str], dict[str, Any]]:
    """(every trial field as typed, keyed by form name; the entries to send)."""
    typed: dict[str, str] = {}
    entries: dict[str, Any] = {}
    for entry in trial_entries(method):
        text = str(form.get(f"trial.{entry.key}", ""))
        typed[f"trial.{entry.key}"] = text
        if text.strip():
            entries[entry.key] = text.strip()
    if method in READING_METHODS:
        readings = []
        for row in range(READING_ROWS):
            reading = {}
            for part in ("time", "head"):
                text = str(form.get(f"trial.readings.{row}.{part}", ""))
                typed[f"trial.readings.{row}.{part}"] = text
                if text.strip():
                    reading[part] = text.strip()
            if reading:
                readings.append(reading)
        if readings:
            entries["readings"] = readings
    return typed, entries


# ---------- page context ----------


@dataclass
class Forms:
    """What each form shows: values as typed, messages beside fields, and form-level notes."""

    values: dict[str, Any] = field(default_factory=dict)
    errors: dict[str, dict[str, str]] = field(default_factory=dict)
    messages: dict[str, dict[str, Any]] = field(default_factory=dict)  # section -> message

    def value(self, name: str) -> Any:
        return self.values.get(name, "")


def _specimen_values(record: lab_tests.TestRecord) -> dict[str, Any]:
    specimen = record.specimen
    values: dict[str, Any] = {"specimen.preparation": "intact", "specimen.version": ""}
    if specimen is None:
        return values
    for entry in SPECIMEN_QUANTITIES:
        values[f"specimen.{entry.key}"] = getattr(specimen, f"{entry.key}_text", "")
    if specimen.specific_gravity is not None:
        values["specimen.specific_gravity"] = f"{specimen.specific_gravity:g}"
    if specimen.retained_on_lower_sieve_pct is not None:
        values["specimen.retained_on_lower_sieve"] = f"{specimen.retained_on_lower_sieve_pct:g} %"
    values["specimen.stiff_material"] = specimen.stiff_material
    values["specimen.preparation"] = specimen.preparation
    values["specimen.description"] = specimen.description
    values["specimen.version"] = str(specimen.version)
    return values


def _condition_values(test: PermeabilityTest) -> dict[str, Any]:
    values = {f"cond.{e.key}": getattr(test, f"{e.key}_text") for e in CONDITION_ENTRIES}
    values["cond.permeant"] = test.permeant
    return values


def _register(session: Session) -> dict[str, list[Apparatus]]:
    items, _ = list_apparatus(session, active=True, limit=REGISTER_LIMIT, offset=0)
    return {
        key: [item for item in items if item.kind in kinds] for key, _label, kinds in PICKER_KINDS
    }


def _picked(record: lab_tests.TestRecord) -> dict[str, str]:
    picked: dict[str, str] = {}
    for key, _label, kinds in PICKER_KINDS:
        chosen = next((a for a in record.apparatus if a.kind in kinds), None)
        picked[f"app.{key}"] = str(chosen.id) if chosen else ""
    return picked


def can_record(test: PermeabilityTest, user: User) -> bool:
    """Whether the page offers the forms (the service decides again on every write)."""
    if test.state not in (TestState.PLANNED, TestState.RUNNING):
        return False
    if user.role == Role.LAB_MANAGER:
        return True
    return user.role == Role.TECHNICIAN and test.technician_id == user.id


def _context(
    request: Request,
    session: Session,
    user: User,
    test_id: int,
    *,
    forms: Forms | None = None,
    entries: dict[str, Any] | None = None,
    section: str = "",
    permeameter_id: int | None = None,
) -> dict[str, Any]:
    record = lab_tests.load_record(session, test_id, actor=user)
    test = record.test
    sample = session.get(Sample, test.sample_id)
    project = session.get(Project, sample.project_id) if sample else None
    technician = session.get(User, test.technician_id) if test.technician_id else None
    signers = {
        s.user_id: signer.full_name
        for s in record.sign_offs
        if (signer := session.get(User, s.user_id)) is not None
    }
    forms = forms or Forms()
    today = utcnow().date()
    context = layout_context(
        request,
        user,
        record=record,
        test=test,
        sample=sample,
        project=project,
        technician=technician,
        signers=signers,
        method_name=METHOD_NAMES.get(test.method, test.method),
        today=today,
        overdue_due=test.due_date is not None and test.due_date < today,
        is_client=user.role == Role.CLIENT,
        section=section,
    )
    if user.role == Role.CLIENT:
        return context
    values = {
        **_specimen_values(record),
        **_condition_values(test),
        **_picked(record),
        "trial.idempotency_key": uuid.uuid4().hex,
    }
    values.update(forms.values)
    if permeameter_id is not None:
        values["app.permeameter"] = str(permeameter_id)
    register = _register(session)
    chosen_permeameter = next(
        (a for a in register["permeameter"] if str(a.id) == values["app.permeameter"]), None
    )
    reduction = reduce_test(session, test, entries)
    stored_result = (
        test.result if test.state not in (TestState.PLANNED, TestState.RUNNING) else None
    )
    context.update(
        forms=forms,
        values=values,
        errors=forms.errors,
        messages=forms.messages,
        can_record=can_record(test, user),
        register=register,
        picker_kinds=PICKER_KINDS,
        chosen_permeameter=chosen_permeameter,
        overdue=lambda item: is_overdue(item, on=today),
        specimen_entries=SPECIMEN_QUANTITIES,
        preparations=PREPARATIONS,
        condition_entries=CONDITION_ENTRIES,
        show_conditions=test.standard == D5084
        or any(a.kind == ApparatusKind.FLEXIBLE_WALL_PERMEAMETER for a in record.apparatus),
        trial_entries=trial_entries(test.method),
        reading_rows=READING_ROWS if test.method in READING_METHODS else 0,
        next_seq=(record.trials[-1].seq if record.trials else 0) + 1,
        reduction=reduction,
        saved=reduce_test(session, test) if entries else reduction,
        stored_result=stored_result,
        oob=_wants_fragment(request),
    )
    return context


def _wants_fragment(request: Request) -> bool:
    return htmx_details(request).wants_fragment


def _section(
    request: Request,
    session: Session,
    user: User,
    test_id: int,
    fragment: str,
    *,
    status_code: int = 200,
    **kwargs: Any,
) -> Response:
    context = _context(request, session, user, test_id, section=fragment, **kwargs)
    return render(
        request, PAGE, context, fragment=f"tests/_{fragment}.html", status_code=status_code
    )


def _refusal(session: Session, exc: ServiceError, prefix: str, forms: Forms, section: str) -> int:
    """Undo anything half-done, then put the refusal beside its field (or atop the section)."""
    session.rollback()
    if isinstance(exc, InvalidInput):
        fields = _problems_to_fields(prefix, exc.detail)
        forms.errors.update(fields)
        if not fields:
            forms.messages[section] = {"kind": "fail", "text": exc.message}
    else:
        forms.messages[section] = {"kind": "fail", "text": exc.message}
    return exc.status_code


def _int_or_none(text: Any) -> int | None:
    try:
        return int(str(text))
    except ValueError:
        return None


def _form_values(form: Mapping[str, Any], prefix: str) -> dict[str, Any]:
    return {k: v for k, v in form.items() if k.startswith(prefix + ".") and isinstance(v, str)}


# ---------- the page ----------


@router.get("/{test_id}")
def test_page(request: Request, test_id: int, user: CurrentUser, session: SessionDep) -> Response:
    """The test: header, specimen, apparatus, conditions, trials and sign-off (lab staff); a
    read-only summary for a client of the test's own organisation; 404 for anyone else."""
    context = _context(request, session, user, test_id)
    return render(request, PAGE, context, fragment="tests/_test.html")


# ---------- specimen ----------


def _specimen_write(form: Mapping[str, Any], forms: Forms) -> SpecimenWrite | None:
    fields: dict[str, Any] = {}
    for entry in SPECIMEN_QUANTITIES:
        text = str(form.get(f"specimen.{entry.key}", "")).strip()
        fields[entry.key] = text or None
    gravity = fields.pop("specific_gravity")
    if gravity is not None:
        try:
            fields["specific_gravity"] = float(gravity)
        except ValueError:
            forms.errors["specimen.specific_gravity"] = {
                "msg": f"specific_gravity: got '{gravity}'; accepted: a number above 1.0 and "
                "at most 5.0, such as 2.70 (no unit)",
                "kind": "refused",
            }
            return None
    else:
        fields["specific_gravity"] = None
    fields["stiff_material"] = form.get("specimen.stiff_material") == "on"
    fields["preparation"] = str(form.get("specimen.preparation", "intact"))
    fields["description"] = str(form.get("specimen.description", "")).strip()
    fields["version"] = _int_or_none(form.get("specimen.version", ""))
    try:
        return SpecimenWrite.model_validate(fields)
    except ValidationError as exc:
        forms.errors.update(_validation_to_fields("specimen", exc, fields))
        return None


@router.post("/{test_id}/specimen")
async def save_specimen(
    request: Request, test_id: int, user: CurrentUser, session: SessionDep
) -> Response:
    """Record or change the specimen against the version read; 409 shows both versions."""
    form = await request.form()
    forms = Forms(values=_form_values(form, "specimen"))
    forms.values["specimen.stiff_material"] = form.get("specimen.stiff_material") == "on"
    data = _specimen_write(form, forms)
    status = 422
    if data is not None:
        try:
            lab_tests.write_specimen(session, test_id, data, actor=user)
        except StaleVersion as exc:
            session.rollback()
            status = exc.status_code
            forms.messages["specimen"] = _stale_message(exc)
            current = exc.detail.get("current", {}) if isinstance(exc.detail, dict) else {}
            forms.values["specimen.version"] = str(current.get("version", ""))
        except (InvalidInput, InvalidTransition) as exc:
            status = _refusal(session, exc, "specimen", forms, "specimen")
        else:
            session.flush()
            forms = Forms(messages={"specimen": {"kind": "ok", "text": "Specimen saved."}})
            status = 200
    return _section(request, session, user, test_id, "specimen", forms=forms, status_code=status)


def _stale_message(exc: StaleVersion) -> dict[str, Any]:
    """Both versions side by side: what the technician sent, what is stored now."""
    detail = exc.detail if isinstance(exc.detail, dict) else {}
    yours = detail.get("yours", {})
    current = detail.get("current", {})
    rows = []
    for name, typed in yours.items():
        if name == "version":
            continue
        stored = current.get(f"{name}_text", current.get(name))
        if name == "retained_on_lower_sieve":
            pct = current.get("retained_on_lower_sieve_pct")
            stored = f"{pct:g} %" if pct is not None else None
        label = next((e.label for e in SPECIMEN_QUANTITIES if e.key == name), name)
        shown_typed = "" if typed is None else typed
        shown_stored = "" if stored is None else stored
        if str(shown_typed) != str(shown_stored):
            rows.append(
                {"field": label.replace("_", " "), "yours": shown_typed, "now": shown_stored}
            )
    return {
        "kind": "conflict",
        "text": "Someone saved this specimen while you were typing. Your entries are still in "
        "the form; compare them with what is saved now, then save again to keep yours.",
        "yours_version": yours.get("version"),
        "current_version": current.get("version"),
        "rows": rows,
    }


# ---------- apparatus ----------


@router.get("/{test_id}/permeameter")
def permeameter_geometry(
    request: Request,
    test_id: int,
    user: CurrentUser,
    session: SessionDep,
    permeameter: Annotated[str, Query(alias="app.permeameter", max_length=12)] = "",
) -> Response:
    """The chosen permeameter's areas and port spacing from the register (nothing saved)."""
    _test_method(session, test_id, user)
    chosen = _int_or_none(permeameter)
    return _section(request, session, user, test_id, "permeameter", permeameter_id=chosen or 0)


@router.post("/{test_id}/apparatus")
async def save_apparatus(
    request: Request, test_id: int, user: CurrentUser, session: SessionDep
) -> Response:
    """Assign the chosen register items (other kinds already assigned are kept)."""
    form = await request.form()
    forms = Forms(values=_form_values(form, "app"))
    record = lab_tests.load_record(session, test_id, actor=user)
    kept = [a.id for a in record.apparatus if a.kind not in PICKED_KINDS and a.id is not None]
    chosen = [
        number
        for key, _label, _kinds in PICKER_KINDS
        if (number := _int_or_none(form.get(f"app.{key}", ""))) is not None
    ]
    status = 200
    version = _int_or_none(form.get("version", "")) or 0
    try:
        lab_tests.update_test(
            session,
            test_id,
            TestUpdate(version=max(version, 1), apparatus_ids=[*chosen, *kept]),
            actor=user,
        )
    except StaleVersion as exc:
        session.rollback()
        status = exc.status_code
        forms.messages["apparatus"] = {
            "kind": "fail",
            "text": "The test changed since this page was loaded (someone else saved it). "
            "Your choice is still selected; check it and save again.",
        }
    except (InvalidInput, InvalidTransition, Conflict) as exc:
        status = _refusal(session, exc, "app", forms, "apparatus")
    else:
        session.flush()
        forms = Forms(messages={"apparatus": {"kind": "ok", "text": "Apparatus saved."}})
    return _section(request, session, user, test_id, "apparatus", forms=forms, status_code=status)


# ---------- flexible-wall conditions and saturation ----------


@router.post("/{test_id}/conditions")
async def save_conditions(
    request: Request, test_id: int, user: CurrentUser, session: SessionDep
) -> Response:
    """Cell, back and effective pressures and the permeant, each kept as typed."""
    form = await request.form()
    forms = Forms(values=_form_values(form, "cond"))
    fields: dict[str, Any] = {
        e.key: str(form.get(f"cond.{e.key}", "")).strip() or None for e in CONDITION_ENTRIES
    }
    fields["permeant"] = str(form.get("cond.permeant", ""))
    fields["version"] = max(_int_or_none(form.get("version", "")) or 0, 1)
    status = 200
    try:
        data = TestUpdate.model_validate(fields)
    except ValidationError as exc:
        forms.errors.update(_validation_to_fields("cond", exc, fields))
        return _section(request, session, user, test_id, "conditions", forms=forms, status_code=422)
    try:
        lab_tests.update_test(session, test_id, data, actor=user)
    except StaleVersion as exc:
        session.rollback()
        status = exc.status_code
        forms.messages["conditions"] = {
            "kind": "fail",
            "text": "The test changed since this page was loaded. Your entries are kept; "
            "save again to record them.",
        }
    except (InvalidInput, InvalidTransition) as exc:
        status = _refusal(session, exc, "cond", forms, "conditions")
    else:
        session.flush()
        forms = Forms(messages={"conditions": {"kind": "ok", "text": "Conditions saved."}})
    return _section(request, session, user, test_id, "conditions", forms=forms, status_code=status)


@router.post("/{test_id}/saturation")
async def add_saturation(
    request: Request, test_id: int, user: CurrentUser, session: SessionDep
) -> Response:
    """Append a back-pressure step and the B-value measured after it."""
    form = await request.form()
    forms = Forms(values=_form_values(form, "sat"))
    pressure = str(form.get("sat.back_pressure", "")).strip()
    b_text = str(form.get("sat.b_value", "")).strip()
    try:
        b_value = float(b_text)
    except ValueError:
        forms.errors["sat.b_value"] = {
            "msg": f"b_value: got '{b_text}'; accepted: Skempton's B as a number from 0 to 1.1, "
            "such as 0.96",
            "kind": "refused",
        }
        return _section(request, session, user, test_id, "conditions", forms=forms, status_code=422)
    status = 200
    try:
        data = SaturationStepCreate(back_pressure=pressure, b_value=b_value)
    except ValidationError as exc:
        forms.errors.update(
            _validation_to_fields("sat", exc, {"back_pressure": pressure, "b_value": b_text})
        )
        return _section(request, session, user, test_id, "conditions", forms=forms, status_code=422)
    try:
        lab_tests.add_saturation_step(session, test_id, data, actor=user)
    except (InvalidInput, InvalidTransition) as exc:
        status = _refusal(session, exc, "sat", forms, "saturation")
    else:
        session.flush()
        forms = Forms(messages={"saturation": {"kind": "ok", "text": "Saturation step added."}})
    return _section(request, session, user, test_id, "conditions", forms=forms, status_code=status)


# ---------- trials ----------


def _test_method(session: Session, test_id: int, user: User) -> str:
    """The test's method, for lab staff only (a client of another organisation gets 404,
    a client of its own organisation 403: trial entry is the laboratory's)."""
    test = lab_tests.get_test(session, test_id, actor=user)
    if user.role == Role.CLIENT:
        raise PermissionDenied(f"test {test_id}: trial entry is for laboratory staff")
    return test.method


@router.post("/{test_id}/trials/preview")
async def preview_trial(
    request: Request, test_id: int, user: CurrentUser, session: SessionDep
) -> Response:
    """k, k20, gradient and every check with the trial being typed; nothing is stored.
    htmx gets the result (messages beside the trial's fields out of band); 422 when an
    entry is refused."""
    form = await request.form()
    method = _test_method(session, test_id, user)
    typed, entries = typed_trial(form, method)
    forms = Forms(values={**typed, "trial.idempotency_key": str(form.get("idempotency_key", ""))})
    context = _context(
        request, session, user, test_id, forms=forms, entries=entries, section="preview"
    )
    reduction: Reduction = context["reduction"]
    forms.errors.update(reduction.field_errors)
    return render(
        request,
        PAGE,
        context,
        fragment="tests/_preview.html",
        status_code=422 if reduction.refused else 200,
    )


@router.post("/{test_id}/trials")
async def save_trial(
    request: Request, test_id: int, user: CurrentUser, session: SessionDep
) -> Response:
    """Record the typed trial once: the hidden Idempotency-Key of this form makes a
    double tap or a retry store one trial."""
    form = await request.form()
    method = _test_method(session, test_id, user)
    typed, entries = typed_trial(form, method)
    key = str(form.get("idempotency_key", ""))
    forms = Forms(values={**typed, "trial.idempotency_key": key})
    status = 201
    try:
        data = TrialCreate.model_validate(entries)
    except ValidationError as exc:
        forms.errors.update(_validation_to_fields("trial", exc, entries))
        return _section(request, session, user, test_id, "trials", forms=forms, status_code=422)
    try:
        _status, body = lab_tests.record_trial(
            session, test_id, data, idempotency_key=key, actor=user
        )
    except (InvalidInput, InvalidTransition) as exc:
        status = _refusal(session, exc, "trial", forms, "trials")
    except Conflict as exc:
        session.rollback()
        status = exc.status_code
        forms.values["trial.idempotency_key"] = uuid.uuid4().hex
        forms.messages["trials"] = {
            "kind": "fail",
            "text": "This form was already used to save a different trial (see the saved "
            "trials below). Nothing new was saved; if this is another trial, tap Save trial "
            "again.",
        }
    else:
        session.flush()
        seq = body["trial"]["seq"]
        forms = Forms(messages={"trials": {"kind": "ok", "text": f"Trial {seq} saved."}})
    return _section(request, session, user, test_id, "trials", forms=forms, status_code=status)


@router.post("/{test_id}/trials/{trial_id}/exclude")
async def exclude_trial(
    request: Request, test_id: int, trial_id: int, user: CurrentUser, session: SessionDep
) -> Response:
    """Leave a saved trial out of the reduction, with the reason."""
    return await _set_excluded(request, test_id, trial_id, user, session, excluded=True)


@router.post("/{test_id}/trials/{trial_id}/include")
async def include_trial(
    request: Request, test_id: int, trial_id: int, user: CurrentUser, session: SessionDep
) -> Response:
    """Take an excluded trial back into the reduction."""
    return await _set_excluded(request, test_id, trial_id, user, session, excluded=False)


async def _set_excluded(
    request: Request,
    test_id: int,
    trial_id: int,
    user: User,
    session: Session,
    *,
    excluded: bool,
) -> Response:
    form = await request.form()
    prefix = f"exclude.{trial_id}"
    forms = Forms(values=_form_values(form, prefix))
    reason = str(form.get(f"{prefix}.reason", ""))
    version = max(_int_or_none(form.get("version", "")) or 0, 1)
    status = 200
    try:
        lab_tests.exclude_trial(
            session,
            test_id,
            trial_id,
            TrialExclusion(version=version, reason=reason[:300]),
            actor=user,
            excluded=excluded,
        )
    except StaleVersion as exc:
        session.rollback()
        status = exc.status_code
        forms.messages["trials"] = {
            "kind": "fail",
            "text": "That trial changed since this page was loaded; it is shown as saved now.",
        }
    except (InvalidInput, InvalidTransition) as exc:
        status = _refusal(session, exc, prefix, forms, "trials")
    else:
        session.flush()
        word = "left out of the reduction" if excluded else "taken back into the reduction"
        forms = Forms(messages={"trials": {"kind": "ok", "text": f"Trial {word}."}})
    return _section(request, session, user, test_id, "trials", forms=forms, status_code=status)


# ---------- submission ----------


@router.post("/{test_id}/submit")
async def submit(
    request: Request, test_id: int, user: CurrentUser, session: SessionDep
) -> Response:
    """Submit with the technician's sign-off (password asked again). A wrong password or an
    apparatus past its calibration date changes nothing and says so in the form."""
    form = await request.form()
    forms = Forms(values={"submit.note": str(form.get("submit.note", ""))})
    version = _int_or_none(form.get("version", ""))
    try:
        data = SignOffRequest(
            password=str(form.get("submit.password", ""))[:200],
            version=version if version and version > 0 else None,
            note=forms.values["submit.note"][:1000],
        )
        lab_tests.submit_test(session, test_id, data, actor=user)
    except PermissionDenied as exc:
        session.rollback()
        if not (isinstance(exc.detail, dict) and exc.detail.get("field") == "password"):
            raise
        forms.errors["submit.password"] = {
            "msg": "That password is not correct. Nothing was signed or changed.",
            "kind": "refused",
        }
        status = exc.status_code
    except TooManyAttempts as exc:
        session.rollback()
        forms.errors["submit.password"] = {"msg": exc.message, "kind": "refused"}
        status = exc.status_code
    except (Conflict, InvalidTransition) as exc:
        session.rollback()
        status = exc.status_code
        forms.messages["submit"] = {"kind": "fail", "text": exc.message, "detail": exc.detail}
    except InvalidInput as exc:
        session.rollback()
        status = exc.status_code
        problems = exc.detail if isinstance(exc.detail, list) else []
        forms.messages["submit"] = {
            "kind": "fail",
            "text": "The reduction refuses what is recorded; fix these first.",
            "problems": [
                {"field": field_name(tuple(p.get("loc", []))), "msg": p.get("msg", "")}
                for p in problems
                if isinstance(p, dict)
            ],
        }
    else:
        return redirect(request, f"/tests/{test_id}")
    return _section(request, session, user, test_id, "submit", forms=forms, status_code=status)
