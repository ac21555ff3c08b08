"""Trials of a test under /api/v1/tests/{test_id}/trials: idempotent writes, versioned edits,
exclusion with a reason (rules in service/lab_tests/recording.py)."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Header

from service.db import session_scope
from service.deps import LabStaff, SessionDep
from service.lab_tests import service as lab_tests
from service.lab_tests.schemas import TrialCreate, TrialExclusion, TrialUpdate, TrialWritten

router = APIRouter(prefix="/api/v1/tests/{test_id}/trials", tags=["trials"])

_ERRORS: dict[int | str, dict[str, Any]] = {
    403: {"description": "Not the assigned technician or a lab manager"},
    404: {"description": "No such test or trial"},
    409: {
        "description": "The test no longer takes edits (names its state), a stale version, "
        "or an Idempotency-Key reused with a different body"
    },
    422: {
        "description": "Problem details: a field refused by the engine, at the trial's own "
        'field (loc ["body", "head_final"], label "Trial 4 · Head at end"), with the value and '
        "what is accepted; nothing is stored"
    },
}


def prepared_trial(test_id: int, data: TrialCreate) -> lab_tests.PreparedTrial:
    """The trial reduced in a read of its own, before the write gate and the test's lock
    (declared before the session, so it runs first)."""
    with session_scope() as session:
        return lab_tests.prepare_trial(session, test_id, data)


@router.post("", status_code=201, response_model=TrialWritten, responses=_ERRORS)
def record_trial(
    test_id: int,
    prepared: Annotated[lab_tests.PreparedTrial, Depends(prepared_trial)],
    session: SessionDep,
    user: LabStaff,
    idempotency_key: Annotated[
        str | None,
        Header(
            alias="Idempotency-Key",
            description="client-generated, one per new trial (a UUID); a retry sends the same",
        ),
    ] = None,
) -> TrialWritten:
    """Record one trial in the reduction contract's shape, stored exactly as typed. Answers
    the trial and the test's live reduction (per-trial k, k_ref, gradient and the checks).
    A retry with the same key and body gets the same answer and stores nothing."""
    return lab_tests.record_trial(
        session, test_id, prepared, idempotency_key=idempotency_key, actor=user
    )


@router.patch("/{trial_id}", response_model=TrialWritten, responses=_ERRORS)
def update_trial(
    test_id: int, trial_id: int, data: TrialUpdate, session: SessionDep, user: LabStaff
) -> TrialWritten:
    """Change a trial's entries against the `version` you read (null removes a field)."""
    return lab_tests.update_trial(session, test_id, trial_id, data, actor=user)


@router.post("/{trial_id}/exclude", response_model=TrialWritten, responses=_ERRORS)
def exclude_trial(
    test_id: int, trial_id: int, data: TrialExclusion, session: SessionDep, user: LabStaff
) -> TrialWritten:
    """Leave a trial out of the reduction, with the reason (required)."""
    return lab_tests.exclude_trial(session, test_id, trial_id, data, actor=user)


@router.post("/{trial_id}/include", response_model=TrialWritten, responses=_ERRORS)
def include_trial(
    test_id: int, trial_id: int, data: TrialExclusion, session: SessionDep, user: LabStaff
) -> TrialWritten:
    """Take an excluded trial back into the reduction."""
    return lab_tests.exclude_trial(session, test_id, trial_id, data, actor=user, excluded=False)
