"""Permeability tests: request, conditions, specimen, saturation, sign-offs, corrections and
recomputation under /api/v1 (rules in service/lab_tests/)."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter

from service.api.paging import Paging
from service.deps import CurrentUser, LabStaff, SessionDep
from service.lab_tests import service as lab_tests
from service.lab_tests.schemas import (
    CorrectionRequest,
    LiveReduction,
    RecomputeRead,
    SaturationStepCreate,
    SaturationStepRead,
    SendBackRequest,
    SignOffRequest,
    SpecimenRead,
    SpecimenWrite,
    TestCreate,
    TestRead,
    TestSummary,
    TestUpdate,
)
from service.paging import Page

router = APIRouter(prefix="/api/v1", tags=["tests"])

_ERRORS: dict[int | str, dict[str, Any]] = {
    403: {"description": "Not allowed for your role or assignment, or the password is wrong"},
    404: {"description": "No such test (or not one of your organisation's)"},
    409: {"description": "Wrong state (names it and what is allowed) or a stale version"},
    422: {"description": "A field refused, named with its value and what is accepted"},
}


@router.post(
    "/samples/{sample_id}/tests", status_code=201, response_model=TestRead, responses=_ERRORS
)
def request_test(sample_id: int, data: TestCreate, session: SessionDep, user: LabStaff) -> TestRead:
    """Request a test on a sample (lab manager, reviewer or admin): method, standard, target
    dry density, reference temperature (20 °C, or 10 or 27), temperature correction, and the
    project's specification limit unless `spec_k_max` overrides it. Optionally assign a
    technician and apparatus now."""
    test = lab_tests.request_test(session, sample_id, data, actor=user)
    return lab_tests.read_test(session, test.id or 0, actor=user)


@router.get("/samples/{sample_id}/tests", response_model=Page[TestSummary], responses=_ERRORS)
def list_sample_tests(
    sample_id: int,
    session: SessionDep,
    user: CurrentUser,
    paging: Paging,
) -> Page[TestSummary]:
    """The tests and revisions of a sample (a client sees only its own organisation's)."""
    rows, total = lab_tests.sample_tests(session, sample_id, actor=user, **paging.window)
    return paging.of(rows, total, lambda row: TestSummary.model_validate(row.model_dump()))


@router.get("/tests/{test_id}", response_model=TestRead, responses=_ERRORS)
def read_test(test_id: int, session: SessionDep, user: CurrentUser) -> TestRead:
    """A test with its apparatus, specimen, saturation steps, trials and readings, sign-offs
    and the stored result."""
    return lab_tests.read_test(session, test_id, actor=user)


@router.patch("/tests/{test_id}", response_model=TestRead, responses=_ERRORS)
def update_test(test_id: int, data: TestUpdate, session: SessionDep, user: LabStaff) -> TestRead:
    """Change the request, conditions (permeant, cell/back/effective pressures with units),
    technician or apparatus of a planned or running test, against the `version` you read."""
    lab_tests.update_test(session, test_id, data, actor=user)
    return lab_tests.read_test(session, test_id, actor=user)


@router.post("/tests/{test_id}/start", response_model=TestRead, responses=_ERRORS)
def start_test(test_id: int, session: SessionDep, user: LabStaff) -> TestRead:
    """Planned → running (the first specimen, saturation or trial write does this too)."""
    lab_tests.start_test(session, test_id, actor=user)
    return lab_tests.read_test(session, test_id, actor=user)


@router.patch("/tests/{test_id}/specimen", response_model=SpecimenRead, responses=_ERRORS)
def write_specimen(
    test_id: int, data: SpecimenWrite, session: SessionDep, user: LabStaff
) -> SpecimenRead:
    """Record the specimen, or change the fields sent; each value typed with its unit.
    Once the specimen exists, send its `version`."""
    specimen = lab_tests.write_specimen(session, test_id, data, actor=user)
    return SpecimenRead.model_validate(specimen.model_dump())


@router.post(
    "/tests/{test_id}/saturation",
    status_code=201,
    response_model=SaturationStepRead,
    responses=_ERRORS,
)
def add_saturation_step(
    test_id: int, data: SaturationStepCreate, session: SessionDep, user: LabStaff
) -> SaturationStepRead:
    """Append a back-pressure saturation step and the B-value measured after it."""
    step = lab_tests.add_saturation_step(session, test_id, data, actor=user)
    return SaturationStepRead.model_validate(step.model_dump())


@router.get("/tests/{test_id}/reduction", response_model=LiveReduction, responses=_ERRORS)
def read_live_reduction(test_id: int, session: SessionDep, user: CurrentUser) -> LiveReduction:
    """The reduction of what is recorded now (stores nothing); `pending` names what is missing."""
    return lab_tests.live_reduction(session, test_id, actor=user)


@router.post("/tests/{test_id}/submit", response_model=TestRead, responses=_ERRORS)
def submit_test(
    test_id: int, data: SignOffRequest, session: SessionDep, user: LabStaff
) -> TestRead:
    """Submit with your sign-off (re-enter your password). Refused while any assigned
    apparatus is past its calibration due date; stores the engine's result, its version and
    the input hash."""
    lab_tests.submit_test(session, test_id, data, actor=user)
    return lab_tests.read_test(session, test_id, actor=user)


@router.post("/tests/{test_id}/approve", response_model=TestRead, responses=_ERRORS)
def approve_test(
    test_id: int, data: SignOffRequest, session: SessionDep, user: LabStaff
) -> TestRead:
    """Approve with a reviewer's sign-off (re-enter your password); nobody approves a test
    they performed."""
    lab_tests.approve_test(session, test_id, data, actor=user)
    return lab_tests.read_test(session, test_id, actor=user)


@router.post("/tests/{test_id}/send-back", response_model=TestRead, responses=_ERRORS)
def send_back(test_id: int, data: SendBackRequest, session: SessionDep, user: LabStaff) -> TestRead:
    """Send a submitted test back to its technician with a reason (required)."""
    lab_tests.send_back(session, test_id, data, actor=user)
    return lab_tests.read_test(session, test_id, actor=user)


@router.post(
    "/tests/{test_id}/corrections", status_code=201, response_model=TestRead, responses=_ERRORS
)
def request_correction(
    test_id: int, data: CorrectionRequest, session: SessionDep, user: LabStaff
) -> TestRead:
    """Correct an approved or issued test: creates the next revision (answered here) with the
    reason; the old test points to it and is superseded when the new one is approved."""
    new = lab_tests.request_correction(session, test_id, data, actor=user)
    return lab_tests.read_test(session, new.id or 0, actor=user)


@router.get("/tests/{test_id}/recompute", response_model=RecomputeRead, responses=_ERRORS)
def recompute(test_id: int, session: SessionDep, user: CurrentUser) -> RecomputeRead:
    """Reduce the stored entries again with the current engine: does it match the stored
    result and input hash?"""
    return lab_tests.recompute(session, test_id, actor=user)
