"""The test page at the permeameter: specimen, apparatus, flexible-wall conditions and
saturation, trials with k and every check recomputed as they are typed, and submission with
the technician's sign-off. Clients see a read-only summary of their own organisation's tests.

Every write goes through the lab-tests service; a refusal comes back as the same section
(422, 403 or 409) with everything typed still in it and the message beside the field. The
fields come from the method catalogue; what the user may do from `allowed_actions`.
"""

from __future__ import annotations

import uuid
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Annotated, Any

from fastapi import APIRouter, Query, Request
from fastapi.responses import Response
from sqlmodel import Session
from starlette.datastructures import FormData

from service.accounts.models import User
from service.accounts.service import names_of
from service.apparatus.models import Apparatus
from service.apparatus.service import (
    is_overdue,
    list_apparatus,
    remember_units,
    remembered_units,
)
from service.common import ApparatusKind, Preparation, Role
from service.db import utcnow
from service.deps import CurrentUser, SessionDep, reads_only
from service.errors import PermissionDenied, StaleVersion
from service.figures import at_least_decimals
from service.lab_tests import service as lab_tests
from service.lab_tests.models import PermeabilityTest
from service.lab_tests.reduction import Scope, catalogue
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
from service.web.entries import (
    FormEntry,
    form_entry,
    method_name,
    posted,
    section_form,
    takes_readings,
    trial_form,
    units_used,
)
from service.web.htmx import PostedForm, htmx_details, redirect, render
from service.web.live_reduction import (
    READING_ROWS,
    PageReduction,
    page_reduction,
    shown_reduction,
    typed_trial,
)
from service.web.offline import KeptEntryDep
from service.web.pages import layout_context
from service.web.refusals import Attempt, attempt, prefixed

router = APIRouter(prefix="/tests", include_in_schema=False)

PAGE = "tests/test.html"
D5084 = "ASTM D5084"
PREPARATIONS = tuple((p.value, p.value.capitalize()) for p in Preparation)
PRESSURES = ("cell_pressure", "back_pressure", "effective_confining")
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


Remembered = Mapping[str, str] | None


def specimen_entries(
    units: str | None = "si", remembered: Remembered = None
) -> tuple[FormEntry, ...]:
    """The specimen fields typed with a unit or as a number (the stiffness is a tick box)."""
    return tuple(
        form_entry(e, units=units, remembered=remembered)
        for e in catalogue.entries(Scope.SPECIMEN)
        if e.on_forms and e.is_quantity
    )


def condition_entries(
    units: str | None = "si", remembered: Remembered = None
) -> tuple[FormEntry, ...]:
    return section_form(Scope.TEST, PRESSURES, units, remembered)


def saturation_entries(
    units: str | None = "si", remembered: Remembered = None
) -> tuple[FormEntry, ...]:
    return section_form(Scope.SATURATION, ("back_pressure", "b_value"), units, remembered)


def reading_entries(
    units: str | None = "si", remembered: Remembered = None
) -> tuple[FormEntry, ...]:
    return section_form(Scope.READING, ("time", "head"), units, remembered)


def _permeameter_of(record: lab_tests.TestRecord) -> int | None:
    """The permeameter assigned to the test: the units its pages start with are its own."""
    kinds = PICKER_KINDS[0][2]
    return next((a.id for a in record.apparatus if a.kind in kinds), None)


def _remember(session: Session, test_id: int, user: User, form: Mapping[str, Any], prefix: str,
              scope: Scope) -> None:  # fmt: skip
    """After a save: keep the units picked for the next test on the same permeameter."""
    record = lab_tests.load_record(session, test_id, actor=user)
    remember_units(session, _permeameter_of(record), units_used(form, prefix, scope))


# ---------- page context ----------


@dataclass
class Forms:
    """What each form shows: values as typed, messages beside fields, and form-level notes."""

    values: dict[str, Any] = field(default_factory=dict)
    errors: dict[str, dict[str, str]] = field(default_factory=dict)
    messages: dict[str, dict[str, Any]] = field(default_factory=dict)  # section -> message

    def value(self, name: str) -> Any:
        return self.values.get(name, "")

    def refused(self, tried: Attempt, prefix: str, section: str) -> int:
        """Put a refusal beside its fields (or atop the section); its status."""
        errors, general = tried.fields(prefixed(prefix))
        self.errors.update(errors)
        if general:
            self.messages[section] = {"kind": "fail", "text": " ".join(general)}
        return tried.status


def _settle(
    forms: Forms, tried: Attempt, section: str, prefix: str, saved: str, stale: str = ""
) -> Forms:
    """The forms after an attempt: fresh ones saying it was saved, or the refusal beside its
    fields (a stale edit: `stale`, everything typed kept)."""
    if not tried.refused:
        return Forms(messages={section: {"kind": "ok", "text": saved}})
    if tried.stale is not None and stale:
        forms.messages[section] = {"kind": "fail", "text": stale}
    else:
        forms.refused(tried, prefix, section)
    return forms


def _specimen_values(record: lab_tests.TestRecord) -> dict[str, Any]:
    specimen = record.specimen
    values: dict[str, Any] = {"specimen.preparation": "intact", "specimen.version": ""}
    if specimen is None:
        return values
    for entry in specimen_entries():
        values[f"specimen.{entry.key}"] = getattr(specimen, f"{entry.key}_text", "")
    if specimen.specific_gravity is not None:
        values["specimen.specific_gravity"] = at_least_decimals(specimen.specific_gravity)
    if specimen.retained_on_lower_sieve_pct is not None:
        values["specimen.retained_on_lower_sieve"] = f"{specimen.retained_on_lower_sieve_pct:g} %"
    values["specimen.stiff_material"] = specimen.stiff_material
    values["specimen.preparation"] = specimen.preparation
    values["specimen.description"] = specimen.description
    values["specimen.version"] = str(specimen.version)
    return values


def _condition_values(test: PermeabilityTest) -> dict[str, Any]:
    values = {f"cond.{name}": getattr(test, f"{name}_text") for name in PRESSURES}
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


def _people(session: Session, record: lab_tests.TestRecord) -> dict[int, str]:
    ids = {s.user_id for s in record.sign_offs} | {record.test.technician_id or 0}
    return names_of(session, ids)


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
    people = _people(session, record)
    forms = forms or Forms()
    today = utcnow().date()
    context = layout_context(
        request,
        user,
        record=record,
        test=test,
        sample=sample,
        project=project,
        technician_name=people.get(test.technician_id or 0),
        signers=people,
        method_name=method_name(test.method),
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
    reduction = page_reduction(session, test, entries)
    units = user.display_units
    remembered = remembered_units(session, _permeameter_of(record))
    context.update(
        forms=forms,
        values=values,
        errors=forms.errors,
        messages=forms.messages,
        can_record=lab_tests.Action.RECORD in lab_tests.allowed_actions(test, user),
        register=register,
        picker_kinds=PICKER_KINDS,
        chosen_permeameter=next(
            (a for a in register["permeameter"] if str(a.id) == values["app.permeameter"]), None
        ),
        overdue=lambda item: is_overdue(item, on=today),
        specimen_entries=specimen_entries(units, remembered),
        preparations=PREPARATIONS,
        condition_entries=condition_entries(units, remembered),
        saturation_entries=saturation_entries(units, remembered),
        reading_entries=reading_entries(units, remembered),
        show_conditions=test.standard == D5084
        or any(a.kind == ApparatusKind.FLEXIBLE_WALL_PERMEAMETER for a in record.apparatus),
        trial_entries=trial_form(test.method, units, remembered),
        reading_rows=READING_ROWS if takes_readings(test.method) else 0,
        next_seq=(record.trials[-1].seq if record.trials else 0) + 1,
        reduction=reduction,
        saved=page_reduction(session, test) if entries else reduction,
        stored_result=test.result if test.state not in lab_tests.EDITABLE else None,
        oob=htmx_details(request).wants_fragment,
    )
    return context


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


@dataclass(frozen=True)
class Outcome:
    """How a section answers a save: its section and form prefix, and what it says."""

    section: str
    prefix: str
    saved: str
    stale: str = ""
    fragment: str = ""


def _answer(
    request: Request, session: Session, user: User, test_id: int, tried: Attempt, forms: Forms,
    outcome: Outcome,
) -> Response:  # fmt: skip
    """The section again after a save: saved, or refused with everything typed kept."""
    forms = _settle(forms, tried, outcome.section, outcome.prefix, outcome.saved, outcome.stale)
    fragment, status = outcome.fragment or outcome.section, tried.status
    return _section(request, session, user, test_id, fragment, forms=forms, status_code=status)


def _int_or_none(text: Any) -> int | None:
    try:
        return int(str(text))
    except ValueError:
        return None


def _version(form: Mapping[str, Any], name: str = "version") -> int:
    return max(_int_or_none(form.get(name, "")) or 0, 1)


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


def _specimen_fields(form: Mapping[str, Any]) -> dict[str, Any]:
    fields: dict[str, Any] = {
        entry.key: posted(form, f"specimen.{entry.key}") or None for entry in specimen_entries()
    }
    gravity = fields.pop("specific_gravity")
    fields["specific_gravity"] = gravity
    fields["stiff_material"] = form.get("specimen.stiff_material") == "on"
    fields["preparation"] = str(form.get("specimen.preparation", "intact"))
    fields["description"] = str(form.get("specimen.description", "")).strip()
    fields["version"] = _int_or_none(form.get("specimen.version", ""))
    return fields


@router.post("/{test_id}/specimen")
def save_specimen(
    request: Request, test_id: int, user: CurrentUser, session: SessionDep, form: PostedForm
) -> Response:
    """Record or change the specimen against the version read; 409 shows both versions."""
    forms = Forms(values=_form_values(form, "specimen"))
    forms.values["specimen.stiff_material"] = form.get("specimen.stiff_material") == "on"
    with attempt(session) as tried:
        data = SpecimenWrite.model_validate(_specimen_fields(form))
        lab_tests.write_specimen(session, test_id, data, actor=user)
    if tried.stale is not None:
        forms.messages["specimen"] = _stale_message(tried.stale)
        forms.values["specimen.version"] = str(tried.stale.current.get("version", ""))
    else:
        forms = _settle(forms, tried, "specimen", "specimen", "Specimen saved.")
    if not tried.refused:
        _remember(session, test_id, user, form, "specimen", Scope.SPECIMEN)
    status = tried.status
    return _section(request, session, user, test_id, "specimen", forms=forms, status_code=status)


def _stale_message(exc: StaleVersion) -> dict[str, Any]:
    """Both versions side by side: what the technician sent, what is stored now."""
    yours, current = exc.yours, exc.current
    labels = {e.key: e.label for e in specimen_entries()}
    rows = []
    for name, typed in yours.items():
        if name == "version":
            continue
        stored = current.get(f"{name}_text", current.get(name))
        if name == "retained_on_lower_sieve":
            pct = current.get("retained_on_lower_sieve_pct")
            stored = f"{pct:g} %" if pct is not None else None
        shown_typed = "" if typed is None else typed
        shown_stored = "" if stored is None else stored
        if str(shown_typed) != str(shown_stored):
            label = labels.get(name, name.replace("_", " ").capitalize())
            rows.append({"field": label, "yours": shown_typed, "now": shown_stored})
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
def save_apparatus(
    request: Request, test_id: int, user: CurrentUser, session: SessionDep, form: PostedForm
) -> Response:
    """Assign the chosen register items (other kinds already assigned are kept)."""
    forms = Forms(values=_form_values(form, "app"))
    record = lab_tests.load_record(session, test_id, actor=user)
    kept = [a.id for a in record.apparatus if a.kind not in PICKED_KINDS and a.id is not None]
    chosen = [
        number
        for key, _label, _kinds in PICKER_KINDS
        if (number := _int_or_none(form.get(f"app.{key}", ""))) is not None
    ]
    with attempt(session) as tried:
        data = TestUpdate(version=_version(form), apparatus_ids=[*chosen, *kept])
        lab_tests.update_test(session, test_id, data, actor=user)
    stale = (
        "The test changed since this page was loaded (someone else saved it). Your choice "
        "is still selected; check it and save again."
    )
    outcome = Outcome("apparatus", "app", "Apparatus saved.", stale)
    return _answer(request, session, user, test_id, tried, forms, outcome)


# ---------- flexible-wall conditions and saturation ----------


@router.post("/{test_id}/conditions")
def save_conditions(
    request: Request, test_id: int, user: CurrentUser, session: SessionDep, form: PostedForm
) -> Response:
    """Cell, back and effective pressures and the permeant, each kept as typed."""
    forms = Forms(values=_form_values(form, "cond"))
    fields: dict[str, Any] = {name: posted(form, f"cond.{name}") or None for name in PRESSURES}
    fields["permeant"] = str(form.get("cond.permeant", ""))
    fields["version"] = _version(form)
    with attempt(session) as tried:
        lab_tests.update_test(session, test_id, TestUpdate.model_validate(fields), actor=user)
    stale = "The test changed since this page was loaded. Your entries are kept; save again."
    outcome = Outcome("conditions", "cond", "Conditions saved.", stale)
    return _answer(request, session, user, test_id, tried, forms, outcome)


@router.post("/{test_id}/saturation")
def add_saturation(
    request: Request,
    test_id: int,
    user: CurrentUser,
    session: SessionDep,
    form: PostedForm,
    kept: KeptEntryDep,
) -> Response:
    """Append a back-pressure step and the B-value measured after it (once per key)."""
    forms = Forms(values=_form_values(form, "sat"))
    fields = {
        "back_pressure": posted(form, "sat.back_pressure"),
        "b_value": posted(form, "sat.b_value") or None,
    }
    with attempt(session) as tried:
        data = SaturationStepCreate.model_validate(fields)
        lab_tests.add_saturation_step(
            session,
            test_id,
            data,
            actor=user,
            idempotency_key=kept.key,
            based_on_version=kept.based_on_version,
        )
    if tried.stale is not None:
        labels = {"back_pressure": "Back pressure", "b_value": "B-value after the step"}
        forms.messages["saturation"] = _kept_conflict(tried.stale, labels)
        return _section(request, session, user, test_id, "conditions", forms=forms, status_code=409)
    outcome = Outcome("saturation", "sat", "Saturation step added.", fragment="conditions")
    return _answer(request, session, user, test_id, tried, forms, outcome)


def _kept_conflict(exc: StaleVersion, labels: Mapping[str, str]) -> dict[str, Any]:
    """An entry typed against an older version of the test (kept on the tablet while the
    test was sent back, approved or edited elsewhere): the entry as typed beside the test
    as it is now. Nothing was saved; the entry stays kept on the tablet."""
    yours, current = exc.yours, exc.current
    rows = [
        {"field": "State of the test", "yours": "—", "now": str(current.get("state", ""))},
    ]
    if current.get("sent_back_reason") and current.get("state") == "running":
        reason = current["sent_back_reason"]
        rows.append({"field": "Sent back because", "yours": "—", "now": reason})
    for name, label in labels.items():
        if name in yours:
            rows.append({"field": label, "yours": str(yours[name] or ""), "now": "not saved"})
    return {
        "kind": "conflict",
        "text": "The test changed while this entry was kept on the tablet (it was sent back, "
        "approved or edited elsewhere), so it was not saved. It is still kept on this tablet: "
        "compare, then send it again as a new entry or discard it.",
        "yours_version": yours.get("version"),
        "current_version": current.get("version"),
        "rows": rows,
    }


# ---------- trials ----------


def _test_method(session: Session, test_id: int, user: User) -> str:
    """The test's method, for lab staff only (a client of another organisation gets 404,
    a client of its own organisation 403: trial entry is the laboratory's)."""
    test = lab_tests.get_test(session, test_id, actor=user)
    if user.role == Role.CLIENT:
        raise PermissionDenied(f"test {test_id}: trial entry is for laboratory staff")
    return test.method


@router.post("/{test_id}/trials/preview")
@reads_only
def preview_trial(
    request: Request, test_id: int, user: CurrentUser, session: SessionDep, form: PostedForm
) -> Response:
    """k, k20, gradient and every check with the trial being typed; nothing is stored.
    htmx gets the result (messages beside the trial's fields out of band) from one read
    (service/lab_tests/preview.py); 422 when an entry is refused."""
    if not htmx_details(request).wants_fragment or user.role == Role.CLIENT:
        return _preview_page(request, test_id, user, session, form)
    inputs = lab_tests.preview_inputs(session, test_id, actor=user)
    test = inputs.test
    typed, entries = typed_trial(form, test.method)
    forms = Forms(values={**typed, "trial.idempotency_key": str(form.get("idempotency_key", ""))})
    reduction = shown_reduction(inputs.reduce(entries or None), entries)
    forms.errors.update(reduction.field_errors)
    context = layout_context(
        request,
        user,
        test=test,
        section="preview",
        forms=forms,
        values=forms.values,
        errors=forms.errors,
        reduction=reduction,
        stored_result=test.result if test.state not in lab_tests.EDITABLE else None,
        can_record=lab_tests.Action.RECORD in lab_tests.allowed_actions(test, user),
        trial_entries=trial_form(test.method, user.display_units),
        reading_rows=READING_ROWS if takes_readings(test.method) else 0,
        oob=True,
    )
    status = 422 if reduction.refused else 200
    return render(request, PAGE, context, fragment="tests/_preview.html", status_code=status)


def _preview_page(
    request: Request, test_id: int, user: User, session: Session, form: FormData
) -> Response:
    """The preview as a whole page (a browser without JavaScript)."""
    typed, entries = typed_trial(form, _test_method(session, test_id, user))
    forms = Forms(values={**typed, "trial.idempotency_key": str(form.get("idempotency_key", ""))})
    context = _context(
        request, session, user, test_id, forms=forms, entries=entries, section="preview"
    )
    reduction: PageReduction = context["reduction"]
    forms.errors.update(reduction.field_errors)
    status = 422 if reduction.refused else 200
    return render(request, PAGE, context, fragment="tests/_preview.html", status_code=status)


def _key_reused(forms: Forms) -> None:
    """The form's key already saved another trial: a fresh key, and say so."""
    forms.values["trial.idempotency_key"] = uuid.uuid4().hex
    forms.messages["trials"] = {
        "kind": "fail",
        "text": "This form was already used to save a different trial (see the saved "
        "trials below). Nothing new was saved; if this is another trial, tap Save trial "
        "again.",
    }


@router.post("/{test_id}/trials")
def save_trial(
    request: Request,
    test_id: int,
    user: CurrentUser,
    session: SessionDep,
    form: PostedForm,
    kept: KeptEntryDep,
) -> Response:
    """Record the typed trial once: the hidden Idempotency-Key of this form makes a
    double tap or a retry store one trial; a trial kept on the tablet against an older
    version of the test is refused with both versions (409)."""
    method = _test_method(session, test_id, user)
    typed, entries = typed_trial(form, method)
    key = kept.key or ""
    forms = Forms(values={**typed, "trial.idempotency_key": key})
    with attempt(session) as tried:
        data = TrialCreate.model_validate(entries)
        written = lab_tests.record_trial(
            session,
            test_id,
            data,
            idempotency_key=key,
            actor=user,
            based_on_version=kept.based_on_version,
        )
    if tried.stale is not None:
        labels = {e.key: e.label for e in trial_form(method)}
        forms.messages["trials"] = _kept_conflict(tried.stale, labels)
    elif "idempotency_key" in tried.detail:
        _key_reused(forms)
    else:
        saved = f"Trial {written.trial.seq} saved." if not tried.refused else ""
        forms = _settle(forms, tried, "trials", "trial", saved)
    if not tried.refused:
        _remember(session, test_id, user, form, "trial", Scope.TRIAL)
    status = tried.status if tried.refused else 201
    return _section(request, session, user, test_id, "trials", forms=forms, status_code=status)


@router.post("/{test_id}/trials/{trial_id}/exclude")
def exclude_trial(
    request: Request,
    test_id: int,
    trial_id: int,
    user: CurrentUser,
    session: SessionDep,
    posted: PostedForm,
) -> Response:
    """Leave a saved trial out of the reduction, with the reason."""
    return _set_excluded(request, posted, test_id, trial_id, user, session, excluded=True)


@router.post("/{test_id}/trials/{trial_id}/include")
def include_trial(
    request: Request,
    test_id: int,
    trial_id: int,
    user: CurrentUser,
    session: SessionDep,
    posted: PostedForm,
) -> Response:
    """Take an excluded trial back into the reduction."""
    return _set_excluded(request, posted, test_id, trial_id, user, session, excluded=False)


def _set_excluded(
    request: Request,
    form: FormData,
    test_id: int,
    trial_id: int,
    user: User,
    session: Session,
    *,
    excluded: bool,
) -> Response:
    prefix = f"exclude.{trial_id}"
    forms = Forms(values=_form_values(form, prefix))
    reason = str(form.get(f"{prefix}.reason", ""))
    with attempt(session) as tried:
        data = TrialExclusion(version=_version(form), reason=reason[:300])
        lab_tests.exclude_trial(session, test_id, trial_id, data, actor=user, excluded=excluded)
    word = "left out of the reduction" if excluded else "taken back into the reduction"
    stale = "That trial changed since this page was loaded; it is shown as saved now."
    outcome = Outcome("trials", prefix, f"Trial {word}.", stale)
    return _answer(request, session, user, test_id, tried, forms, outcome)


# ---------- submission ----------


def _submit_refusal(tried: Attempt, forms: Forms) -> None:
    """A wrong password or too many tries beside the password; the rest atop the form."""
    if tried.detail.get("field") == "password" or tried.status == 429:
        forms.errors["submit.password"] = {
            "msg": "That password is not correct. Nothing was signed or changed."
            if tried.status == 403
            else tried.message,
            "kind": "refused",
        }
    elif tried.problems:
        forms.messages["submit"] = {
            "kind": "fail",
            "text": "The reduction refuses what is recorded; fix these first.",
            "problems": [{"field": p.name, "msg": p.reason} for p in tried.problems],
        }
    else:
        forms.messages["submit"] = {"kind": "fail", "text": tried.message, "detail": tried.detail}


@router.post("/{test_id}/submit")
def submit(
    request: Request, test_id: int, user: CurrentUser, session: SessionDep, form: PostedForm
) -> Response:
    """Submit with the technician's sign-off (password asked again). A wrong password or an
    apparatus past its calibration date changes nothing and says so in the form."""
    forms = Forms(values={"submit.note": str(form.get("submit.note", ""))})
    version = _int_or_none(form.get("version", ""))
    with attempt(session) as tried:
        data = SignOffRequest(
            password=str(form.get("submit.password", ""))[:200],
            version=version if version and version > 0 else None,
            note=forms.values["submit.note"][:1000],
        )
        lab_tests.submit_test(session, test_id, data, actor=user)
    if not tried.refused:
        return redirect(request, f"/tests/{test_id}")
    if tried.status == 403 and tried.detail.get("field") != "password":
        raise tried.error  # type: ignore[misc]
    _submit_refusal(tried, forms)
    return _section(
        request, session, user, test_id, "submit", forms=forms, status_code=tried.status
    )
