"""Compaction series through the API: create, members, curve points, removal, permissions,
refusals that name the field, the audit trail, and the acceptable zone against the worked
check values of tests/series/arrange.py (Daniel & Benson 1990, from memory; S by hand)."""

from __future__ import annotations

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session

from service.audit.service import audit_rows
from service.common import Role, TestState
from tests.auth_helpers import bearer
from tests.factories import make_organisation, make_project, make_sample, make_test, make_user
from tests.series.arrange import SPECIMENS, SeriesWorld, build


def open_series(client: TestClient, headers: dict[str, str], world: SeriesWorld, **body) -> dict:
    payload = {"name": "Liner borrow A", "material": "sandy CLAY", "specific_gravity": 2.70}
    payload.update(body)
    response = client.post(
        f"/api/v1/projects/{world.project.id}/series", json=payload, headers=headers
    )
    assert response.status_code == 201, response.text
    return response.json()


def fill(client: TestClient, headers: dict[str, str], world: SeriesWorld, series_id: int) -> None:
    for label, w, rho, _k in SPECIMENS:
        response = client.post(
            f"/api/v1/series/{series_id}/members",
            json={
                "test_id": world.tests[label].id,
                "label": label,
                "water_content": w,
                "dry_density": rho,
            },
            headers=headers,
        )
        assert response.status_code == 201, response.text


def test_series_takes_the_project_limit_and_classes_its_specimens(
    session: Session, client: TestClient, world: SeriesWorld
) -> None:
    headers = bearer(session, world.technician)
    series = open_series(client, headers, world)
    assert series["spec_k_max_text"] == "1e-9 m/s"
    assert series["spec_k_max_m_per_s"] == 1e-9
    fill(client, headers, world, series["id"])
    body = client.get(f"/api/v1/series/{series['id']}", headers=headers).json()
    members = {m["label"]: m for m in body["members"]}
    # typed beside SI: '1.700 g/cm**3' is 1700 kg/m³, '12.0 %' is 0.12 (pint)
    assert members["A"]["dry_density_text"] == "1.700 g/cm**3"
    assert members["A"]["dry_density_kg_per_m3"] == pytest.approx(1700.0)
    assert members["A"]["water_content"] == pytest.approx(0.12)
    # S by hand (tests/engine/test_series.py): A 0.5508, C 0.8358, F 0.7213
    assert members["A"]["degree_of_saturation"] == pytest.approx(0.5508, abs=1e-4)
    assert members["C"]["degree_of_saturation"] == pytest.approx(0.8358, abs=1e-4)
    assert members["F"]["degree_of_saturation"] == pytest.approx(0.7213, abs=1e-4)
    acceptable = sorted(label for label, m in members.items() if m["acceptable"])
    assert acceptable == ["C", "D", "E", "F", "H"]  # k20 ≤ 1e-9 m/s
    zone = body["acceptable_zone"]
    # Hull of C, D, E, F, H (all five vertices, by hand); saturation bound F's 0.7213 (the
    # lowest acceptable S above the highest failing S, B's 0.6963)
    hull = {(round(p["water_content"], 3), round(p["dry_density_kg_per_m3"])) for p in zone["hull"]}
    assert hull == {(0.16, 1780), (0.18, 1760), (0.20, 1720), (0.17, 1650), (0.19, 1600)}
    assert zone["saturation_bound"] == pytest.approx(0.7213, abs=1e-4)
    assert zone["conflicts"] == []
    assert "Daniel & Benson (1990)" in zone["method"]


def test_compaction_curve_points_give_the_optimum(
    session: Session, client: TestClient, world: SeriesWorld
) -> None:
    # Points on ρ_d = 1800 − 8000·(w − 0.15)² kg/m³ (vertex w_opt = 0.15, ρ_d,max = 1800 by
    # construction, worked by hand: 0.11 -> 1787.2, 0.13 -> 1796.8, 0.17 -> 1796.8, 0.19 -> 1787.2)
    headers = bearer(session, world.technician)
    series = open_series(client, headers, world)
    for w, rho in (
        ("11 %", "1787.2 kg/m**3"),
        ("13 %", "1796.8 kg/m**3"),
        ("17 %", "1796.8 kg/m**3"),
        ("19 %", "1787.2 kg/m**3"),
    ):
        response = client.post(
            f"/api/v1/series/{series['id']}/curve-points",
            json={"water_content": w, "dry_density": rho},
            headers=headers,
        )
        assert response.status_code == 201, response.text
    fill(client, headers, world, series["id"])
    body = client.get(f"/api/v1/series/{series['id']}", headers=headers).json()
    curve = body["compaction_curve"]
    assert curve["optimum_water_content"] == pytest.approx(0.15, abs=1e-9)
    assert curve["max_dry_density_kg_per_m3"] == pytest.approx(1800.0, abs=1e-6)
    d = next(m for m in body["members"] if m["label"] == "D")
    assert d["relative_compaction_pct"] == pytest.approx(97.78, abs=0.01)  # 100 × 1760/1800


def test_members_and_points_are_removed_and_audited(
    session: Session, client: TestClient, world: SeriesWorld
) -> None:
    headers = bearer(session, world.technician)
    series = open_series(client, headers, world)
    fill(client, headers, world, series["id"])
    body = client.get(f"/api/v1/series/{series['id']}", headers=headers).json()
    member = body["members"][0]
    gone = client.delete(f"/api/v1/series/{series['id']}/members/{member['id']}", headers=headers)
    assert gone.status_code == 204
    again = client.delete(f"/api/v1/series/{series['id']}/members/{member['id']}", headers=headers)
    assert again.status_code == 404
    body = client.get(f"/api/v1/series/{series['id']}", headers=headers).json()
    assert len(body["members"]) == len(SPECIMENS) - 1
    rows = audit_rows(session, "series_member", member["id"])
    assert len(rows) == 2  # created, deleted
    assert all(r.chain == f"compaction_series:{series['id']}" for r in rows)
    assert len(audit_rows(session, "compaction_series", series["id"])) == 1


def test_stale_version_is_refused_and_an_edit_is_audited(
    session: Session, client: TestClient, world: SeriesWorld
) -> None:
    headers = bearer(session, world.technician)
    series = open_series(client, headers, world)
    url = f"/api/v1/series/{series['id']}"
    edited = client.patch(url, json={"version": 1, "min_saturation": "80 %"}, headers=headers)
    assert edited.status_code == 200, edited.text
    assert edited.json()["min_saturation"] == pytest.approx(0.80)
    stale = client.patch(url, json={"version": 1, "name": "other"}, headers=headers)
    assert stale.status_code == 409


@pytest.mark.parametrize(
    ("body", "field", "words"),
    [
        ({"water_content": "16"}, "water_content", "%"),
        ({"water_content": "sixteen %"}, "water_content", ""),
        ({"dry_density": "1.78"}, "dry_density", "density"),
        # above G_s·ρ_w = 2700 kg/m³: no such soil
        ({"dry_density": "2.80 g/cm**3"}, "dry_density", "2700 kg/m³"),
        ({"dry_density": "-1.7 g/cm**3"}, "dry_density", ""),
        ({"water_content": "1e400 %"}, "water_content", ""),
    ],
)
def test_bad_members_are_refused_naming_the_field(
    session: Session, client: TestClient, world: SeriesWorld, body, field, words
) -> None:
    headers = bearer(session, world.technician)
    series = open_series(client, headers, world)
    payload = {
        "test_id": world.tests["A"].id,
        "water_content": "12 %",
        "dry_density": "1.7 g/cm**3",
    }
    payload.update(body)
    response = client.post(f"/api/v1/series/{series['id']}/members", json=payload, headers=headers)
    assert response.status_code == 422, response.text
    problem = response.json()["errors"][0]
    assert problem["field"] == field
    assert words in problem["msg"] + problem.get("accepted", "")


def test_a_test_of_another_project_is_refused(
    session: Session, client: TestClient, world: SeriesWorld
) -> None:
    other = make_test(session, sample=make_sample(session, project=make_project(session)))
    session.commit()
    headers = bearer(session, world.technician)
    series = open_series(client, headers, world)
    response = client.post(
        f"/api/v1/series/{series['id']}/members",
        json={"test_id": other.id, "water_content": "12 %", "dry_density": "1.7 g/cm**3"},
        headers=headers,
    )
    assert response.status_code == 422
    assert response.json()["errors"][0]["field"] == "test_id"
    twice = {"test_id": world.tests["A"].id, "water_content": "12 %", "dry_density": "1.7 g/cm**3"}
    url = f"/api/v1/series/{series['id']}/members"
    assert client.post(url, json=twice, headers=headers).status_code == 201
    assert client.post(url, json=twice, headers=headers).status_code == 409


def test_clients_read_their_own_series_with_certified_results_only(
    session: Session, client: TestClient
) -> None:
    world = build(session, states={"C": TestState.ISSUED})
    series = open_series(client, bearer(session, world.technician), world)
    fill(client, bearer(session, world.technician), world, series["id"])
    own = bearer(session, world.client_user)
    body = client.get(f"/api/v1/series/{series['id']}", headers=own).json()
    shown = {m["label"]: m["k20_m_per_s"] for m in body["members"]}
    assert shown["C"] == 8e-10
    assert all(k is None for label, k in shown.items() if label != "C")
    # a client may not write, and another client's user does not see the series at all
    refused = client.post(
        f"/api/v1/projects/{world.project.id}/series", json={"name": "x"}, headers=own
    )
    assert refused.status_code == 403
    stranger = make_user(session, role=Role.CLIENT, organisation=make_organisation(session))
    hidden = client.get(f"/api/v1/series/{series['id']}", headers=bearer(session, stranger))
    assert hidden.status_code == 404
    listing = client.get(
        f"/api/v1/projects/{world.project.id}/series", headers=bearer(session, stranger)
    )
    assert listing.status_code == 404


def test_duplicate_series_name_and_bad_limit(
    session: Session, client: TestClient, world: SeriesWorld
) -> None:
    headers = bearer(session, world.manager)
    open_series(client, headers, world)
    url = f"/api/v1/projects/{world.project.id}/series"
    assert client.post(url, json={"name": "Liner borrow A"}, headers=headers).status_code == 409
    bad = client.post(url, json={"name": "B", "spec_k_max": "1e-9 kg"}, headers=headers)
    assert bad.status_code == 422
    assert bad.json()["errors"][0]["field"] == "spec_k_max"
    sat = client.post(url, json={"name": "B", "min_saturation": "120 %"}, headers=headers)
    assert sat.status_code == 422
    assert sat.json()["errors"][0]["field"] == "min_saturation"
