"""The sample register: look-up as a scanner types it, lists, corrections, the disposal list."""

from __future__ import annotations

import itertools
from datetime import datetime, timedelta
from typing import Any

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session

from service.certificates.models import Certificate, CertificateTest
from service.db import utcnow
from service.projects.models import Project
from service.samples.models import Sample
from tests.factories import make_project, make_sample, make_test
from tests.reception.conftest import Lab, batch_body, receive

_codes = itertools.count(1)


def _lookup(client: TestClient, lab: Lab, code: str) -> dict[str, Any]:
    response = client.get(
        "/api/v1/samples/lookup", params={"code": code}, headers=lab.technician_headers
    )
    assert response.status_code == 200, response.text
    return dict(response.json())


def test_lookup_by_lab_id_and_client_id(client: TestClient, lab: Lab) -> None:
    rows = batch_body()["samples"]
    rows[0]["client_sample_id"] = "Bh01-U1"  # mixed case as the client wrote it
    samples = receive(client, lab, batch_body(rows)).json()["samples"]
    lab_id = samples[0]["lab_id"]
    assert [s["id"] for s in _lookup(client, lab, f"  {lab_id}\n")["items"]] == [samples[0]["id"]]
    for typed in ("Bh01-U1", "BH01-U1", "bh01-u1", "bH01-u1 "):
        found = _lookup(client, lab, typed)
        assert [s["id"] for s in found["items"]] == [samples[0]["id"]], typed
    assert _lookup(client, lab, "BH01-B2")["items"][0]["id"] == samples[1]["id"]
    assert _lookup(client, lab, "nothing-like-it")["total"] == 0


def test_empty_lookup_is_refused(client: TestClient, lab: Lab) -> None:
    response = client.get(
        "/api/v1/samples/lookup", params={"code": "   "}, headers=lab.technician_headers
    )
    assert response.status_code == 422
    assert response.json()["errors"][0]["loc"] == ["query", "code"]


def test_sample_list_filters_and_pages(client: TestClient, lab: Lab) -> None:
    receive(client, lab, batch_body())
    receive(client, lab, batch_body(), key="second-batch-01")
    page = client.get(
        "/api/v1/samples",
        params={"project_id": lab.project.id, "limit": 3},
        headers=lab.technician_headers,
    ).json()
    assert (page["total"], len(page["items"])) == (4, 3)
    by_location = client.get(
        "/api/v1/samples", params={"location_id": lab.borehole.id}, headers=lab.client_headers
    ).json()
    assert by_location["total"] == 4


def test_correction_is_versioned_and_audited(client: TestClient, lab: Lab) -> None:
    sample = receive(client, lab, batch_body()).json()["samples"][0]
    url = f"/api/v1/samples/{sample['id']}"
    fixed = client.patch(
        url,
        json={"version": 1, "depth_bottom": "2.10 m", "description": "stiff grey clay"},
        headers=lab.technician_headers,
    )
    assert fixed.status_code == 200, fixed.text
    assert fixed.json()["depth_bottom_m"] == pytest.approx(2.10)
    assert fixed.json()["version"] == 2
    above = client.patch(
        url, json={"version": 2, "depth_bottom": "1 m"}, headers=lab.technician_headers
    )
    assert above.status_code == 422
    assert above.json()["errors"][0]["loc"] == ["body", "depth_bottom"]
    stale = client.patch(url, json={"version": 1, "condition": "x"}, headers=lab.technician_headers)
    assert stale.status_code == 409
    history = client.get(f"/api/v1/audit/sample/{sample['id']}", headers=lab.manager_headers)
    changes = [e for e in history.json()["items"] if e["field"] == "depth_bottom_text"]
    assert [(e["old_value"], e["new_value"]) for e in changes] == [
        (None, "1.95 m"),
        ("1.95 m", "2.10 m"),
    ]
    assert changes[-1]["actor_id"] == lab.technician.id


# --- the disposal list ---------------------------------------------------------------------


def _certificate(
    session: Session,
    lab: Lab,
    project: Project,
    issued_at: datetime,
    *,
    sample: Sample | None = None,
    state: str = "issued",
) -> Certificate:
    serial = next(_codes)
    certificate = Certificate(
        number=f"CERT-{serial}",
        kind="sample" if sample else "project",
        state=state,
        project_id=project.id,
        sample_id=sample.id if sample else None,
        issued_by_id=lab.manager.id,
        issued_at=issued_at,
        pdf=b"%PDF-1.4",
        sha256="0" * 64,
        signature="sig",
        key_id="k1",
        verification_code=f"V{serial:08d}",
    )
    session.add(certificate)
    session.flush()
    return certificate


def test_disposal_list(client: TestClient, session: Session, lab: Lab) -> None:
    now = utcnow()
    project = lab.project  # retention 90 days (the model's default)
    long_kept = make_project(session, client=lab.client_org, number="C1-900", retention_days=365)
    due = make_sample(session, project=project, lab_id="26-7001")
    _certificate(session, lab, project, now - timedelta(days=100), sample=due)
    recent = make_sample(session, project=project, lab_id="26-7002")
    _certificate(session, lab, project, now - timedelta(days=100), sample=recent)
    _certificate(session, lab, project, now - timedelta(days=30), sample=recent)  # latest counts
    gone = make_sample(session, project=project, lab_id="26-7003", disposed_at=now)
    _certificate(session, lab, project, now - timedelta(days=100), sample=gone)
    through_test = make_sample(session, project=project, lab_id="26-7004")
    reported = make_test(session, sample=through_test, state="issued")
    project_cert = _certificate(session, lab, project, now - timedelta(days=120))
    session.add(CertificateTest(certificate_id=project_cert.id, test_id=reported.id))
    still_testing = make_sample(session, project=project, lab_id="26-7005")
    _certificate(session, lab, project, now - timedelta(days=200), sample=still_testing)
    make_test(session, sample=still_testing, series=2, state="running")
    withdrawn = make_sample(session, project=project, lab_id="26-7006")
    _certificate(
        session, lab, project, now - timedelta(days=200), sample=withdrawn, state="withdrawn"
    )
    kept_longer = make_sample(session, project=long_kept, lab_id="26-7007")
    _certificate(session, lab, long_kept, now - timedelta(days=100), sample=kept_longer)
    never_certified = make_sample(session, project=project, lab_id="26-7008")
    assert never_certified.id is not None
    session.commit()

    body = client.get("/api/v1/samples/due-for-disposal", headers=lab.manager_headers).json()
    assert [item["sample"]["lab_id"] for item in body["items"]] == ["26-7004", "26-7001"]
    assert body["total"] == 2
    first = body["items"][1]
    assert first["retention_days"] == 90
    expected = (now - timedelta(days=100) + timedelta(days=90)).date().isoformat()
    assert first["disposal_due_on"] == expected
    assert (
        client.get("/api/v1/samples/due-for-disposal", headers=lab.other_client_headers).json()[
            "total"
        ]
        == 0
    )
    assert (
        client.get("/api/v1/samples/due-for-disposal", headers=lab.client_headers).json()["total"]
        == 2
    )

    # Disposal is a custody event; the sample leaves the list.
    disposed = client.post(
        f"/api/v1/samples/{due.id}/custody",
        json={"kind": "disposed", "note": "to skip"},
        headers=lab.manager_headers,
    )
    assert disposed.status_code == 201
    after = client.get("/api/v1/samples/due-for-disposal", headers=lab.manager_headers).json()
    assert [item["sample"]["lab_id"] for item in after["items"]] == ["26-7004"]
    paged = client.get(
        "/api/v1/samples/due-for-disposal", params={"limit": 1}, headers=lab.manager_headers
    ).json()
    assert (paged["total"], len(paged["items"])) == (1, 1)
