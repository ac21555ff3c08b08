"""The custody and audit chains detect a row altered or deleted directly in the database, and
name the sample (or record) whose chain broke and the row."""

from __future__ import annotations

import sqlalchemy as sa
from fastapi.testclient import TestClient
from sqlmodel import Session

from service.cli import main as seepline
from tests.reception.conftest import Lab, batch_body, receive


def _run_sql(session: Session, statement: str) -> None:
    # What someone with database access might do behind the application's back.
    session.execute(sa.text(statement))
    session.commit()


def _verify(client: TestClient, lab: Lab, chain: str) -> dict[str, object]:
    response = client.get(f"/api/v1/{chain}/verify", headers=lab.manager_headers)
    assert response.status_code == 200
    return dict(response.json())


def _first_sample(client: TestClient, lab: Lab) -> int:
    response = receive(client, lab, batch_body())
    assert response.status_code == 201
    return int(response.json()["samples"][0]["id"])


def test_custody_row_altered_in_the_database_is_named(
    client: TestClient, session: Session, lab: Lab
) -> None:
    sample_id = _first_sample(client, lab)
    assert _verify(client, lab, "custody")["ok"] is True
    _run_sql(
        session,
        f"UPDATE custody_event SET place = 'Bench 9' WHERE sample_id = {sample_id} AND seq = 2",
    )
    report = _verify(client, lab, "custody")
    assert report["ok"] is False
    assert (report["first_broken_chain"], report["first_broken_seq"]) == (f"sample:{sample_id}", 2)
    assert report["problem"] == f"sample:{sample_id}: row 2 was altered"


def test_custody_row_deleted_in_the_middle_is_named(
    client: TestClient, session: Session, lab: Lab
) -> None:
    sample_id = _first_sample(client, lab)
    _run_sql(session, f"DELETE FROM custody_event WHERE sample_id = {sample_id} AND seq = 1")
    report = _verify(client, lab, "custody")
    assert (report["ok"], report["first_broken_seq"]) == (False, 1)
    assert "missing" in str(report["problem"])


def test_custody_tail_row_deleted_is_detected(
    client: TestClient, session: Session, lab: Lab
) -> None:
    sample_id = _first_sample(client, lab)
    _run_sql(session, f"DELETE FROM custody_event WHERE sample_id = {sample_id} AND seq = 2")
    report = _verify(client, lab, "custody")
    assert (report["ok"], report["first_broken_seq"]) == (False, 2)
    assert "deleted" in str(report["problem"])


def test_audit_row_altered_in_the_database_is_named(
    client: TestClient, session: Session, lab: Lab
) -> None:
    sample_id = _first_sample(client, lab)
    assert _verify(client, lab, "audit")["ok"] is True
    _run_sql(
        session,
        "UPDATE audit_event SET changes = REPLACE(changes, '1.50 m', '9.99 m') "
        f"WHERE chain = 'sample:{sample_id}' AND seq = 1",
    )
    report = _verify(client, lab, "audit")
    assert (report["ok"], report["first_broken_chain"]) == (False, f"sample:{sample_id}")
    assert report["first_broken_seq"] == 1


def test_verify_logs_command_reports_the_broken_row(
    client: TestClient, session: Session, lab: Lab, capsys: object
) -> None:
    sample_id = _first_sample(client, lab)
    assert seepline(["verify-logs"]) == 0
    _run_sql(
        session,
        f"UPDATE custody_event SET note = 'edited' WHERE sample_id = {sample_id} AND seq = 1",
    )
    assert seepline(["verify-logs"]) == 1
    out = capsys.readouterr().out  # type: ignore[attr-defined]
    assert f"custody log: BROKEN at sample:{sample_id} row 1" in out


def test_clients_cannot_run_verification(client: TestClient, lab: Lab) -> None:
    for chain in ("custody", "audit"):
        response = client.get(f"/api/v1/{chain}/verify", headers=lab.client_headers)
        assert response.status_code == 403
