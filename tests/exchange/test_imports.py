"""Imports: logger readings (preview of the reduction) and sample schedules; every error path
names the file's row and column, and nothing is stored when a file is refused."""

from __future__ import annotations

import io
import math

import numpy as np
import pytest
from fastapi.testclient import TestClient
from openpyxl import Workbook
from sqlmodel import Session, func, select

from service.lab_tests.models import Reading, Trial
from service.samples.models import Sample
from tests.auth_helpers import bearer
from tests.certificates.arrange import World
from tests.exchange.conftest import ReadingsWorld

LOGGER_CSV = (
    "elapsed_s,head_cm,probe_temp\n"
    "0,120.0,20.0\n"
    "600,110.7,20.0\n"
    "1200,102.0,20.1\n"
    "\n"
    "1800,94.1,20.0\n"
    "2400,86.8,20.0\n"
    "3000,80.0,20.0\n"
)


def post_readings(
    client: TestClient,
    headers: dict[str, str],
    test_id: int | None,
    content: str | bytes,
    *,
    filename: str = "logger.csv",
    **fields: str,
) -> tuple[int, dict]:
    data = {
        "test_id": str(test_id),
        "time_column": "elapsed_s",
        "head_column": "head_cm",
        "time_unit": "s",
        "head_unit": "cm",
        **fields,
    }
    raw = content.encode() if isinstance(content, str) else content
    response = client.post(
        "/api/v1/imports/readings/preview",
        data=data,
        files={"file": (filename, raw, "text/csv")},
        headers=headers,
    )
    return response.status_code, response.json()


def test_readings_preview_reduces_like_the_falling_head_regression(
    session: Session, client: TestClient, readings_world: ReadingsWorld
) -> None:
    headers = bearer(session, readings_world.world.technician)
    status, body = post_readings(
        client, headers, readings_world.test.id, LOGGER_CSV, temperature="20.0 degC"
    )
    assert status == 200, body
    assert body["trial"]["readings"][1] == {"time": "600 s", "head": "110.7 cm"}
    assert body["trial"]["temperature"] == "20.0 degC"
    assert body["rows"] == [2, 3, 4, 6, 7, 8]  # the blank line 5 is skipped
    # Falling head, constant tailwater: ln h = ln h0 - (k·A/(a·L))·t (Darcy; ASTM D5856 form),
    # slope by least squares over all readings (common practice, no source).
    times = np.array([0, 600, 1200, 1800, 2400, 3000], dtype=float)
    heads = np.array([120.0, 110.7, 102.0, 94.1, 86.8, 80.0]) / 100
    slope = np.polyfit(times, np.log(heads), 1)[0]
    area = math.pi * 0.0508**2 / 4
    expected_k = -slope * 0.300e-4 * 0.100 / area
    k = body["reduction"]["trials"][0]["k_m_per_s"]
    assert k == pytest.approx(expected_k, rel=1e-6)


def test_readings_by_column_number_and_other_units(
    session: Session, client: TestClient, readings_world: ReadingsWorld
) -> None:
    content = "t_min;h_mm\n0;1200\n10;1107\n20;1020\n"
    status, body = post_readings(
        client,
        bearer(session, readings_world.world.technician),
        readings_world.test.id,
        content,
        time_column="1",
        head_column="2",
        time_unit="min",
        head_unit="mm",
    )
    assert status == 200, body
    assert body["trial"]["readings"][2] == {"time": "20 min", "head": "1020 mm"}


@pytest.mark.parametrize(
    ("content", "fields", "loc", "words"),
    [
        (
            LOGGER_CSV,
            {"time_column": "seconds"},
            ["body", "time_column"],
            "Time column: is not a column",
        ),
        (LOGGER_CSV, {"head_column": "elapsed_s"}, ["body", "head_column"], "same column"),
        (LOGGER_CSV, {"head_unit": "kg"}, ["body", "head_unit"], "not a length"),
        (LOGGER_CSV, {"time_unit": "parsecs"}, ["body", "time_unit"], "is not a time"),
        (
            "elapsed_s,head_cm\n0,120\n60,abc\n",
            {},
            ["file", "row", 3, "column", "head_cm"],
            "Row 3 · head_cm: is not a number",
        ),
        (
            "elapsed_s,head_cm\n0,120\n-5,110\n",
            {},
            ["file", "row", 3, "column", "elapsed_s"],
            "is negative",
        ),
        (
            "elapsed_s,head_cm\n0,120\n60,0\n",
            {},
            ["file", "row", 3, "column", "head_cm"],
            "is not above zero",
        ),
        (
            "elapsed_s,head_cm\n0,120\n60,110\n60,100\n",
            {},
            ["file", "row", 4, "column", "elapsed_s"],
            "does not come after",
        ),
        (
            "elapsed_s,head_cm\n0,120\n60,nan\n",
            {},
            ["file", "row", 3, "column", "head_cm"],
            "not a finite number",
        ),
        (
            "elapsed_s,head_cm\n0,120\n60,\n",
            {},
            ["file", "row", 3, "column", "head_cm"],
            "Row 3 · head_cm: is empty",
        ),
        ("elapsed_s,head_cm\n0,120\n", {}, ["file"], "has 1 reading(s)"),
        ("", {}, ["body", "file"], "is empty"),
        ("\n\n", {}, ["body", "file"], "is empty"),
        (
            "elapsed_s,head_cm\n0,100\n600,110\n1200,120\n",
            {},
            ["file", "row", 3, "column", "head_cm"],
            "Row 3 · head_cm: ",
        ),
    ],
)
def test_every_readings_error_names_its_place(
    session: Session,
    client: TestClient,
    readings_world: ReadingsWorld,
    content: str,
    fields: dict[str, str],
    loc: list,
    words: str,
) -> None:
    status, body = post_readings(
        client,
        bearer(session, readings_world.world.technician),
        readings_world.test.id,
        content,
        **fields,
    )
    assert status == 422, body
    problems = body["errors"]
    assert any(p["loc"] == loc and words in p["msg"] for p in problems), problems


def test_readings_file_that_is_not_text_or_not_csv(
    session: Session, client: TestClient, readings_world: ReadingsWorld
) -> None:
    headers = bearer(session, readings_world.world.technician)
    status, body = post_readings(client, headers, readings_world.test.id, b"\xff\xfe\x00bad")
    assert status == 422
    assert "not UTF-8" in body["errors"][0]["msg"]
    status, body = post_readings(
        client, headers, readings_world.test.id, LOGGER_CSV, filename="logger.pdf"
    )
    assert status == 422
    assert "not a CSV or XLSX" in body["errors"][0]["msg"]
    status, body = post_readings(
        client, headers, readings_world.test.id, b"PK\x03\x04broken", filename="x.xlsx"
    )
    assert status == 422
    assert "not a readable XLSX" in body["errors"][0]["msg"]


def test_readings_preview_respects_access(
    session: Session, client: TestClient, readings_world: ReadingsWorld
) -> None:
    client_status, _ = post_readings(
        client,
        bearer(session, readings_world.world.client_user),
        readings_world.test.id,
        LOGGER_CSV,
    )
    assert client_status == 403
    missing_status, _ = post_readings(
        client, bearer(session, readings_world.world.technician), 999_999, LOGGER_CSV
    )
    assert missing_status == 404


def test_readings_wrong_temperature_unit_is_named(
    session: Session, client: TestClient, readings_world: ReadingsWorld
) -> None:
    status, body = post_readings(
        client,
        bearer(session, readings_world.world.technician),
        readings_world.test.id,
        LOGGER_CSV,
        temperature="20 C",
    )
    assert status == 422
    assert body["errors"][0]["loc"] == ["body", "temperature"]
    assert "degC" in body["errors"][0]["msg"]


# --- schedules -------------------------------------------------------------------------

SCHEDULE_CSV = (
    "client_sample_id,location,depth_top [m],depth_bottom [m],sample_type,description,"
    "seal_intact,priority\n"
    "BH-07/U5,BH-07,6.00,6.45,Tube,Firm grey CLAY,yes,normal\n"
    "BH-07/U6,bh-07,7.50,7.95,tube,Stiff grey CLAY,no,urgent\n"
)


def post_schedule(
    client: TestClient,
    headers: dict[str, str],
    project_id: int | None,
    content: str | bytes,
    *,
    filename: str = "schedule.csv",
    save: bool = False,
) -> tuple[int, dict]:
    raw = content.encode() if isinstance(content, str) else content
    response = client.post(
        "/api/v1/imports/schedules" if save else "/api/v1/imports/schedules/preview",
        data={"project_id": str(project_id), "delivered_by": "courier"},
        files={"file": (filename, raw, "text/csv")},
        headers=headers,
    )
    return response.status_code, response.json()


def sample_count(session: Session) -> int:
    session.commit()  # end the read transaction: see what the app committed since
    return int(session.exec(select(func.count()).select_from(Sample)).one())


def test_schedule_preview_then_save(session: Session, client: TestClient, world: World) -> None:
    headers = bearer(session, world.manager)
    before = sample_count(session)
    status, body = post_schedule(client, headers, world.project.id, SCHEDULE_CSV)
    assert status == 200, body
    assert body["ok"] is True
    assert [r["row"] for r in body["rows"]] == [2, 3]
    assert body["rows"][0]["depth_top"] == "6.00 m"
    assert sample_count(session) == before  # a preview stores nothing
    status, body = post_schedule(client, headers, world.project.id, SCHEDULE_CSV, save=True)
    assert status == 201, body
    assert [s["client_sample_id"] for s in body["samples"]] == ["BH-07/U5", "BH-07/U6"]
    assert body["samples"][1]["depth_bottom_m"] == pytest.approx(7.95)
    assert body["samples"][1]["seal_intact"] is False
    assert body["samples"][0]["location_id"] == world.location.id
    assert sample_count(session) == before + 2


def test_schedule_from_xlsx(session: Session, client: TestClient, world: World) -> None:
    workbook = Workbook()
    sheet = workbook.active
    assert sheet is not None
    sheet.append(["client_sample_id", "location", "depth_top", "sample_type"])
    sheet.append(["TP-1/B1", "BH-07", "0.5 m", "bulk"])
    sheet.append(["TP-1/B2", "BH-07", "1.2 m", "bulk"])
    out = io.BytesIO()
    workbook.save(out)
    status, body = post_schedule(
        client,
        bearer(session, world.manager),
        world.project.id,
        out.getvalue(),
        filename="schedule.xlsx",
        save=True,
    )
    assert status == 201, body
    assert [s["depth_top_text"] for s in body["samples"]] == ["0.5 m", "1.2 m"]


@pytest.mark.parametrize(
    ("content", "loc", "words"),
    [
        (
            "client_sample_id,colour,sample_type\nA,red,tube\n",
            ["file", "row", 1, "column", "colour"],
            "not a schedule column",
        ),
        ("client_sample_id,location\nA,BH-07\n", ["file", "row", 1], "no 'sample_type' column"),
        (
            "sample_type,sample_type\ntube,tube\n",
            ["file", "row", 1, "column", "sample_type"],
            "appears twice",
        ),
        (
            "sample_type,depth_top [kg]\ntube,1\n",
            ["file", "row", 1, "column", "depth_top [kg]"],
            "not a length",
        ),
        (
            "client_sample_id,sample_type\nA,tube\nB,barrel\n",
            ["file", "row", 3, "column", "sample_type"],
            "Row 3 · sample_type: ",
        ),
        (
            "sample_type,seal_intact\ntube,maybe\n",
            ["file", "row", 2, "column", "seal_intact"],
            "is not yes or no",
        ),
        (
            "sample_type,depth_top [m]\ntube,deep\n",
            ["file", "row", 2, "column", "depth_top [m]"],
            "is not a number of m",
        ),
        (
            "sample_type,location\ntube,BH-07\ntube,BH-99\n",
            ["file", "row", 3, "column", "location"],
            "no location named 'BH-99'",
        ),
        (
            "sample_type,depth_top,depth_bottom\ntube,2 m,1 m\n",
            ["file", "row", 2, "column", "depth_bottom"],
            "is above the top depth",
        ),
        (
            "sample_type,depth_top\ntube,2 kg\n",
            ["file", "row", 2, "column", "depth_top"],
            "Row 2 · depth_top: ",
        ),
        (
            "client_sample_id,sample_type\nA,tube\na,tube\n",
            ["file", "row", 3, "column", "client_sample_id"],
            "is also row 2",
        ),
        ("client_sample_id,sample_type\n", ["file"], "no data rows"),
        ("sample_type,priority\ntube,whenever\n", ["file", "row", 2, "column", "priority"], ""),
    ],
)
def test_every_schedule_error_names_its_place_and_stores_nothing(
    session: Session,
    client: TestClient,
    world: World,
    content: str,
    loc: list,
    words: str,
) -> None:
    headers = bearer(session, world.manager)
    before = sample_count(session)
    status, body = post_schedule(client, headers, world.project.id, content)
    assert status == 200
    assert body["ok"] is False
    assert any(p["loc"] == loc and words in p["msg"] for p in body["errors"]), body["errors"]
    status, body = post_schedule(client, headers, world.project.id, content, save=True)
    assert status == 422
    assert any(p["loc"] == loc for p in body["errors"])
    assert sample_count(session) == before


def test_schedule_import_respects_access(
    session: Session, client: TestClient, world: World
) -> None:
    status, _ = post_schedule(
        client, bearer(session, world.client_user), world.project.id, SCHEDULE_CSV
    )
    assert status == 403
    status, _ = post_schedule(client, bearer(session, world.manager), 999_999, SCHEDULE_CSV)
    assert status == 404


def test_readings_are_recorded_as_a_trial_once(
    session: Session, client: TestClient, readings_world: ReadingsWorld
) -> None:
    headers = {**bearer(session, readings_world.world.technician), "Idempotency-Key": "log-0001"}
    data = {
        "test_id": str(readings_world.test.id),
        "time_column": "elapsed_s",
        "head_column": "head_cm",
        "time_unit": "s",
        "head_unit": "cm",
        "temperature": "20.0 degC",
    }
    files = {"file": ("logger.csv", LOGGER_CSV.encode(), "text/csv")}
    first = client.post("/api/v1/imports/readings", data=data, files=files, headers=headers)
    assert first.status_code == 201, first.json()
    again = client.post("/api/v1/imports/readings", data=data, files=files, headers=headers)
    assert again.json() == first.json()
    session.commit()
    trials = session.exec(select(Trial).where(Trial.test_id == readings_world.test.id)).all()
    assert len(trials) == 1
    assert trials[0].entries["readings"][5] == {"time": "3000 s", "head": "80.0 cm"}
    readings = session.exec(select(Reading).where(Reading.trial_id == trials[0].id)).all()
    assert len(readings) == 6
    no_key = client.post(
        "/api/v1/imports/readings",
        data=data,
        files=files,
        headers=bearer(session, readings_world.world.technician),
    )
    assert no_key.status_code == 422


def test_the_preview_checks_every_row_in_one_pass(
    session: Session, client: TestClient, world: World
) -> None:
    # File rows (row 1 is the header): 2 a type that is not one, 3 a good row, 4 an unknown
    # location, 5 a bottom above its top, 6 the client ID of row 3 again, 7 a good row.
    content = (
        "client_sample_id,location,depth_top,depth_bottom,sample_type\n"
        "U1,BH-07,1 m,2 m,crate\n"
        "U2,BH-07,1 m,2 m,tube\n"
        "U3,BH-99,1 m,2 m,tube\n"
        "U4,BH-07,3 m,2 m,tube\n"
        "u2,BH-07,4 m,5 m,tube\n"
        "U6,BH-07,6 m,7 m,tube\n"
    )
    headers = bearer(session, world.manager)
    status, body = post_schedule(client, headers, world.project.id, content)
    assert status == 200
    assert body["ok"] is False
    refused = {(p["loc"][2], p["loc"][4]): p["msg"] for p in body["errors"]}
    assert set(refused) == {
        (2, "sample_type"),
        (4, "location"),
        (5, "depth_bottom"),
        (6, "client_sample_id"),
    }
    assert "is also row 3" in refused[(6, "client_sample_id")]
    assert "no location named 'BH-99'" in refused[(4, "location")]
    assert "is above the top depth" in refused[(5, "depth_bottom")]
