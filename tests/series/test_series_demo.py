"""The demo holds a compaction series of at least four certified specimens, reduced by the
engine from generated burette readings, either side of the optimum of its compaction test."""

from __future__ import annotations

import pytest
from sqlmodel import Session, func, select

from service.accounts.models import User
from service.demo import load_demo
from service.samples.models import Sample
from service.series.models import CompactionSeries
from service.series.service import series_results


def test_demo_has_a_compaction_series_of_four_or_more(session: Session) -> None:
    load_demo(session)
    session.commit()
    series = session.exec(select(CompactionSeries)).one()
    assert series.id is not None
    manager = session.exec(select(User).where(User.email == "manager@larkspur-lab.example")).one()
    results = series_results(session, series.id, user=manager)
    assert len(results.members) >= 4
    assert all(m.k_ref_m_per_s is not None for m in results.members)
    assert all(m.test.state == "issued" for m in results.members)
    # the standard-effort curve peaks between its 14 % and 16 % points (invented data)
    curve = results.analysis.curve
    assert curve is not None
    assert 0.14 < curve.optimum_water_content < 0.16
    # dry of optimum above 1e-9 m/s, wet of it below (the invented k: 6e-9 ... 1.8e-10)
    verdicts = {m.member.label: m.acceptable for m in results.members}
    assert verdicts["CS-1"] is False
    assert verdicts["CS-5"] is True
    assert results.analysis.zone is not None
    assert len(results.analysis.zone.hull) >= 3
    assert session.exec(select(func.count()).select_from(Sample)).one() <= 35


def test_a_client_sees_the_demo_series(session: Session) -> None:
    load_demo(session)
    session.commit()
    client = session.exec(
        select(User).where(User.email == "engineer@orrinbasin-waste.example")
    ).one()
    series = session.exec(select(CompactionSeries)).one()
    assert series.id is not None
    results = series_results(session, series.id, user=client)
    assert [m.k_ref_m_per_s is not None for m in results.members] == [True] * 6
    assert results.members[0].saturation == pytest.approx(0.497, abs=1e-3)  # CS-1 by hand
