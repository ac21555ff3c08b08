"""The review page of one test (/tests/{test_id}/review): specimen, conditions, trials, checks,
uncertainty, compliance, plots, sign-offs and audit; approve with the password re-entered,
send back with a reason, issue the sample's certificate, or order a correction."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import Response
from sqlmodel import Session
from starlette.datastructures import FormData

from service.accounts.models import Organisation, User
from service.accounts.service import names_of
from service.audit.service import history
from service.certificates.service import (
    draft_sample_certificate,
    issue_sample_certificate,
    list_certificates,
)
from service.common import TestState
from service.config import get_settings
from service.deps import SessionDep
from service.errors import PermissionDenied, ServiceError
from service.figures import column_unit, stored_value
from service.lab_tests import service as lab_tests
from service.lab_tests.reduction import Scope, catalogue, reduce_stored, trial_notes
from service.lab_tests.schemas import CorrectionRequest, SendBackRequest, SignOffRequest
from service.projects.models import Project
from service.samples.models import Sample
from service.scope.service import scope_of_test
from service.signoffs.service import performer_ids
from service.web.entries import trial_entries_text
from service.web.htmx import PostedForm, redirect, render
from service.web.pages import layout_context
from service.web.plots import k_per_trial_svg, k_time_svg, ln_head_time_svg, ln_head_trials_svg
from service.web.queue import METHOD_WORDS, StaffUser
from service.web.refusals import Attempt, attempt
from service.web.stages import stages_context

router = APIRouter(include_in_schema=False)

REDUCED_STATES = frozenset(
    {TestState.SUBMITTED, TestState.APPROVED, TestState.ISSUED, TestState.SUPERSEDED}
)
AUDIT_SHOWN = 12
DONE_NOTICES = {
    "approved": "Approved and signed. The test can now go on a certificate.",
    "sent-back": "Sent back to the technician with your reason; the test is running again.",
    "corrected": "Correction ordered: this is the new revision, running again for the "
    "technician. The approved or issued revision stays readable until it is approved.",
}
# The unit of a check's measured value and limit when the check names no kind (a check with
# a kind carries SI values shown in the user's units; "specification" here is for results
# stored before checks named their kind). "%" values are fractions shown as per cent;
# ratios, gradients, B-values and Reynolds numbers have no unit.
CHECK_UNITS = {
    "steady_state": "%",
    "temperature_range": "°C",
    "specification": "m/s",
}
# Audit fields whose values are machine records: listed as changed, values left out.
OPAQUE_FIELDS = frozenset({"result", "default_uncertainties", "input_hash", "options"})
SIGN_OFF_WORDS = {
    "performed": "Performed and submitted",
    "reviewed": "Reviewed",
    "approved": "Approved",
    "issued": "Issued on a certificate",
}


@dataclass(slots=True)
class ActionForms:
    """What was typed into the action forms and what was refused, per form."""

    which: str = ""
    values: dict[str, str] = field(default_factory=dict)
    errors: dict[str, dict[str, str]] = field(default_factory=dict)
    message: str = ""
    stale: dict[str, Any] | None = None

    def error(self, form: str, name: str) -> dict[str, str] | None:
        return self.errors.get(name) if form == self.which else None

    def value(self, form: str, name: str) -> str:
        return self.values.get(name, "") if form == self.which else ""


def _result_of(session: Session, test: Any) -> tuple[dict[str, Any] | None, bool]:
    """(the reduction to review, whether it is the stored one from submission)."""
    if test.state in REDUCED_STATES and test.result:
        return test.result, True
    return reduce_stored(session, test).result, False


def _band_fraction(result: dict[str, Any]) -> float:
    for check in result.get("checks", []):
        if check["id"] == "steady_state" and check.get("limit") and check["limit"] < 1:
            return float(check["limit"])
    return 0.25


def _trial_rows(record: Any, result: dict[str, Any] | None) -> list[dict[str, Any]]:
    included = [t for t in sorted(record.trials, key=lambda t: t.seq) if not t.excluded]
    outputs = result["trials"] if result else []
    notes = trial_notes(result, [t.id for t in included]) if result else {}
    used = set(result["result"]["trials_used"]) if result else set()
    index_of = {t.id: j for j, t in enumerate(included)}
    rows = []
    for trial in sorted(record.trials, key=lambda t: t.seq):
        j = index_of.get(trial.id)
        output = outputs[j] if j is not None and j < len(outputs) else None
        flags = list(notes.get(trial.id, []))
        if not trial.excluded and trial.temperature_c is None:
            flags.append({"status": "warn", "text": "No temperature: k is not corrected."})
        if output and j not in used:
            flags.append({"status": "not_applicable", "text": "Not among the trials averaged."})
        rows.append(
            {
                "trial": trial,
                "output": output,
                "flags": flags,
                "entries": trial_entries_text(trial.entries or {}),
                "readings": len(record.readings.get(trial.id, [])),
            }
        )
    return rows


FALLING_HEAD_METHODS = frozenset({"falling_head", "falling_head_rising_tail"})


def _positive(*values: Any) -> bool:
    return all(isinstance(v, int | float) and v > 0 and math.isfinite(v) for v in values)


def _trial_plots(
    included: list[Any], outputs: list[dict[str, Any]], test: Any, ref_c: float
) -> dict[str, str]:
    """ln h against t of each falling-head trial and k against permeation time, from the
    trials as recorded and the reduction's outputs (its final heads and k)."""
    plots = {"ln_head_trials": "", "k_time": ""}
    pairs = list(zip(included, outputs, strict=False))
    if test.method in FALLING_HEAD_METHODS:
        runs = [
            (t.seq, t.duration_s, t.head_initial_m, out.get("head_final_m") or t.head_final_m)
            for t, out in pairs
        ]
        runs = [run for run in runs if _positive(*run[1:])]
        if runs:
            plots["ln_head_trials"] = ln_head_trials_svg(runs, plot_id="review-ln-head-trials")
    elapsed, points = 0.0, []
    for trial, out in pairs:
        if not _positive(trial.duration_s, out.get("k_ref_m_per_s")):
            return plots  # a trial without a duration: no time axis
        elapsed += trial.duration_s
        points.append((trial.seq, elapsed, out["k_ref_m_per_s"]))
    if points:
        plots["k_time"] = k_time_svg(points, reference_temperature_c=ref_c, plot_id="review-k-time")
    return plots


def _plots(record: Any, result: dict[str, Any] | None, test: Any) -> dict[str, Any]:
    plots: dict[str, Any] = {"k": "", "ln_head": [], "ln_head_trials": "", "k_time": ""}
    included = [t for t in sorted(record.trials, key=lambda t: t.seq) if not t.excluded]
    if result and result["trials"]:
        k_values = [t["k_ref_m_per_s"] for t in result["trials"]]
        ref_c = result.get("reference_temperature_c", 20.0)
        if all(k and k > 0 and math.isfinite(k) for k in k_values):
            plots["k"] = k_per_trial_svg(
                k_values,
                used=result["result"]["trials_used"],
                band_fraction=_band_fraction(result),
                spec_limit=test.spec_k_max_m_per_s,
                reference_temperature_c=ref_c,
                plot_id="review-k-plot",
                numbers=[t.seq for t in included][: len(k_values)]
                if len(included) >= len(k_values)
                else None,
            )
        plots.update(_trial_plots(included, result["trials"], test, ref_c))
    for trial in sorted(record.trials, key=lambda t: t.seq):
        readings = record.readings.get(trial.id, [])
        if len(readings) >= 2 and all(r.head_m > 0 for r in readings):
            svg = ln_head_time_svg(
                [r.time_s for r in readings],
                [r.head_m for r in readings],
                plot_id=f"review-ln-head-{trial.seq}",
                title=f"Trial {trial.seq}: ln(head) against time",
            )
            plots["ln_head"].append((trial.seq, svg))
    return plots


def _short(value: str | None) -> str:
    if value is None:
        return ""
    return value if len(value) <= 40 else value[:39] + "…"


# Audit fields that hold a person's id.
PERSON_FIELDS = frozenset({"technician_id", "requested_by_id"})
# Audit fields whose names say too little on their own.
AUDIT_WORDS = {
    "state": "State",
    "result_k_ref": "Result, k at the reference temperature",
    "spec_k_max": "Specification limit on k",
    "technician_id": "Technician",
    "requested_by_id": "Requested by",
    "engine_version": "Engine version",
    "sent_back_reason": "Reason sent back",
    "reference_temperature": "Reference temperature",
}


def audit_field(column: str) -> tuple[str, str]:
    """(label, unit) of an audited column: the method catalogue's label where it has one
    ('cell_pressure_kpa' -> 'Cell pressure', 'kPa'), else the column in words."""
    name, unit = column_unit(column.removesuffix("_text"))
    if column.endswith("_text"):
        unit = ""  # the text carries its own unit
    if name in AUDIT_WORDS:
        return AUDIT_WORDS[name], unit
    for scope in (Scope.TEST, Scope.SPECIMEN, Scope.TRIAL, Scope.OPTION):
        found = catalogue.find(scope, name)
        if found is not None:
            return found.label, unit
    words = name.replace("_", " ")
    return words[:1].upper() + words[1:], unit


def _audit_value(column: str, text: str | None, unit: str, people: dict[int, str]) -> str:
    """One audited value for reading: a person by name, a method by its name, a figure
    rounded with its unit, a time in the laboratory's zone."""
    if column in PERSON_FIELDS and text and text.isdigit():
        return people.get(int(text), f"user {text}")
    if column == "method" and text:
        return catalogue.method_name(text)
    return _short(stored_value(text, unit, get_settings().lab_timezone))


def _change(e: Any, people: dict[int, str]) -> dict[str, Any]:
    label, unit = audit_field(e.field)
    opaque = e.field in OPAQUE_FIELDS
    old = "" if opaque or e.old_value is None else _audit_value(e.field, e.old_value, unit, people)
    return {
        "field": label,
        "old": old,
        "new": "" if opaque else _audit_value(e.field, e.new_value, unit, people),
        "opaque": opaque,
    }


def audit_summary(events: list[Any], people: dict[int, str]) -> dict[str, Any]:
    """The state history, and the latest actions (the fields changed together in one audit
    row), each field by its label with its values rounded and with units (records left
    out)."""
    states = [
        {"when": e.occurred_at, "who": people.get(e.actor_id or 0, "system"), "to": e.new_value}
        for e in events
        if e.field == "state"
    ]
    actions: list[dict[str, Any]] = []
    for e in reversed(events):
        key = (e.chain, e.seq)
        if not actions or actions[-1]["key"] != key:
            if len(actions) == AUDIT_SHOWN:
                break
            who = people.get(e.actor_id or 0, "system")
            actions.append({"key": key, "when": e.occurred_at, "who": who, "changes": []})
        actions[-1]["changes"].insert(0, _change(e, people))
    return {
        "count": len(events),
        "people": sorted({people.get(e.actor_id or 0, "system") for e in events}),
        "states": states,
        "latest": actions,
    }


def _why_not_approve(test: Any, user: User, performed: bool) -> str:
    if test.state != TestState.SUBMITTED:
        return ""
    if not lab_tests.may_review(user):
        return "Approving is for reviewers and lab managers; you can read this review."
    if performed:
        return (
            "You performed this test (you are its technician or signed it as performed). "
            "Nobody approves their own test: another reviewer or lab manager must approve it."
        )
    return ""


def review_context(
    request: Request,
    session: Session,
    user: User,
    test_id: int,
    forms: ActionForms | None = None,
) -> dict[str, Any]:
    record = lab_tests.load_record(session, test_id, actor=user)
    test = record.test
    sample = session.get(Sample, test.sample_id)
    assert sample is not None
    project = session.get(Project, sample.project_id)
    client = session.get(Organisation, project.client_id) if project else None
    result, stored = _result_of(session, test)
    events = history(session, "permeability_test", test_id)
    performers = performer_ids(session, test)
    performed = user.id in performers
    allowed = lab_tests.allowed_actions(test, user, performers=performers)
    people = names_of(
        session,
        {s.user_id for s in record.sign_offs}
        | {e.actor_id or 0 for e in events}
        | {
            int(v)
            for e in events
            if e.field in PERSON_FIELDS
            for v in (e.old_value, e.new_value)
            if v and v.isdigit()
        }
        | {test.technician_id or 0},
    )
    certificates, _ = list_certificates(session, user=user, sample_id=sample.id)
    issued_id = _int(request.query_params.get("issued"))
    Action = lab_tests.Action
    checks = result["checks"] if result else []
    spec_check = next((c for c in checks if c["id"] == "specification"), None)
    k_ref = result["result"]["k_ref_m_per_s"] if result else None
    expanded = result["result"].get("expanded_u_rel") if result else None
    return layout_context(
        request,
        user,
        test=test,
        sample=sample,
        project=project,
        client=client,
        record=record,
        result=result,
        stored=stored,
        trial_rows=_trial_rows(record, result),
        scope_status=scope_of_test(session, test, stored=stored),
        evaluated=[c for c in checks if c["status"] != "not_applicable"],
        skipped=[c for c in checks if c["status"] == "not_applicable"],
        spec_check=spec_check,
        k_ref=k_ref,
        expanded_u=expanded * k_ref if expanded and k_ref else None,
        plots=_plots(record, result, test),
        people=people,
        audit=audit_summary(events, people),
        check_units=CHECK_UNITS,
        certificates=certificates,
        method_words=METHOD_WORDS,
        sign_off_words=SIGN_OFF_WORDS,
        can_approve=Action.APPROVE in allowed,
        why_not_approve=_why_not_approve(test, user, performed),
        can_send_back=Action.SEND_BACK in allowed,
        can_issue=Action.ISSUE in allowed,
        can_correct=Action.CORRECT in allowed,
        read_only=not lab_tests.may_review(user),
        forms=forms or ActionForms(),
        notice=DONE_NOTICES.get(request.query_params.get("done", "")),
        issued_id=issued_id,
        issued_certificate=next((c for c in certificates if c.id == issued_id), None),
        **stages_context(session, test),
    )


def _int(text: str | None) -> int | None:
    return int(text) if text and text.isdigit() else None


@router.get("/tests/{test_id}/review")
def review_page(request: Request, session: SessionDep, user: StaffUser, test_id: int) -> Response:
    """Everything a reviewer needs to approve or send back; other lab staff read it only.
    `?done=` and `?issued=` (set by the actions' redirects) add a notice."""
    context = review_context(request, session, user, test_id)
    return render(request, "tests/review.html", context, fragment="tests/_review_body.html")


def _refused(
    request: Request,
    session: Session,
    user: User,
    test_id: int,
    forms: ActionForms,
    tried: Attempt | None = None,
    status_code: int = 422,
) -> Response:
    """The action forms again, with the message beside the field and what was typed."""
    if tried is not None and tried.refused:
        status_code = tried.status
        forms.message = tried.message
        errors, _ = tried.fields(lambda loc: str(loc[0]) if loc else None)
        forms.errors.update(errors)
        if tried.stale is not None:
            forms.stale = {"yours": tried.stale.yours, "current": tried.stale.current}
        elif forms.errors:
            # The reason sits beside its field; the banner says what it means for the test.
            forms.message = "Nothing was signed or changed: see the message beside the field."
    context = review_context(request, session, user, test_id, forms)
    return render(
        request,
        "tests/review.html",
        context,
        fragment="tests/_review_actions.html",
        status_code=status_code,
    )


def _posted(form: FormData, which: str, names: tuple[str, ...]) -> ActionForms:
    values = {name: str(form.get(name, "")) for name in names}
    return ActionForms(which=which, values=values)


def _version(forms: ActionForms) -> int | None:
    return _int(forms.values.get("version"))


@router.post("/tests/{test_id}/review/approve")
def approve(
    request: Request, session: SessionDep, user: StaffUser, test_id: int, posted: PostedForm
) -> Response:
    """Approve with the reviewer's password re-entered (a signature) against the version read."""
    forms = _posted(posted, "approve", ("password", "note", "version"))
    password = forms.values["password"]
    forms.values["password"] = ""  # a password is never sent back into the page
    if not password:
        forms.errors["password"] = {
            "msg": "Password: re-enter your password to sign the approval.",
            "kind": "missing",
        }
        forms.message = "Nothing was signed: the password is needed."
        return _refused(request, session, user, test_id, forms)
    with attempt(session, catch=(ServiceError,)) as tried:
        data = SignOffRequest(password=password, note=forms.values["note"], version=_version(forms))
        lab_tests.approve_test(session, test_id, data, actor=user)
    if tried.refused:
        return _refused(request, session, user, test_id, forms, tried)
    return redirect(request, f"/tests/{test_id}/review?done=approved")


@router.post("/tests/{test_id}/review/send-back")
def send_back(
    request: Request, session: SessionDep, user: StaffUser, test_id: int, posted: PostedForm
) -> Response:
    """Send a submitted test back to its technician; the reason is required and kept."""
    forms = _posted(posted, "send_back", ("reason", "version"))
    with attempt(session, catch=(ServiceError,)) as tried:
        data = SendBackRequest(reason=forms.values["reason"], version=_version(forms))
        lab_tests.send_back(session, test_id, data, actor=user)
    if tried.refused:
        return _refused(request, session, user, test_id, forms, tried)
    return redirect(request, f"/tests/{test_id}/review?done=sent-back")


@router.post("/tests/{test_id}/review/issue")
def issue(
    request: Request, session: SessionDep, user: StaffUser, test_id: int, posted: PostedForm
) -> Response:
    """Issue the certificate of the test's sample (every approved test on it is reported)."""
    forms = _posted(posted, "issue", ())
    with attempt(session, catch=(ServiceError,)) as tried:
        test = lab_tests.get_test(session, test_id, actor=user)
        certificate = issue_sample_certificate(session, test.sample_id, actor=user)
    if tried.refused:
        return _refused(request, session, user, test_id, forms, tried)
    return redirect(request, f"/tests/{test_id}/review?issued={certificate.id}")


@router.get("/tests/{test_id}/review/draft.pdf")
def draft_certificate(session: SessionDep, user: StaffUser, test_id: int) -> Response:
    """The test's sample certificate as it would be issued now, marked DRAFT and unsigned;
    nothing is stored (reviewers and lab managers, who issue)."""
    if not lab_tests.may_review(user):
        raise PermissionDenied("the draft certificate is for reviewers and lab managers")
    test = lab_tests.get_test(session, test_id, actor=user)
    pdf = draft_sample_certificate(session, test.sample_id, actor=user)
    return Response(
        pdf,
        media_type="application/pdf",
        headers={
            "Content-Disposition": f'inline; filename="draft-sample-{test.sample_id}.pdf"',
            "Cache-Control": "no-store",
        },
    )


@router.post("/tests/{test_id}/review/correction")
def correction(
    request: Request, session: SessionDep, user: StaffUser, test_id: int, posted: PostedForm
) -> Response:
    """Order a correction of an approved or issued test: a new revision, with the reason."""
    forms = _posted(posted, "correction", ("reason",))
    with attempt(session, catch=(ServiceError,)) as tried:
        data = CorrectionRequest(reason=forms.values["reason"])
        new = lab_tests.request_correction(session, test_id, data, actor=user)
    if tried.refused:
        return _refused(request, session, user, test_id, forms, tried)
    return redirect(request, f"/tests/{new.id}/review?done=corrected")
