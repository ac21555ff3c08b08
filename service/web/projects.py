"""Projects: the list (lab staff), a project's page (samples with their state and k20,
locations, exports, reception), and for lab managers the forms to open a project and to add
its locations. A client sees its own organisation's projects only; others answer 404."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Annotated, Any

from fastapi import APIRouter, Query, Request
from fastapi.responses import Response
from sqlmodel import Session

from service.access import is_client
from service.accounts.models import Organisation, User
from service.accounts.service import list_organisations
from service.common import LocationKind, OrganisationKind, TestState
from service.deps import CurrentUser, LabStaff, Manager, SessionDep
from service.errors import PermissionDenied, invalid
from service.lab_tests import service as lab_tests
from service.lab_tests.models import PermeabilityTest
from service.lab_tests.schemas import TestCreate
from service.projects.service import (
    LocationCreate,
    ProjectCreate,
    add_location,
    create_project,
    get_project,
    list_locations,
    list_projects,
    may_manage_projects,
)
from service.samples.service import list_samples, may_receive, samples_of_project
from service.web.entries import METHOD_CHOICES, STANDARD_CHOICES
from service.web.htmx import PostedForm, redirect, render
from service.web.pages import layout_context
from service.web.reception import with_unit
from service.web.refusals import attempt, simple_name

router = APIRouter(prefix="/projects", include_in_schema=False)

PAGE_SIZE = 100
SAMPLE_LIMIT = 500
CLIENT_RESULT_STATES = frozenset({TestState.ISSUED.value, TestState.SUPERSEDED.value})
PROJECT_FIELDS = ("client_id", "number", "name", "site", "turnaround_days", "spec_k_max")
LOCATION_FIELDS = (
    "name",
    "kind",
    "easting_m",
    "northing_m",
    "coordinate_system",
    "ground_level",
    "ground_level_unit",
)
LOCATION_KINDS = tuple((k.value, k.value.replace("_", " ").capitalize()) for k in LocationKind)
LEVEL_UNITS = (("m", "m"), ("ft", "ft"))


def _client_choices(session: Session) -> list[tuple[str, str]]:
    clients, _total = list_organisations(session, limit=500, offset=0, kind=OrganisationKind.CLIENT)
    return [(str(c.id), c.name) for c in clients]


def _project_form(values: Mapping[str, str] | None = None) -> dict[str, str]:
    form = dict.fromkeys(PROJECT_FIELDS, "")
    form["turnaround_days"] = "10"
    form.update({k: v for k, v in (values or {}).items() if k in PROJECT_FIELDS})
    return form


def list_context(
    request: Request,
    session: Session,
    user: User,
    *,
    search: str = "",
    form: Mapping[str, str] | None = None,
    errors: Mapping[str, Any] | None = None,
    general: list[str] | None = None,
) -> dict[str, Any]:
    projects, total = list_projects(
        session, user=user, search=search or None, limit=PAGE_SIZE, offset=0
    )
    choices = _client_choices(session)
    return layout_context(
        request,
        user,
        projects=projects,
        total=total,
        search=search,
        client_names={int(key): name for key, name in choices},
        can_create=may_manage_projects(user),
        client_choices=choices,
        project_form=_project_form(form),
        project_errors=errors or {},
        project_general=general or [],
    )


@router.get("")
def projects_page(
    request: Request,
    user: LabStaff,
    session: SessionDep,
    q: Annotated[str, Query(max_length=100)] = "",
) -> Response:
    """Projects, newest first; a search matches number, name or site."""
    context = list_context(request, session, user, search=q.strip())
    return render(request, "projects/list.html", context, fragment="projects/_list.html")


@router.post("")
def project_create(
    request: Request, user: Manager, session: SessionDep, posted: PostedForm
) -> Response:
    """Open a project (lab managers); the browser then goes to its page. A refusal answers
    with the form, each message beside its field and everything typed kept."""
    values = {name: str(posted.get(name, "")) for name in PROJECT_FIELDS}
    payload: dict[str, Any] = {k: v.strip() for k, v in values.items() if v.strip()}
    with attempt(session) as tried:
        project = create_project(session, ProjectCreate.model_validate(payload), actor=user)
    if not tried.refused:
        return redirect(request, f"/projects/{project.id}")
    errors, general = tried.fields(simple_name(PROJECT_FIELDS))
    context = list_context(request, session, user, form=values, errors=errors, general=general)
    return render(
        request,
        "projects/list.html",
        context,
        fragment="projects/_create.html",
        status_code=tried.status,
    )


# --- one project -----------------------------------------------------------------------------


def _location_form(values: Mapping[str, str] | None = None) -> dict[str, str]:
    form = dict.fromkeys(LOCATION_FIELDS, "")
    form["kind"] = LocationKind.BOREHOLE.value
    form["ground_level_unit"] = "m"
    form.update({k: v for k, v in (values or {}).items() if k in LOCATION_FIELDS})
    return form


def _latest_k(tests: list[PermeabilityTest], client: bool) -> PermeabilityTest | None:
    """The newest test with a stored k20 the viewer may see (clients: certified only)."""
    for test in reversed(tests):
        if test.result_k_ref_m_per_s is None:
            continue
        if client and test.state not in CLIENT_RESULT_STATES:
            continue
        return test
    return None


def project_context(
    request: Request,
    session: Session,
    user: User,
    project_id: int,
    *,
    location_form: Mapping[str, str] | None = None,
    location_errors: Mapping[str, Any] | None = None,
    location_general: list[str] | None = None,
    batch: Mapping[str, Any] | None = None,
    saved: str = "",
) -> dict[str, Any]:
    project = get_project(session, project_id, user=user)
    assert project.id is not None
    client_view = is_client(user)
    locations, _n = list_locations(session, project.id, user=user, limit=500, offset=0)
    samples, sample_total = list_samples(
        session, user=user, project_id=project.id, limit=SAMPLE_LIMIT, offset=0
    )
    samples = sorted(samples, key=lambda s: s.lab_id)
    tests: dict[int, list[PermeabilityTest]] = {}
    for test in lab_tests.tests_of_samples(session, [s.id for s in samples if s.id is not None]):
        tests.setdefault(test.sample_id, []).append(test)
    rows = [
        {
            "sample": sample,
            "tests": tests.get(sample.id or 0, []),
            "result": _latest_k(tests.get(sample.id or 0, []), client_view),
        }
        for sample in samples
    ]
    client = session.get(Organisation, project.client_id)
    return layout_context(
        request,
        user,
        project=project,
        client_name=client.name if client else "",
        locations=locations,
        location_names={loc.id: loc.name for loc in locations},
        rows=rows,
        sample_total=sample_total,
        client_view=client_view,
        can_receive=may_receive(user),
        can_add_location=may_manage_projects(user),
        location_kinds=LOCATION_KINDS,
        level_units=LEVEL_UNITS,
        location_form=_location_form(location_form),
        location_errors=location_errors or {},
        location_general=location_general or [],
        can_request_tests=not client_view and lab_tests.may_request_tests(user),
        methods=METHOD_CHOICES,
        standards=STANDARD_CHOICES,
        batch={"chosen": set(), "method": "", "standard": "", "errors": {}, "general": []}
        | dict(batch or {}),
        saved=saved,
    )


@router.get("/{project_id}")
def project_page(
    project_id: int, request: Request, user: CurrentUser, session: SessionDep
) -> Response:
    """A project: its samples with their tests' state and k20, locations and exports."""
    context = project_context(request, session, user, project_id)
    return render(request, "projects/project.html", context, fragment="projects/_project.html")


def _chosen_ids(posted: Any) -> list[int]:
    """The ticked samples' ids (anything that is not an id is left out)."""
    return [int(v) for v in posted.getlist("sample_ids") if str(v).strip().isdigit()]


@router.post("/{project_id}/tests")
def tests_request(
    project_id: int, request: Request, user: CurrentUser, session: SessionDep, posted: PostedForm
) -> Response:
    """Request one test on every ticked sample of the project (all or none)."""
    if not lab_tests.may_request_tests(user):
        raise PermissionDenied(
            "requesting a test needs reception, a lab manager, a reviewer or an admin"
        )
    project = get_project(session, project_id, user=user)
    chosen = _chosen_ids(posted)
    method = str(posted.get("method", "")).strip()
    standard = str(posted.get("standard", "")).strip()
    with attempt(session) as tried:
        if not chosen:
            raise invalid(
                ("sample_ids",),
                "tick at least one sample",
                kind="missing",
                accepted="one or more samples of this project",
            )
        assert project.id is not None
        ours = {s.id for s in samples_of_project(session, project.id)}
        if any(i not in ours for i in chosen):
            raise invalid(("sample_ids",), "names samples that are not in this project")
        payload = {"method": method} | ({"standard": standard} if standard else {})
        lab_tests.request_tests(session, chosen, TestCreate.model_validate(payload), actor=user)
    if not tried.refused:
        return redirect(request, f"/projects/{project_id}?flash=tests-requested")
    errors, general = tried.fields(simple_name(("sample_ids", "method", "standard")))
    batch = {"chosen": set(chosen), "method": method, "standard": standard}
    context = project_context(
        request, session, user, project_id, batch=batch | {"errors": errors, "general": general}
    )
    return render(request, "projects/project.html", context, status_code=tried.status)


@router.post("/{project_id}/locations")
def location_create(
    project_id: int, request: Request, user: Manager, session: SessionDep, posted: PostedForm
) -> Response:
    """Add a location (lab managers). htmx gets the locations section back; a refusal keeps
    everything typed with the message beside its field."""
    values = {name: str(posted.get(name, "")) for name in LOCATION_FIELDS}
    payload: dict[str, Any] = {
        k: v.strip()
        for k, v in values.items()
        if v.strip() and k not in ("ground_level", "ground_level_unit")
    }
    level = with_unit(values["ground_level"], values["ground_level_unit"] or "m")
    if level is not None:
        payload["ground_level"] = level
    with attempt(session) as tried:
        add_location(session, project_id, LocationCreate.model_validate(payload), actor=user)
    errors, general = tried.fields(simple_name(LOCATION_FIELDS))
    refused = tried.refused
    context = project_context(
        request,
        session,
        user,
        project_id,
        location_form=values if refused else None,
        location_errors=errors,
        location_general=general,
        saved="" if refused else "location",
    )
    return render(
        request,
        "projects/project.html",
        context,
        fragment="projects/_locations.html",
        status_code=tried.status,
    )
