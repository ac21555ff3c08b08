"""The demo scenario loads into an empty database, covers every state, and loads only once."""

from __future__ import annotations

import sqlalchemy as sa
from sqlmodel import Session, SQLModel, func, select

from service.audit.chain import verify
from service.common import TestState
from service.demo import load_demo
from service.lab_tests.models import PermeabilityTest
from service.samples.models import Sample


def _row_counts(session: Session) -> dict[str, int]:
    return {
        table.name: session.execute(sa.select(func.count()).select_from(table)).scalar_one()
        for table in SQLModel.metadata.sorted_tables
    }


def test_demo_loads_once_and_again_changes_nothing(session: Session) -> None:
    assert load_demo(session) is True
    session.commit()
    first = _row_counts(session)
    assert load_demo(session) is False
    session.commit()
    assert _row_counts(session) == first


def test_demo_covers_every_state_and_about_thirty_samples(session: Session) -> None:
    load_demo(session)
    session.commit()
    states = set(session.exec(select(PermeabilityTest.state)).all())
    assert states == {state.value for state in TestState}
    samples = session.exec(select(func.count()).select_from(Sample)).one()
    assert 25 <= samples <= 35


def test_demo_results_were_made_by_the_engine_and_chains_hold(session: Session) -> None:
    load_demo(session)
    session.commit()
    submitted = session.exec(
        select(PermeabilityTest).where(PermeabilityTest.state == TestState.SUBMITTED)
    ).all()
    assert submitted
    for test in submitted:
        assert test.result is not None
        assert test.engine_version
        assert test.result_k_ref_m_per_s is not None
        assert test.result_k_ref_m_per_s > 0
    assert verify(session, "custody").ok
    assert verify(session, "audit").ok
