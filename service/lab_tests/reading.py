"""Reading tests: one test with everything recorded on it, a sample's tests, the lists the
home pages show, and the API's view of a test."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import sqlalchemy as sa
from sqlmodel import Session, col, func, select

from service.access import can_see, get_visible
from service.accounts.models import User
from service.apparatus.models import Apparatus
from service.common import TestState
from service.errors import NotFound
from service.lab_tests import models as tables
from service.lab_tests.models import PermeabilityTest, Reading, SaturationStep, Specimen, Trial
from service.lab_tests.schemas import (
    ApparatusRef,
    ReadingRead,
    SaturationStepRead,
    SignOffRead,
    SpecimenRead,
    TestRead,
    TrialRead,
)
from service.paging import DEFAULT_LIMIT, paginate
from service.samples.models import Sample
from service.signoffs import service as signoffs
from service.signoffs.models import SignOff

ACTIVE_STATES = (TestState.PLANNED, TestState.RUNNING)


def get_test(
    session: Session, test_id: int, *, actor: User, lock: bool = False
) -> PermeabilityTest:
    """The test if `actor` may see it (404 otherwise); `lock` serialises writers on it."""
    if lock:
        test = session.exec(
            select(PermeabilityTest)
            .where(PermeabilityTest.id == test_id)
            .with_for_update()
            .execution_options(populate_existing=True)
        ).first()
        if test is None or not can_see(session, actor, test):
            raise NotFound(f"test {test_id} not found")
        return test
    return get_visible(session, PermeabilityTest, test_id, actor, "test")


def sample_tests(
    session: Session, sample_id: int, *, actor: User, limit: int = DEFAULT_LIMIT, offset: int = 0
) -> tuple[list[PermeabilityTest], int]:
    """One page of the tests and revisions requested on a sample (series, then revision
    order) and how many there are."""
    get_visible(session, Sample, sample_id, actor, "sample")
    query = (
        select(PermeabilityTest)
        .where(PermeabilityTest.sample_id == sample_id)
        .order_by(col(PermeabilityTest.series), col(PermeabilityTest.revision))
    )
    return paginate(session, query, limit=limit, offset=offset)


def apparatus_of(session: Session, test_id: int) -> list[Apparatus]:
    return list(
        session.exec(
            select(Apparatus)
            .join(tables.TestApparatus, col(tables.TestApparatus.apparatus_id) == col(Apparatus.id))
            .where(tables.TestApparatus.test_id == test_id)
            .order_by(col(Apparatus.identifier))
        ).all()
    )


def specimen_of(session: Session, test_id: int) -> Specimen | None:
    return session.exec(select(Specimen).where(Specimen.test_id == test_id)).first()


def saturation_of(session: Session, test_id: int) -> list[SaturationStep]:
    return list(
        session.exec(
            select(SaturationStep)
            .where(SaturationStep.test_id == test_id)
            .order_by(col(SaturationStep.seq))
        ).all()
    )


def trials_of(session: Session, test_id: int) -> list[Trial]:
    return list(
        session.exec(select(Trial).where(Trial.test_id == test_id).order_by(col(Trial.seq))).all()
    )


def trial_with_key(session: Session, test_id: int, key: str) -> int | None:
    """The id of the test's trial written with this idempotency key, if any."""
    return session.exec(
        select(Trial.id).where(Trial.test_id == test_id, Trial.idempotency_key == key)
    ).first()


def readings_of(session: Session, trial_ids: Sequence[int]) -> dict[int, list[Reading]]:
    out: dict[int, list[Reading]] = {trial_id: [] for trial_id in trial_ids}
    if trial_ids:
        rows = session.exec(
            select(Reading)
            .where(col(Reading.trial_id).in_(list(trial_ids)))
            .order_by(col(Reading.trial_id), col(Reading.seq))
        ).all()
        for row in rows:
            out[row.trial_id].append(row)
    return out


@dataclass
class TestRecord:
    """A test with everything recorded on it, as the pages and the API show it."""

    test: PermeabilityTest
    apparatus: list[Apparatus]
    specimen: Specimen | None
    saturation: list[SaturationStep]
    trials: list[Trial]
    readings: dict[int, list[Reading]]
    sign_offs: list[SignOff] = field(default_factory=list)

    @property
    def performers(self) -> set[int]:
        """Who performed the test: its technician and whoever signed it as performed."""
        ids = {s.user_id for s in self.sign_offs if s.meaning == "performed"}
        return ids | ({self.test.technician_id} if self.test.technician_id else set())


def load_record(session: Session, test_id: int, *, actor: User) -> TestRecord:
    test = get_test(session, test_id, actor=actor)
    assert test.id is not None
    trials = trials_of(session, test.id)
    return TestRecord(
        test=test,
        apparatus=apparatus_of(session, test.id),
        specimen=specimen_of(session, test.id),
        saturation=saturation_of(session, test.id),
        trials=trials,
        readings=readings_of(session, [t.id for t in trials if t.id is not None]),
        sign_offs=list(signoffs.sign_offs_of(session, test.id)),
    )


def trial_read(trial: Trial, readings: Sequence[Reading] = ()) -> TrialRead:
    return TrialRead.model_validate(
        {
            **trial.model_dump(),
            "readings": [ReadingRead.model_validate(r.model_dump()) for r in readings],
        }
    )


def describe_test(record: TestRecord) -> TestRead:
    """The API's view of a test record."""
    return TestRead.model_validate(
        {
            **record.test.model_dump(),
            "apparatus": [ApparatusRef.model_validate(a.model_dump()) for a in record.apparatus],
            "specimen": SpecimenRead.model_validate(record.specimen.model_dump())
            if record.specimen
            else None,
            "saturation": [
                SaturationStepRead.model_validate(s.model_dump()) for s in record.saturation
            ],
            "trials": [trial_read(t, record.readings.get(t.id or 0, ())) for t in record.trials],
            "sign_offs": [SignOffRead.model_validate(s.model_dump()) for s in record.sign_offs],
        }
    )


def read_test(session: Session, test_id: int, *, actor: User) -> TestRead:
    """The API's view of one test `actor` may see."""
    return describe_test(load_record(session, test_id, actor=actor))


# --- the lists of the home pages ------------------------------------------------------------


def assigned_tests(session: Session, technician: User) -> list[tuple[PermeabilityTest, Sample]]:
    """A technician's planned and running tests with their samples, earliest due first."""
    query = (
        select(PermeabilityTest, Sample)
        .join(Sample, col(Sample.id) == PermeabilityTest.sample_id)
        .where(
            PermeabilityTest.technician_id == technician.id,
            col(PermeabilityTest.state).in_([s.value for s in ACTIVE_STATES]),
        )
        .order_by(
            col(PermeabilityTest.due_date).is_(None),
            col(PermeabilityTest.due_date),
            col(PermeabilityTest.id),
        )
    )
    return [(test, sample) for test, sample in session.exec(query).all()]


def awaiting_review(session: Session, reviewer: User) -> list[tuple[PermeabilityTest, Sample]]:
    """Submitted tests with their samples, oldest first; nobody reviews their own test, so
    the reviewer's own are left out."""
    query = (
        select(PermeabilityTest, Sample)
        .join(Sample, col(Sample.id) == PermeabilityTest.sample_id)
        .where(
            PermeabilityTest.state == TestState.SUBMITTED.value,
            sa.or_(
                col(PermeabilityTest.technician_id).is_(None),
                col(PermeabilityTest.technician_id) != reviewer.id,
            ),
        )
        .order_by(col(PermeabilityTest.submitted_at), col(PermeabilityTest.id))
    )
    return [(test, sample) for test, sample in session.exec(query).all()]


def state_counts(session: Session) -> dict[str, int]:
    """How many tests stand in each state (every state listed)."""
    rows = session.exec(
        select(PermeabilityTest.state, func.count()).group_by(PermeabilityTest.state)
    ).all()
    counts = {state.value: 0 for state in TestState}
    counts.update({state: int(count) for state, count in rows})
    return counts


def tests_of_samples(session: Session, sample_ids: Sequence[int]) -> list[PermeabilityTest]:
    """Every test of these samples, by sample, series and revision."""
    if not sample_ids:
        return []
    query: Any = (
        select(PermeabilityTest)
        .where(col(PermeabilityTest.sample_id).in_(list(sample_ids)))
        .order_by(
            col(PermeabilityTest.sample_id),
            col(PermeabilityTest.series),
            col(PermeabilityTest.revision),
        )
    )
    return list(session.exec(query).all())
