"""Receiving a batch of samples: lab IDs, depths as typed, due dates, custody, all-or-nothing."""

from __future__ import annotations

from datetime import date, timedelta

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session, func, select

from service.custody.models import CustodyEvent
from service.idempotency.models import IdempotencyRecord
from service.samples.models import Sample
from tests.reception.conftest import Lab, batch_body, receive


def _count(session: Session, model: type) -> int:
    session.expire_all()
    return int(session.exec(select(func.count()).select_from(model)).one())


def test_batch_gets_lab_ids_depths_due_dates_and_custody(
    client: TestClient, session: Session, lab: Lab
) -> None:
    body = batch_body()
    response = receive(client, lab, body)
    assert response.status_code == 201, response.text
    samples = response.json()["samples"]
    assert [s["client_sample_id"] for s in samples] == ["BH01-U1", "BH01-B2"]
    year = body["received_at"][2:4]
    assert [s["lab_id"] for s in samples] == [f"{year}-0001", f"{year}-0002"]
    # As typed, beside SI metres. 1 ft = 0.3048 m exactly (International Yard and Pound
    # Agreement, 1959), so 5 ft = 1.524 m and 6.5 ft = 1.9812 m.
    first, second = samples
    assert (first["depth_top_text"], first["depth_top_m"]) == ("1.50 m", pytest.approx(1.5))
    assert second["depth_top_text"] == "5 ft"
    assert second["depth_top_m"] == pytest.approx(1.524, rel=1e-12)
    assert second["depth_bottom_m"] == pytest.approx(1.9812, rel=1e-12)
    assert second["location_id"] == lab.borehole.id  # names match regardless of case
    # Due date = receipt date + the project's turnaround (10 days here).
    received_on = date.fromisoformat(body["received_at"][:10])
    assert first["due_date"] == (received_on + timedelta(days=10)).isoformat()
    assert first["storage_place"] == "Cold room A/1"
    assert second["priority"] == "urgent"

    events = client.get(
        f"/api/v1/samples/{first['id']}/custody", headers=lab.technician_headers
    ).json()
    assert [e["kind"] for e in events["items"]] == ["received", "stored"]
    assert events["items"][0]["note"] == "seal intact"
    assert events["items"][1]["place"] == "Cold room A/1"
    only_received = client.get(
        f"/api/v1/samples/{second['id']}/custody", headers=lab.technician_headers
    ).json()
    assert [e["kind"] for e in only_received["items"]] == ["received"]


def test_reception_then_custody_then_verify(client: TestClient, session: Session, lab: Lab) -> None:
    sample = receive(client, lab, batch_body()).json()["samples"][0]
    url = f"/api/v1/samples/{sample['id']}/custody"
    staff = lab.technician_headers
    moved = client.post(url, json={"kind": "moved", "place": "Cold room B/3"}, headers=staff)
    assert moved.status_code == 201, moved.text
    handed = client.post(
        url,
        json={"kind": "handed_to_technician", "from_holder": "store", "to_holder": "Tom Tech"},
        headers=staff,
    )
    assert handed.status_code == 201
    timeline = client.get(url, headers=staff).json()
    assert [e["kind"] for e in timeline["items"]] == [
        "received",
        "stored",
        "moved",
        "handed_to_technician",
    ]
    assert timeline["total"] == 4
    # One chain per sample: its events count 1, 2, 3 ... in the order recorded.
    assert [e["seq"] for e in timeline["items"]] == [1, 2, 3, 4]
    assert all(len(e["prev_hash"]) == 64 for e in timeline["items"])
    # The storage place follows the move.
    assert client.get(f"/api/v1/samples/{sample['id']}", headers=staff).json()["storage_place"] == (
        "Cold room B/3"
    )
    report = client.get("/api/v1/custody/verify", headers=staff).json()
    assert report | {"unanchored_rows": None} == {
        "chain": "custody",
        "rows": 5,  # two received, one stored, the move and the hand-over
        "chains": 2,  # one per sample
        "ok": True,
        "first_broken_seq": None,
        "first_broken_chain": None,
        "problem": "",
        "checkpoint": None,  # no checkpoint signed yet
        "unanchored_rows": None,
        "broken_chains": [],
    }
    assert report["unanchored_rows"] == 5
    assert client.get("/api/v1/audit/verify", headers=staff).json()["ok"] is True


def test_disposal_closes_the_chain(client: TestClient, lab: Lab) -> None:
    sample = receive(client, lab, batch_body()).json()["samples"][0]
    url = f"/api/v1/samples/{sample['id']}/custody"
    staff = lab.manager_headers
    disposed = client.post(url, json={"kind": "disposed", "note": "skip 2"}, headers=staff)
    assert disposed.status_code == 201
    read = client.get(f"/api/v1/samples/{sample['id']}", headers=staff).json()
    assert read["disposed_at"] == disposed.json()["occurred_at"]
    again = client.post(url, json={"kind": "moved", "place": "Bench 2"}, headers=staff)
    assert again.status_code == 409
    assert "disposed" in again.json()["detail"]
    edit = client.patch(
        f"/api/v1/samples/{sample['id']}",
        json={"version": read["version"], "description": "late note"},
        headers=staff,
    )
    assert edit.status_code == 409


def test_custody_event_needs_its_kinds_fields(client: TestClient, lab: Lab) -> None:
    sample = receive(client, lab, batch_body()).json()["samples"][0]
    response = client.post(
        f"/api/v1/samples/{sample['id']}/custody",
        json={"kind": "moved"},
        headers=lab.technician_headers,
    )
    assert response.status_code == 422
    assert response.json()["errors"][0]["loc"] == ["body", "place"]
    unknown = client.post(
        f"/api/v1/samples/{sample['id']}/custody",
        json={"kind": "lost"},
        headers=lab.technician_headers,
    )
    assert unknown.status_code == 422
    assert unknown.json()["errors"][0]["loc"] == ["body", "kind"]


def test_batch_errors_name_row_and_field_and_store_nothing(
    client: TestClient, session: Session, lab: Lab
) -> None:
    rows = [
        {"client_sample_id": f"S{i}", "sample_type": "tube", "depth_top": "1 m"} for i in range(5)
    ]
    rows[1]["location"] = "BH-99"
    rows[2]["depth_top"] = "2 kg"
    rows[3]["depth_bottom"] = "0.5 m"  # above its top of 1 m
    rows[4]["depth_top"] = "-1 m"
    response = receive(client, lab, batch_body(rows))
    assert response.status_code == 422, response.text
    problems = {tuple(p["loc"]): p for p in response.json()["errors"]}
    assert set(problems) == {
        ("body", "samples", 1, "location"),
        ("body", "samples", 2, "depth_top"),
        ("body", "samples", 3, "depth_bottom"),
        ("body", "samples", 4, "depth_top"),
    }
    assert "BH-01" in problems[("body", "samples", 1, "location")]["accepted"]
    assert problems[("body", "samples", 2, "depth_top")]["value"] == "2 kg"
    assert "length" in problems[("body", "samples", 2, "depth_top")]["msg"]
    assert problems[("body", "samples", 2, "depth_top")]["label"] == "Sample 3 · Depth top"
    assert _count(session, Sample) == 0
    assert _count(session, CustodyEvent) == 0
    assert _count(session, IdempotencyRecord) == 0


def test_schema_errors_name_row_and_field(client: TestClient, session: Session, lab: Lab) -> None:
    rows = [{"sample_type": "tube"}, {"sample_type": "bucket"}]
    response = receive(client, lab, batch_body(rows))
    assert response.status_code == 422
    assert response.json()["errors"][0]["loc"] == ["body", "samples", 1, "sample_type"]
    assert _count(session, Sample) == 0


def test_duplicate_client_ids_in_one_batch_are_refused(client: TestClient, lab: Lab) -> None:
    rows = [
        {"client_sample_id": "U1", "sample_type": "tube"},
        {"client_sample_id": "u1", "sample_type": "tube"},
    ]
    response = receive(client, lab, batch_body(rows))
    assert response.status_code == 422
    assert response.json()["errors"][0]["loc"] == ["body", "samples", 1, "client_sample_id"]


def test_future_receipt_is_refused(client: TestClient, lab: Lab) -> None:
    body = batch_body()
    body["received_at"] = "2999-01-01T00:00:00+00:00"
    response = receive(client, lab, body)
    assert response.status_code == 422
    assert response.json()["errors"][0]["loc"] == ["body", "received_at"]


def test_retried_batch_is_stored_once(client: TestClient, session: Session, lab: Lab) -> None:
    body = batch_body()
    first = receive(client, lab, body, key="retry-key-0001")
    again = receive(client, lab, body, key="retry-key-0001")
    assert first.status_code == again.status_code == 201
    assert again.json() == first.json()
    assert again.headers.get("Idempotent-Replayed") == "true"
    assert _count(session, Sample) == 2
    assert _count(session, CustodyEvent) == 3


def test_same_key_with_another_body_is_refused(
    client: TestClient, session: Session, lab: Lab
) -> None:
    body = batch_body()
    assert receive(client, lab, body, key="reused-key-01").status_code == 201
    body["samples"] = body["samples"][:1]
    response = receive(client, lab, body, key="reused-key-01")
    assert response.status_code == 409
    assert _count(session, Sample) == 2


def test_missing_idempotency_key_is_refused(client: TestClient, lab: Lab) -> None:
    response = client.post(
        f"/api/v1/projects/{lab.project.id}/samples",
        json=batch_body(),
        headers=lab.technician_headers,
    )
    assert response.status_code == 422
    assert response.json()["errors"][0]["loc"][0] == "header"


def test_clients_cannot_receive(client: TestClient, lab: Lab) -> None:
    response = client.post(
        f"/api/v1/projects/{lab.project.id}/samples",
        json=batch_body(),
        headers={**lab.client_headers, "Idempotency-Key": "client-key-01"},
    )
    assert response.status_code == 403
