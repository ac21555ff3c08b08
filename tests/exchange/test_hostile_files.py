"""Hostile files in and out: formula injection through a client's schedule, control
characters that once broke a project's XLSX export for good, and workbooks built to exhaust
the server (a decompression bomb, endless columns, giant cells).

Sources: OWASP "CSV Injection" (cells beginning with =, +, -, @, tab or carriage return are
read as formulas by spreadsheet programs; prefix them with an apostrophe); Office Open XML,
ECMA-376 Part 1 §18.3.1.4 (a cell's t="inlineStr"); openpyxl's ILLEGAL_CHARACTERS_RE (the
control characters a worksheet cannot hold)."""

from __future__ import annotations

import csv
import io
import threading
import time
import zipfile
from typing import Any

import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient
from openpyxl import Workbook, load_workbook
from sqlmodel import Session, select

import service.exchange.files as files
from service.common import TestState
from service.samples.models import Sample
from tests.auth_helpers import bearer
from tests.certificates.arrange import World
from tests.exchange.test_imports import post_schedule, sample_count
from tests.factories import make_test

HOSTILE_IDS = (
    '=HYPERLINK("https://attacker.example/x","Open")',
    "+SUM(1,2)",
    "-2+3",
    "@SUM(1+1)",
)


def _export(client: TestClient, headers: dict[str, str], world: World, kind: str) -> Any:
    response = client.get(f"/api/v1/projects/{world.project.id}/results.{kind}", headers=headers)
    assert response.status_code == 200, response.text
    assert response.headers["cache-control"] == "no-store"
    return response


def _receive_hostile_schedule(session: Session, client: TestClient, world: World) -> None:
    """The attack: a client's schedule whose sample IDs are formulas, each sample then tested."""
    rows = "\n".join(
        f'"{sample_id.replace(chr(34), chr(34) * 2)}",BH-07,1.0,tube' for sample_id in HOSTILE_IDS
    )
    schedule = "client_sample_id,location,depth_top [m],sample_type\n" + rows + "\n"
    status, body = post_schedule(
        client, bearer(session, world.manager), world.project.id, schedule, save=True
    )
    assert status == 201, body
    for sample in session.exec(select(Sample).where(Sample.client_sample_id.in_(HOSTILE_IDS))):
        make_test(session, sample=sample, state=TestState.PLANNED)
    session.commit()


def test_formulas_from_a_schedule_are_escaped_in_the_csv(
    session: Session, client: TestClient, world: World
) -> None:
    _receive_hostile_schedule(session, client, world)
    text = _export(client, bearer(session, world.manager), world, "csv").text
    rows = {r["client_sample_id"]: r for r in csv.DictReader(io.StringIO(text))}
    for sample_id in HOSTILE_IDS:
        assert "'" + sample_id in rows, sample_id  # OWASP: a leading apostrophe
        assert float(rows["'" + sample_id]["depth_top [m]"]) == 1.0  # numbers stay numbers
    assert not any(
        cell.startswith(("=", "+", "-", "@")) for r in rows.values() for cell in r.values() if cell
    )


def test_formulas_from_a_schedule_are_text_in_the_xlsx(
    session: Session, client: TestClient, world: World
) -> None:
    _receive_hostile_schedule(session, client, world)
    content = _export(client, bearer(session, world.manager), world, "xlsx").content
    sheet = load_workbook(io.BytesIO(content))["results"]
    header = [cell.value for cell in sheet[1]]
    id_column = header.index("client_sample_id")
    depth_column = header.index("depth_top [m]")
    seen = {}
    for row in sheet.iter_rows(min_row=2):
        assert all(cell.data_type != "f" for cell in row)  # no live formula anywhere
        seen[row[id_column].value] = row[depth_column]
    for sample_id in HOSTILE_IDS:
        depth = seen["'" + sample_id]
        assert depth.value == 1.0
        assert depth.data_type == "n"


def test_a_control_character_in_a_schedule_is_refused_naming_the_cell(
    session: Session, client: TestClient, world: World
) -> None:
    # The attack run: a row with U+000B imported (201), then results.xlsx answered 500 for good.
    schedule = (
        "client_sample_id,location,sample_type,description\nBH-07/U9,BH-07,tube,grey\x0bCLAY\n"
    )
    before = sample_count(session)
    for save in (False, True):
        status, body = post_schedule(
            client, bearer(session, world.manager), world.project.id, schedule, save=save
        )
        assert status == 422, body
        (problem,) = body["errors"]
        assert "row 2, column 4" in problem["msg"]
        assert "U+000B" in problem["msg"]
    assert sample_count(session) == before


def test_control_characters_are_refused_in_every_stored_text(
    session: Session, client: TestClient, world: World
) -> None:
    # One check at the database layer (service/stored_text.py) covers every way in; here a
    # sample's description through the API, a field that has no validator of its own.
    response = client.post(
        f"/api/v1/projects/{world.project.id}/samples",
        json={"samples": [{"sample_type": "tube", "description": "grey\x0cCLAY"}]},
        headers={**bearer(session, world.manager), "Idempotency-Key": "hostile-1"},
    )
    assert response.status_code == 422, response.text
    (problem,) = response.json()["errors"]
    assert problem["loc"][-1] == "description"
    assert "U+000C" in problem["msg"]


def test_an_export_survives_a_control_character_stored_before_the_check(
    session: Session, client: TestClient, world: World
) -> None:
    # Text stored before control characters were refused (written here past the ORM).
    session.execute(
        sa.update(Sample).where(Sample.id == world.sample.id).values(client_sample_id="BH\x0b07")
    )
    session.commit()
    headers = bearer(session, world.manager)
    content = _export(client, headers, world, "xlsx").content
    values = [
        c.value for row in load_workbook(io.BytesIO(content))["results"].iter_rows() for c in row
    ]
    assert "BH\ufffd07" in values
    assert "BH\ufffd07" in _export(client, headers, world, "csv").text


def test_identifiers_are_normalised_where_they_are_typed(
    session: Session, client: TestClient, world: World
) -> None:
    # Unicode TR #36 (Security Considerations): bidi overrides and zero-width characters make
    # two different IDs look alike; NFC makes composed and decomposed letters one ID.
    response = client.post(
        f"/api/v1/projects/{world.project.id}/samples",
        json={
            "samples": [
                {"sample_type": "tube", "client_sample_id": "\u202eBH-07\u200b/Cafe\u0301"},
            ]
        },
        headers={**bearer(session, world.manager), "Idempotency-Key": "hostile-2"},
    )
    assert response.status_code == 201, response.text
    assert response.json()["samples"][0]["client_sample_id"] == "BH-07/Caf\u00e9"


# --- workbooks built to exhaust the server ----------------------------------------------------


def _bomb(megabytes: int) -> bytes:
    """A valid XLSX whose one cell is an inline string of `megabytes` MiB: about 1/1000 of
    that once compressed (the attack run's was 1 MB holding 1 GB)."""
    workbook = Workbook()
    sheet = workbook.active
    assert sheet is not None
    sheet.append(["client_sample_id", "sample_type"])
    plain = io.BytesIO()
    workbook.save(plain)
    out = io.BytesIO()
    with zipfile.ZipFile(plain) as source, zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as bomb:
        for item in source.infolist():
            if item.filename != "xl/worksheets/sheet1.xml":
                bomb.writestr(item, source.read(item))
                continue
            with bomb.open(item.filename, "w", force_zip64=True) as part:
                part.write(
                    b'<?xml version="1.0" encoding="UTF-8"?><worksheet xmlns="http://schemas.'
                    b'openxmlformats.org/spreadsheetml/2006/main"><sheetData><row r="1">'
                    b'<c r="A1" t="inlineStr"><is><t>'
                )
                chunk = b"A" * (1024 * 1024)
                for _ in range(megabytes):
                    part.write(chunk)
                part.write(b"</t></is></c></row></sheetData></worksheet>")
    return out.getvalue()


def _while_posting(client: TestClient, post: Any) -> tuple[Any, float, list[float]]:
    """Run `post()` in a thread and time /healthz on the same app until it answers."""
    assert client.get("/healthz").status_code == 200  # warm: the first call sets things up
    answer: list[Any] = []
    thread = threading.Thread(target=lambda: answer.append(post()))
    started = time.perf_counter()
    thread.start()
    latencies = []
    while thread.is_alive() or not latencies:
        begin = time.perf_counter()
        assert client.get("/healthz").status_code == 200
        latencies.append(time.perf_counter() - begin)
    thread.join()
    return answer[0], time.perf_counter() - started, latencies


def test_a_decompression_bomb_is_refused_before_it_is_inflated(
    session: Session, client: TestClient, world: World
) -> None:
    bomb = _bomb(64)
    assert len(bomb) < 1024 * 1024
    headers = bearer(session, world.manager)
    (status, body), elapsed, latencies = _while_posting(
        client,
        lambda: post_schedule(client, headers, world.project.id, bomb, filename="s.xlsx"),
    )
    assert status == 422, body
    (problem,) = body["errors"]
    assert "would expand" in problem["msg"]
    assert "accepted: a workbook of at most 32.0 MiB uncompressed" in problem["msg"]
    assert elapsed < 2.0  # measured about 0.03 s; inflating it took 10 s in the attack run
    assert max(latencies) < 1.0


def test_a_slow_file_is_parsed_off_the_event_loop(
    session: Session, client: TestClient, world: World, monkeypatch: pytest.MonkeyPatch
) -> None:
    # Parsing once ran inside `async def` handlers: /healthz waited 10.6 s behind one file.
    real = files.read_table

    def slow_read_table(*args: Any, **kwargs: Any) -> Any:
        time.sleep(2.0)  # a big, legitimate workbook, parsed while /healthz is timed
        return real(*args, **kwargs)

    monkeypatch.setattr(files, "read_table", slow_read_table)
    headers = bearer(session, world.manager)
    schedule = "client_sample_id,location,sample_type\nBH-07/U8,BH-07,tube\n"
    (status, _body), elapsed, latencies = _while_posting(
        client, lambda: post_schedule(client, headers, world.project.id, schedule)
    )
    assert status == 200
    assert elapsed >= 2.0
    assert len(latencies) > 3
    # On the event loop the parse would hold every /healthz for the whole 2 s; off it, each
    # answers in milliseconds (a generous bound: the machine may be busy with other work).
    assert max(latencies) < 1.0, latencies


@pytest.mark.parametrize(
    ("rows", "words"),
    [
        ([["client_sample_id"] + [f"c{n}" for n in range(150)]], "accepted: at most 100 columns"),
        ([["client_sample_id"], ["X" * 5000]], "accepted: at most 2000 in a cell"),
        ([["client_sample_id"]] + [[f"S{n}"] for n in range(5002)], "accepted: at most 5000"),
    ],
    ids=["columns", "cell", "rows"],
)
def test_workbook_limits_are_refused_naming_the_limit(
    session: Session, client: TestClient, world: World, rows: list[list[str]], words: str
) -> None:
    workbook = Workbook()
    sheet = workbook.active
    assert sheet is not None
    for row in rows:
        sheet.append(row)
    out = io.BytesIO()
    workbook.save(out)
    status, body = post_schedule(
        client, bearer(session, world.manager), world.project.id, out.getvalue(), filename="s.xlsx"
    )
    assert status == 422, body
    assert words in body["errors"][0]["msg"]
