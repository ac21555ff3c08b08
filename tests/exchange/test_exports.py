"""Exports round-trip: export -> parse -> the same numbers as stored; scoping by organisation."""

from __future__ import annotations

import csv
import io
import math

import pytest
from fastapi.testclient import TestClient
from openpyxl import load_workbook
from sqlmodel import Session

from service.certificates.service import issue_sample_certificate
from service.common import Role
from service.exchange.exports import EXPORT_COLUMNS, HEADERS, columns_markdown
from tests.auth_helpers import bearer
from tests.certificates.arrange import World, add_approved_test
from tests.factories import make_organisation, make_user


def issued(session: Session, world: World) -> None:
    assert world.sample.id is not None
    issue_sample_certificate(session, world.sample.id, actor=world.manager)
    session.commit()


def expected(world: World) -> dict[str, float]:
    result = world.test.result
    assert result is not None
    summary = result["result"]
    return {
        "k_ref [m/s]": summary["k_ref_m_per_s"],
        "expanded_uncertainty_rel [%]": summary["expanded_u_rel"] * 100,
        "dry_density [kg/m3]": result["specimen"]["dry_density_kg_per_m3"],
        "void_ratio": result["specimen"]["void_ratio"],
        "depth_top [m]": 4.5,
        "spec_k_max [m/s]": 1e-9,
        "specimen_length [m]": 0.0732,
    }


def test_csv_round_trip_gives_the_stored_numbers(
    session: Session, client: TestClient, world: World
) -> None:
    issued(session, world)
    response = client.get(
        f"/api/v1/projects/{world.project.id}/results.csv",
        headers=bearer(session, world.client_user),
    )
    assert response.status_code == 200
    assert response.headers["content-type"].startswith("text/csv")
    assert "HD-2026-07-results.csv" in response.headers["content-disposition"]
    reader = csv.DictReader(io.StringIO(response.text))
    assert tuple(reader.fieldnames or ()) == HEADERS
    rows = list(reader)
    assert len(rows) == 1
    row = rows[0]
    for header, value in expected(world).items():
        assert float(row[header]) == value, header  # exact: floats written as repr
    assert row["sample_lab_id"] == "26-0107"
    assert row["test_state"] == "issued"
    assert row["compliance"] == "complies"
    assert row["certificate_number"] == "SC-26-0107"
    assert row["trials_used"] == "4"


def test_xlsx_round_trip_gives_the_stored_numbers(
    session: Session, client: TestClient, world: World
) -> None:
    issued(session, world)
    response = client.get(
        f"/api/v1/projects/{world.project.id}/results.xlsx",
        headers=bearer(session, world.manager),
    )
    assert response.status_code == 200
    workbook = load_workbook(io.BytesIO(response.content))
    sheet = workbook["results"]
    values = list(sheet.iter_rows(values_only=True))
    assert tuple(values[0]) == HEADERS
    row = dict(zip(HEADERS, values[1], strict=True))
    for header, value in expected(world).items():
        # Spreadsheet numbers keep 15 significant digits (the precision Excel itself keeps).
        assert row[header] == pytest.approx(value, rel=1e-14), header
    described = [r[0] for r in workbook["columns"].iter_rows(min_row=2, values_only=True)]
    assert tuple(described) == HEADERS


def test_json_export_holds_everything_and_matches_the_table(
    session: Session, client: TestClient, world: World
) -> None:
    issued(session, world)
    body = client.get(
        f"/api/v1/projects/{world.project.id}/export.json",
        headers=bearer(session, world.client_user),
    ).json()
    assert body["format"] == "seepline-project-export"
    assert body["project"]["client_name"] == world.client_org.name
    (sample,) = body["samples"]
    (test,) = sample["tests"]
    assert test["result"]["result"]["k_ref_m_per_s"] == world.test.result_k_ref_m_per_s
    assert test["specimen"]["length_text"] == "73.20 mm"
    assert [t["entries"]["head_initial"] for t in test["trials"]] == [
        "125.0 cm",
        "125.0 cm",
        "124.0 cm",
        "125.0 cm",
    ]
    assert {s["meaning"] for s in test["signoffs"]} == {"performed", "approved", "issued"}
    (certificate,) = body["certificates"]
    assert certificate["is_current"] is True
    assert "pdf" not in certificate
    assert certificate["test_ids"] == [world.test.id]
    assert body["results"]["rows"][0]["k_ref"] == world.test.result_k_ref_m_per_s


def test_clients_get_certified_results_only(
    session: Session, client: TestClient, world: World
) -> None:
    # The arranged test is approved but not yet issued.
    client_rows = client.get(
        f"/api/v1/projects/{world.project.id}/export.json",
        headers=bearer(session, world.client_user),
    ).json()["results"]["rows"]
    assert client_rows == []
    lab = client.get(
        f"/api/v1/projects/{world.project.id}/results.csv", headers=bearer(session, world.manager)
    )
    assert len(list(csv.DictReader(io.StringIO(lab.text)))) == 1


def test_a_client_of_another_organisation_gets_404(
    session: Session, client: TestClient, world: World
) -> None:
    stranger = make_user(session, role=Role.CLIENT, organisation=make_organisation(session))
    headers = bearer(session, stranger)
    for suffix in ("results.csv", "results.xlsx", "export.json"):
        response = client.get(f"/api/v1/projects/{world.project.id}/{suffix}", headers=headers)
        assert response.status_code == 404, suffix


def test_untested_values_are_empty_cells_not_zero(
    session: Session, client: TestClient, world: World
) -> None:
    add_approved_test(
        session,
        sample=world.sample,
        technician=world.technician,
        reviewer=world.reviewer,
        permeameter=world.permeameter,
        series=2,
        spec_text="",
    )
    session.commit()
    response = client.get(
        f"/api/v1/projects/{world.project.id}/results.csv", headers=bearer(session, world.manager)
    )
    rows = list(csv.DictReader(io.StringIO(response.text)))
    second = rows[1]
    assert second["spec_k_max [m/s]"] == ""
    assert second["compliance"] == "no_limit"
    assert second["certificate_number"] == ""
    assert math.isfinite(float(second["k_ref [m/s]"]))


def test_the_column_list_is_documented_and_unique() -> None:
    keys = [c.key for c in EXPORT_COLUMNS]
    assert len(keys) == len(set(keys))
    table = columns_markdown()
    for header in HEADERS:
        assert f"`{header}`" in table
