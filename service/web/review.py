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
from service.certificates.service import issue_sample_certificate, list_certificates
from service.common import TestState
from service.deps import SessionDep
from service.errors import ServiceError
from service.lab_tests import service as lab_tests
from service.lab_tests.reduction import reduce_stored, trial_notes
from service.lab_tests.schemas import CorrectionRequest, SendBackRequest, SignOffRequest
from service.projects.models import Project
from service.samples.models import Sample
from service.scope.service import scope_of_test
from service.signoffs.service import performer_ids
from service.web.entries import trial_entries_text
from service.web.htmx import PostedForm, redirect, render
from service.web.pages import layout_context
from service.web.plots import k_per_trial_svg, ln_head_time_svg
from service.web.queue import METHOD_WORDS, StaffUser
from service.web.refusals import Attempt, attempt

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
# The unit each check's measured value and limit are in (the engine's checks carry bare
# numbers; their messages name the unit). "%" values are fractions shown as per cent;
# ratios, gradients, B-values and Reynolds numbers have no unit.
CHECK_UNITS = {
    "steady_state": "%",
    "specimen_size": "mm",
    "temperature_range": "°C",
    "specification": "m/s",
    "hazen": "m/s",
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


def _plots(record: Any, result: dict[str, Any] | None, test: Any) -> dict[str, Any]:
    plots: dict[str, Any] = {"k": "", "ln_head": []}
    if result and result["trials"]:
        k_values = [t["k_ref_m_per_s"] for t in result["trials"]]
        if all(k and k > 0 and math.isfinite(k) for k in k_values):
            plots["k"] = k_per_trial_svg(
                k_values,
                used=result["result"]["trials_used"],
                band_fraction=_band_fraction(result),
                spec_limit=test.spec_k_max_m_per_s,
                reference_temperature_c=result.get("reference_temperature_c", 20.0),
                plot_id="review-k-plot",
            )
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


def audit_summary(events: list[Any], people: dict[int, str]) -> dict[str, Any]:
    """The state history, and the latest changes with short values (records left out)."""
    states = [
        {"when": e.occurred_at, "who": people.get(e.actor_id or 0, "system"), "to": e.new_value}
        for e in events
        if e.field == "state"
    ]
    latest = [
        {
            "when": e.occurred_at,
            "who": people.get(e.actor_id or 0, "system"),
            "field": e.field.replace("_", " "),
            "old": "" if e.field in OPAQUE_FIELDS else _short(e.old_value),
            "new": "" if e.field in OPAQUE_FIELDS else _short(e.new_value),
            "opaque": e.field in OPAQUE_FIELDS,
        }
        for e in events[-AUDIT_SHOWN:][::-1]
    ]
    return {
        "count": len(events),
        "people": sorted({people.get(e.actor_id or 0, "system") for e in events}),
        "states": states,
        "latest": latest,
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
