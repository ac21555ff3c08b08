"""Each database constraint refuses a bad row with an error that names the constraint."""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

import pytest
import sqlalchemy as sa
from sqlmodel import Session

from service.accounts.models import Organisation
from service.apparatus.models import Apparatus
from service.common import OrganisationKind
from service.lab_tests.models import Specimen, Trial
from service.samples.models import Sample
from tests.factories import make_organisation, make_project, make_sample, make_test


def _refused(session: Session, row: Any, constraint: str) -> None:
    session.add(row)
    with pytest.raises(sa.exc.IntegrityError) as caught:
        session.flush()
    session.rollback()
    message = str(caught.value.orig)
    # PostgreSQL names the constraint; SQLite names the check or the unique columns.
    assert constraint in message or "FOREIGN KEY" in message or "UNIQUE" in message, message


def test_sample_depth_bottom_above_top_is_refused(session: Session) -> None:
    project = make_project(session)
    _refused(
        session,
        Sample(
            lab_id="26-9001",
            project_id=project.id,
            sample_type="tube",
            depth_top_m=3.0,
            depth_bottom_m=2.5,
        ),
        "depth_bottom_below_top",
    )


def test_negative_depth_is_refused(session: Session) -> None:
    project = make_project(session)
    _refused(
        session,
        Sample(lab_id="26-9002", project_id=project.id, sample_type="tube", depth_top_m=-1.0),
        "depth_top_non_negative",
    )


def test_unknown_sample_type_is_refused(session: Session) -> None:
    project = make_project(session)
    _refused(
        session,
        Sample(lab_id="26-9003", project_id=project.id, sample_type="bucket"),
        "sample_type_allowed",
    )


def test_duplicate_lab_id_is_refused(session: Session) -> None:
    sample = make_sample(session, lab_id="26-0001")
    _refused(
        session,
        Sample(lab_id="26-0001", project_id=sample.project_id, sample_type="tube"),
        "uq_sample_lab_id",
    )


def test_duplicate_project_number_per_client_is_refused(session: Session) -> None:
    client = make_organisation(session)
    make_project(session, client=client, number="X-1")
    from service.projects.models import Project

    _refused(
        session,
        Project(client_id=client.id, number="X-1", name="again"),
        "uq_project_client_id_number",
    )


def test_same_project_number_for_another_client_is_allowed(session: Session) -> None:
    make_project(session, number="X-2")
    make_project(session, number="X-2")
    session.flush()


def test_sample_needs_an_existing_project(session: Session) -> None:
    _refused(
        session,
        Sample(lab_id="26-9004", project_id=424242, sample_type="tube"),
        "fk_sample_project_id_project",
    )


def test_non_positive_specimen_length_is_refused(session: Session) -> None:
    test = make_test(session)
    _refused(
        session, Specimen(test_id=test.id, length_m=0.0, length_text="0 mm"), "length_m_positive"
    )


def test_head_that_rises_is_refused(session: Session) -> None:
    test = make_test(session)
    _refused(
        session,
        Trial(test_id=test.id, seq=1, idempotency_key="k1", head_initial_m=0.5, head_final_m=0.7),
        "head_falls",
    )


def test_duplicate_idempotency_key_in_a_test_is_refused(session: Session) -> None:
    test = make_test(session)
    session.add(Trial(test_id=test.id, seq=1, idempotency_key="same"))
    session.flush()
    _refused(
        session,
        Trial(test_id=test.id, seq=2, idempotency_key="same"),
        "uq_trial_test_id_idempotency_key",
    )


def test_unknown_test_state_is_refused(session: Session) -> None:
    sample = make_sample(session)
    from service.lab_tests.models import PermeabilityTest

    _refused(
        session,
        PermeabilityTest(sample_id=sample.id, method="falling_head", state="lost"),
        "state_allowed",
    )


def test_calibration_due_before_calibration_is_refused(session: Session) -> None:
    _refused(
        session,
        Apparatus(
            identifier="X-1",
            kind="balance",
            calibrated_on=datetime(2026, 5, 1, tzinfo=UTC).date(),
            calibration_due=datetime(2026, 4, 1, tzinfo=UTC).date(),
        ),
        "calibration_due_after_calibration",
    )


def test_unknown_organisation_kind_is_refused(session: Session) -> None:
    _refused(session, Organisation(name="Nobody", kind="supplier"), "kind_allowed")


def test_timestamps_come_back_timezone_aware(session: Session) -> None:
    organisation = make_organisation(session, kind=OrganisationKind.LAB)
    session.commit()
    session.expire_all()
    again = session.get(Organisation, organisation.id)
    assert again is not None
    assert again.created_at.tzinfo is not None
    assert again.created_at.utcoffset().total_seconds() == 0


def test_naive_timestamp_is_refused(session: Session) -> None:
    session.add(Organisation(name="Naive", kind="lab", created_at=datetime(2026, 1, 1)))
    with pytest.raises(sa.exc.StatementError, match="naive datetime refused"):
        session.flush()
    session.rollback()
