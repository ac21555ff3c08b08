"""export.json carries a project's compaction series: members with values as typed beside SI,
k20, saturation and classing, the compaction curve and the acceptable zone; a client's export
holds certified k20 only. Check values: tests/series/arrange.py (S by hand; Daniel & Benson
1990, from memory)."""

from __future__ import annotations

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session

from service.common import TestState
from service.series.service import MemberCreate, SeriesCreate, add_member, create_series
from tests.auth_helpers import bearer
from tests.series.arrange import SPECIMENS, SeriesWorld, build


def filled(session: Session, world: SeriesWorld) -> int:
    assert world.project.id is not None
    series = create_series(
        session, world.project.id, SeriesCreate(name="Borrow A"), actor=world.technician
    )
    assert series.id is not None
    for label, w, rho, _k in SPECIMENS:
        data = MemberCreate(
            test_id=world.tests[label].id, label=label, water_content=w, dry_density=rho
        )
        add_member(session, series.id, data, actor=world.technician)
    session.commit()
    return series.id


def test_export_json_carries_the_series(
    session: Session, client: TestClient, world: SeriesWorld
) -> None:
    filled(session, world)
    body = client.get(
        f"/api/v1/projects/{world.project.id}/export.json",
        headers=bearer(session, world.manager),
    ).json()
    (series,) = body["series"]
    assert {"name", "specific_gravity", "spec_k_max_text", "spec_k_max_m_per_s"} <= set(series)
    assert {"members", "compaction_curve", "acceptable_zone"} <= set(series)
    members = {m["label"]: m for m in series["members"]}
    c = members["C"]
    assert c["water_content_text"] == "16.0 %"
    assert c["water_content"] == pytest.approx(0.16)
    assert c["dry_density_text"] == "1.780 g/cm**3"
    assert c["dry_density_kg_per_m3"] == pytest.approx(1780.0)
    assert c["k20_m_per_s"] == 8e-10
    assert c["degree_of_saturation"] == pytest.approx(0.8358, abs=1e-4)  # by hand
    assert c["acceptable"] is True
    assert members["A"]["acceptable"] is False
    assert series["acceptable_zone"]["saturation_bound"] == pytest.approx(0.7213, abs=1e-4)
    assert series["compaction_curve"]["points"] == []


def test_a_clients_export_holds_certified_k20_only(session: Session, client: TestClient) -> None:
    world = build(session, states={"D": TestState.ISSUED})
    filled(session, world)
    body = client.get(
        f"/api/v1/projects/{world.project.id}/export.json",
        headers=bearer(session, world.client_user),
    ).json()
    shown = {m["label"]: m["k20_m_per_s"] for m in body["series"][0]["members"]}
    assert shown["D"] == 3e-10
    assert [label for label, k in shown.items() if k is not None] == ["D"]
