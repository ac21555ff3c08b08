"""The sample page (details, tests, custody timeline, audit history, custody and test-request
forms) and printable sample labels with a QR code of each lab ID, drawn on the server."""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Annotated, Any

import segno
from fastapi import APIRouter, Query, Request
from fastapi.responses import Response
from markupsafe import Markup
from sqlmodel import Session

from service.access import is_client
from service.accounts.models import User
from service.accounts.service import names_of
from service.audit.service import history
from service.common import CustodyKind, TestState
from service.custody.service import CustodyEventIn, add_custody_event, custody_timeline
from service.deps import CurrentUser, LabStaff, SessionDep
from service.errors import InvalidInput, PermissionDenied
from service.lab_tests import service as lab_tests
from service.lab_tests.schemas import REFERENCE_TEMPERATURES_C, TestCreate
from service.projects.models import Location, Project
from service.projects.service import get_project
from service.samples.models import Sample
from service.samples.service import get_sample
from service.web.entries import METHOD_CHOICES, STANDARD_CHOICES
from service.web.htmx import PostedForm, render
from service.web.pages import layout_context
from service.web.refusals import Attempt, attempt, simple_name

router = APIRouter(prefix="/samples", include_in_schema=False)

MAX_LABELS = 200
TEST_LIMIT = 200
# Results a client sees: certified ones only (as in the exports).
CLIENT_RESULT_STATES = frozenset({TestState.ISSUED.value, TestState.SUPERSEDED.value})
CUSTODY_KINDS = tuple(
    (kind.value, kind.value.replace("_", " ").capitalize())
    for kind in CustodyKind
    if kind != CustodyKind.RECEIVED
)
CUSTODY_FIELDS = ("kind", "from_holder", "to_holder", "place", "condition", "note")
TEST_FIELDS = ("method", "standard", "reference_temperature_c")


# --- labels ----------------------------------------------------------------------------------


def qr_svg(text: str) -> Markup:
    """A QR code of `text` as inline SVG markup (scales with its box; no JavaScript)."""
    # The 4-module quiet zone is what ISO/IEC 18004 asks for; scanners need it on a busy label.
    code = segno.make(text, error="m", micro=False)
    svg = code.svg_inline(scale=1, border=4, omitsize=True, svgclass="qr", lineclass="qr__line")
    return Markup(svg)  # segno's own markup; `text` is only encoded into the path


def parse_ids(text: str) -> list[int]:
    """'1,2, 3' -> [1, 2, 3]; anything else a 422 naming the field, the value and the rule."""
    parts = [part.strip() for part in text.split(",") if part.strip()]
    accepted = f"sample numbers separated by commas, e.g. 12,13,14 (at most {MAX_LABELS})"
    bad = [part for part in parts if not part.isdigit()]
    if not parts or bad or len(parts) > MAX_LABELS:
        shown = bad[0] if bad else text[:40]
        msg = f"ids: '{shown}' is not a list of sample numbers; accepted: {accepted}"
        raise InvalidInput(msg, detail=[{"loc": ["query", "ids"], "msg": msg, "type": "ids"}])
    return list(dict.fromkeys(int(part) for part in parts))


def depth_text(sample: Sample) -> str:
    """The depths as typed: '1.50 m – 2.00 m', one of them, or ''."""
    top, bottom = sample.depth_top_text, sample.depth_bottom_text
    if top and bottom:
        return f"{top} – {bottom}"
    return top or bottom


@router.get("/labels")
def labels_page(
    request: Request,
    user: LabStaff,
    session: SessionDep,
    ids: Annotated[str, Query(max_length=4000)] = "",
) -> Response:
    """A sheet of labels: lab ID, project, client's ID, depth and a QR code of the lab ID."""
    labels = []
    projects: dict[int, Project] = {}
    for sample_id in parse_ids(ids):
        sample = get_sample(session, sample_id, user=user)
        if sample.project_id not in projects:
            projects[sample.project_id] = get_project(session, sample.project_id, user=user)
        labels.append(
            {
                "sample": sample,
                "project": projects[sample.project_id],
                "depth": depth_text(sample),
                "qr": qr_svg(sample.lab_id),
            }
        )
    # Back to the project the labels are for (reception's "print labels" comes from there).
    only = next(iter(projects.values())) if len(projects) == 1 else None
    return render(
        request,
        "samples/labels.html",
        layout_context(
            request,
            user,
            labels=labels,
            back_url=f"/projects/{only.id}" if only else "/projects",
            back_label=f"project {only.number}" if only else "the projects",
        ),
        fragment="samples/_labels.html",
    )


# --- the sample page -------------------------------------------------------------------------


def _custody_form(values: Mapping[str, str] | None = None) -> dict[str, str]:
    form = dict.fromkeys(CUSTODY_FIELDS, "")
    form["kind"] = CustodyKind.MOVED.value
    form.update({k: v for k, v in (values or {}).items() if k in CUSTODY_FIELDS})
    return form


def _test_form(values: Mapping[str, str] | None = None) -> dict[str, str]:
    form = {"method": "falling_head", "standard": "", "reference_temperature_c": "20"}
    form.update({k: v for k, v in (values or {}).items() if k in TEST_FIELDS})
    return form


def sample_context(
    request: Request,
    session: Session,
    user: User,
    sample_id: int,
    *,
    custody_form: Mapping[str, str] | None = None,
    custody_errors: Mapping[str, Any] | None = None,
    custody_general: list[str] | None = None,
    test_form: Mapping[str, str] | None = None,
    test_errors: Mapping[str, Any] | None = None,
    test_general: list[str] | None = None,
    saved: str = "",
) -> dict[str, Any]:
    """Everything the sample page shows; a client never gets the audit trail."""
    sample = get_sample(session, sample_id, user=user)
    assert sample.id is not None
    project = get_project(session, sample.project_id, user=user)
    location = session.get(Location, sample.location_id) if sample.location_id else None
    tests, _total = lab_tests.sample_tests(session, sample.id, actor=user, limit=TEST_LIMIT)
    events = list(custody_timeline(session, sample.id))
    client = is_client(user)
    audit = [] if client else history(session, "sample", sample.id)
    people = names_of(
        session,
        [sample.received_by_id]
        + [t.technician_id for t in tests]
        + [e.recorded_by_id for e in events]
        + [a.actor_id for a in audit],
    )
    return layout_context(
        request,
        user,
        sample=sample,
        project=project,
        location=location,
        depth=depth_text(sample),
        tests=tests,
        events=events,
        audit=audit,
        people=people,
        client_view=client,
        client_result_states=CLIENT_RESULT_STATES,
        can_record_custody=not client and sample.disposed_at is None,
        can_request_test=lab_tests.may_request_tests(user) and sample.disposed_at is None,
        custody_kinds=CUSTODY_KINDS,
        custody_form=_custody_form(custody_form),
        custody_errors=custody_errors or {},
        custody_general=custody_general or [],
        methods=METHOD_CHOICES,
        method_names=dict(METHOD_CHOICES),
        standards=STANDARD_CHOICES,
        reference_temperatures=[(f"{t:g}", f"{t:g} °C") for t in REFERENCE_TEMPERATURES_C],
        test_form=_test_form(test_form),
        test_errors=test_errors or {},
        test_general=test_general or [],
        saved=saved,
    )


@router.get("/{sample_id}")
def sample_page(
    sample_id: int, request: Request, user: CurrentUser, session: SessionDep
) -> Response:
    """A sample: details, tests, custody timeline and (lab staff) its audit history."""
    context = sample_context(request, session, user, sample_id)
    return render(request, "samples/sample.html", context, fragment="samples/_sample.html")


def _posted(form: Mapping[str, Any], names: Iterable[str]) -> dict[str, str]:
    return {name: str(form.get(name, "")) for name in names}


@router.post("/{sample_id}/custody")
def custody_submit(
    sample_id: int, request: Request, user: LabStaff, session: SessionDep, posted: PostedForm
) -> Response:
    """Record a custody event. htmx gets the custody section back; a refusal is 422 with the
    message beside the field and everything typed kept."""
    values = _posted(posted, CUSTODY_FIELDS)
    payload = {name: value.strip() for name, value in values.items()}
    with attempt(session, catch=(InvalidInput,)) as tried:
        add_custody_event(session, sample_id, CustodyEventIn.model_validate(payload), actor=user)
    return _section(request, session, user, sample_id, "custody", tried, values, CUSTODY_FIELDS)


def _section(
    request: Request,
    session: Session,
    user: User,
    sample_id: int,
    name: str,
    tried: Attempt,
    values: Mapping[str, str],
    fields: Iterable[str],
) -> Response:
    """A form's section after a save: what was saved, or the refusal beside its fields with
    everything typed kept. `name` is the form ("custody" or "test")."""
    errors, general = tried.fields(simple_name(fields))
    shown: dict[str, Any] = {
        f"{name}_form": values if tried.refused else None,
        f"{name}_errors": errors,
        f"{name}_general": general,
    }
    saved = "" if tried.refused else name
    context = sample_context(request, session, user, sample_id, saved=saved, **shown)
    fragment = "samples/_custody.html" if name == "custody" else "samples/_tests.html"
    return render(
        request, "samples/sample.html", context, fragment=fragment, status_code=tried.status
    )


@router.post("/{sample_id}/tests")
def test_request_submit(
    sample_id: int,
    request: Request,
    user: CurrentUser,
    session: SessionDep,
    posted: PostedForm,
) -> Response:
    """Request a permeability test (lab managers, reviewers, admins); the project's specification
    limit applies. htmx gets the tests section back; a refusal keeps what was chosen."""
    if not lab_tests.may_request_tests(user):
        raise PermissionDenied(
            "requesting a test needs reception, a lab manager, a reviewer or an admin"
        )
    values = _posted(posted, TEST_FIELDS)
    payload: dict[str, Any] = {"method": values["method"].strip()}
    if values["standard"].strip():
        payload["standard"] = values["standard"].strip()
    if values["reference_temperature_c"].strip():
        payload["reference_temperature_c"] = values["reference_temperature_c"].strip()
    with attempt(session) as tried:
        lab_tests.request_test(session, sample_id, TestCreate.model_validate(payload), actor=user)
    return _section(request, session, user, sample_id, "test", tried, values, TEST_FIELDS)
